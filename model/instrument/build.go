package instrument

import (
	"fmt"
	"math"

	"pdwave/model/modes"
	"pdwave/model/optics"
)

// BasisAperture chooses the pupil a basis is built for.
type BasisAperture int

const (
	// RealAperture builds the basis for the instrument's own pupil and
	// turbulence (modes.NewFor with Instrument.Aperture): what the fit uses.
	RealAperture BasisAperture = iota
	// ClearAperture builds the clear-aperture Kolmogorov basis of
	// modes.New: the basis of simulation truth and of the network's
	// outputs (converted exactly by the learned estimator).
	ClearAperture
)

// Built is what every verb needs from an Instrument: the pupil, the basis
// drawn on it, each channel's diversity phase, the prior variances and the
// output scale. It is read-only once built and safe for concurrent use.
type Built struct {
	Instrument Instrument
	// Oversample is the factor q of the grid: the pupil is qN×qN with the
	// same physical sampling of the pupil plane refined q times.
	Oversample int
	Pupil      *optics.Pupil
	Basis      *modes.Basis
	// Diversity is each channel's defocus phase on the pupil grid, rad
	// (optics.Pupil.Defocus); nil for a channel without defocus.
	Diversity [][]float64
	// Variance is the prior variance of each native mode,
	// σ_m² = Variance_m·(D/r0)^(5/3), rad² (Noll 1976, eq. 25 for the
	// Kolmogorov spectrum; modes.Basis.Variance), tilts included.
	Variance []float64
	// Scale is σ_m = √Variance_m, rad (1 where the variance is 0): the
	// scaling of the optimiser's variables and the network's outputs.
	Scale []float64
}

// Build makes the pupil (on the N×N patch grid), the basis for the chosen
// aperture, the per-channel diversity, the prior variances and the output
// scale of in. It validates in first.
func Build(in Instrument, ap BasisAperture) (*Built, error) {
	return BuildOversampled(in, ap, 1)
}

// BuildOversampled is Build on a q-times finer pupil grid (qN×qN, the
// pupil radius scaled by q): the imaging grid of a simulator that forms
// images beyond the fit's discretisation. q is 1 to 8.
func BuildOversampled(in Instrument, ap BasisAperture, q int) (*Built, error) {
	if err := in.Validate(); err != nil {
		return nil, err
	}
	if q < 1 || q > 8 {
		return nil, fmt.Errorf("instrument: oversampling %d, want 1 to 8", q)
	}
	n := q * in.Patch
	pup, err := optics.NewPupil(in.Telescope, n)
	if err != nil {
		return nil, fmt.Errorf("instrument: pupil for %d px: %w", n, err)
	}
	var b *modes.Basis
	if ap == ClearAperture {
		b, err = modes.New(in.Basis, in.Modes, n, pup.Radius)
	} else {
		b, err = modes.NewFor(in.Basis, in.Modes, n, pup.Radius, in.Aperture())
	}
	if err != nil {
		return nil, fmt.Errorf("instrument: %s basis: %w", in.Basis, err)
	}
	bt := &Built{Instrument: in, Oversample: q, Pupil: pup, Basis: b}
	for _, pv := range in.Diversity {
		if pv == 0 {
			bt.Diversity = append(bt.Diversity, nil)
			continue
		}
		d := make([]float64, n*n)
		pup.Defocus(d, pv)
		bt.Diversity = append(bt.Diversity, d)
	}
	fac := math.Pow(in.DOverR0, 5.0/3)
	bt.Variance = make([]float64, b.Count)
	bt.Scale = make([]float64, b.Count)
	for m := range bt.Variance {
		bt.Variance[m] = b.Variance[m] * fac
		bt.Scale[m] = math.Sqrt(bt.Variance[m])
		if !(bt.Scale[m] > 0) {
			bt.Scale[m] = 1
		}
	}
	return bt, nil
}
