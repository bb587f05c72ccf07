// Package train fits pdwave's wavefront network (model/net) on a CPU.
//
// The loss is unsupervised: for every burst, the phase-diversity objective
// of model/pd (metric normalised by the data power plus the Kolmogorov
// prior) evaluated at the coefficients the network predicts. Its gradient
// with respect to the coefficients is back-propagated through the network
// (net.Graph), so training needs no ground truth and runs on simulated
// bursts or straight on observations. An optional supervised warm start on
// simulated truth may come first. Optimiser: Adam (Kingma & Ba 2015,
// Algorithm 1) with a linear warm-up and cosine decay of the step size.
// Runs are deterministic given the seed and resume exactly from checkpoints.
package train

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"

	"pdwave/model/modes"
	"pdwave/model/net"
	"pdwave/model/optics"
	"pdwave/model/pd"
)

// Setup is what training needs to know about the instrument and the data.
type Setup struct {
	Site        string           // site name, recorded in the weights
	Telescope   optics.Telescope // optics of the data
	DiversityPV float64          // defocus of channel 2, peak-to-valley waves
	R0          float64          // median Fried parameter at the observing wavelength, m (sets the prior and the output scale)
	Patch       int              // patch side N, pixels
	Frames      int              // frames per burst
	Modes       int              // modes estimated, piston excluded
	Basis       modes.Kind       // zernike or kl
}

// Validate reports whether s is usable.
func (s Setup) Validate() error {
	if err := s.Telescope.Validate(); err != nil {
		return fmt.Errorf("train: %w", err)
	}
	switch {
	case s.Patch < 8:
		return fmt.Errorf("train: patch size %d too small", s.Patch)
	case s.Frames < 1:
		return fmt.Errorf("train: %d frames per burst", s.Frames)
	case s.Modes < 2:
		return fmt.Errorf("train: %d modes; need at least the two tilts", s.Modes)
	case !(s.R0 > 0):
		return fmt.Errorf("train: median r0 %g m must be positive", s.R0)
	case !(s.DiversityPV != 0) || math.IsNaN(s.DiversityPV):
		return fmt.Errorf("train: diversity %g waves PV; phase diversity needs a defocused channel", s.DiversityPV)
	}
	return nil
}

// Meta returns the weight-file metadata for s.
func (s Setup) Meta() net.Meta {
	t := s.Telescope
	return net.Meta{
		Site: s.Site, Basis: string(s.Basis), Modes: s.Modes, Patch: s.Patch, Frames: s.Frames,
		Diameter: t.Diameter, Obscuration: t.Obscuration, Wavelength: t.Wavelength,
		PixelScale: t.PixelScale, DiversityPV: s.DiversityPV,
	}
}

// optics bundles the pieces of the metric shared by all workers; read-only.
type problem struct {
	setup     Setup
	pupil     *optics.Pupil
	basis     *modes.Basis
	diversity [][]float64 // per channel: nil (focused), defocus map
	prior     []float64   // σ_m², rad² (tilts +Inf)
	scale     []float64   // output scale σ_m, rad (tilts included)
	fromNoll  *mat.Dense  // native = fromNoll · noll(j = 2..Modes+1)
	settings  pd.Settings
}

func newProblem(s Setup, priorWeight, gamma float64) (*problem, error) {
	if err := s.Validate(); err != nil {
		return nil, err
	}
	pupil, err := optics.NewPupil(s.Telescope, s.Patch)
	if err != nil {
		return nil, fmt.Errorf("train: %w", err)
	}
	basis, err := modes.New(s.Basis, s.Modes, s.Patch, pupil.Radius)
	if err != nil {
		return nil, fmt.Errorf("train: %w", err)
	}
	div := make([]float64, s.Patch*s.Patch)
	pupil.Defocus(div, s.DiversityPV)
	dr := s.Telescope.Diameter / s.R0
	p := &problem{
		setup: s, pupil: pupil, basis: basis,
		diversity: [][]float64{nil, div},
		prior:     pd.KolmogorovPrior(basis, dr),
		settings:  pd.DefaultSettings(),
	}
	p.settings.PriorWeight, p.settings.Gamma = priorWeight, gamma // the fit's objective, with the run's weights
	f := math.Pow(dr, 5.0/3)
	p.scale = make([]float64, s.Modes)
	for m := range p.scale {
		p.scale[m] = math.Sqrt(basis.Variance[m] * f)
	}
	if basis.ToNoll != nil {
		var inv mat.Dense
		if err := inv.Inverse(basis.ToNoll); err != nil {
			return nil, fmt.Errorf("train: basis to Noll matrix not invertible: %w", err)
		}
		p.fromNoll = &inv
	}
	return p, nil
}

// newSolver returns a metric solver for one worker.
func (p *problem) newSolver() *pd.Solver {
	s := pd.NewSolver(p.pupil, p.basis, p.diversity, p.setup.Frames, p.settings)
	s.SetPrior(p.prior)
	return s
}

// nativeFromNoll sets dst (Modes) to the native coefficients whose Noll
// equivalent is noll[0:Modes] (j = 2..Modes+1).
func (p *problem) nativeFromNoll(dst, noll []float64) {
	if p.fromNoll == nil {
		copy(dst, noll[:len(dst)])
		return
	}
	for i := range dst {
		s := 0.0
		for k := range dst {
			s += p.fromNoll.At(i, k) * noll[k]
		}
		dst[i] = s
	}
}
