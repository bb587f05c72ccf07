package net

import (
	"fmt"

	"gonum.org/v1/gonum/mat"

	"pdwave/model/modes"
	"pdwave/model/optics"
)

// Estimator predicts the wavefronts of whole bursts with a Model: features,
// forward pass, and removal of the burst-mean tip/tilt, which the
// phase-diversity metric (and hence the training loss) cannot see. It owns
// buffers and is not safe for concurrent use.
type Estimator struct {
	m     *Model
	basis *modes.Basis
	inv   *mat.Dense // native = inv · noll (nil for Zernike)
	feat  *Featurizer
	pred  *Predictor
	x, y  []float64
}

// NewEstimator builds the pupil and basis the model was made for (from its
// metadata) and returns an Estimator. It returns an error if the metadata
// does not describe a usable telescope, patch and basis.
func NewEstimator(m *Model) (*Estimator, error) {
	if err := m.check(); err != nil {
		return nil, err
	}
	md := m.Meta
	kind, err := modes.ParseKind(md.Basis)
	if err != nil {
		return nil, fmt.Errorf("net: weights basis: %w", err)
	}
	tel := optics.Telescope{Diameter: md.Diameter, Obscuration: md.Obscuration, Wavelength: md.Wavelength, PixelScale: md.PixelScale}
	pupil, err := optics.NewPupil(tel, md.Patch)
	if err != nil {
		return nil, fmt.Errorf("net: weights optics: %w", err)
	}
	b, err := modes.New(kind, m.Arch.Modes, md.Patch, pupil.Radius)
	if err != nil {
		return nil, fmt.Errorf("net: weights basis: %w", err)
	}
	e := &Estimator{m: m, basis: b, pred: NewPredictor(m)}
	if e.feat, err = NewFeaturizer(m); err != nil {
		return nil, err
	}
	if kind != modes.KindZernike && b.ToNoll != nil {
		var inv mat.Dense
		if err := inv.Inverse(b.ToNoll); err != nil {
			return nil, fmt.Errorf("net: basis to Noll matrix: %w", err)
		}
		e.inv = &inv
	}
	return e, nil
}

// Basis returns the basis of the native coefficients (shared; do not modify).
func (e *Estimator) Basis() *modes.Basis { return e.basis }

// Burst returns, for every frame of data (data[channel][frame], N×N images,
// channel 0 focused), the native coefficients and their Noll equivalents
// (j = 2..Modes+1), in rad, with the burst mean of Noll tip and tilt
// (j = 2, 3) removed. It returns an error for images of the wrong size or
// without signal.
func (e *Estimator) Burst(data [2][][]float64) (native, noll [][]float64, err error) {
	frames := len(data[0])
	n := e.feat.Len(frames)
	if cap(e.x) < n {
		e.x = make([]float64, n)
	}
	e.x = e.x[:n]
	if err := e.feat.Burst(e.x, data); err != nil {
		return nil, nil, err
	}
	nm := e.m.Arch.Modes
	if cap(e.y) < frames*nm {
		e.y = make([]float64, frames*nm)
	}
	e.y = e.y[:frames*nm]
	e.pred.Forward(e.y, e.x, frames)
	// One backing array per result: the caller owns them.
	nollAll := make([]float64, frames*nm)
	nativeAll := make([]float64, frames*nm)
	noll = make([][]float64, frames)
	var mean [2]float64
	for j := range noll {
		noll[j] = nollAll[j*nm : (j+1)*nm : (j+1)*nm]
		e.basis.NollEquivalent(noll[j], e.y[j*nm:(j+1)*nm])
		for k := 0; k < 2 && k < nm; k++ {
			mean[k] += noll[j][k] / float64(frames)
		}
	}
	native = make([][]float64, frames)
	for j := range native {
		native[j] = nativeAll[j*nm : (j+1)*nm : (j+1)*nm]
		copy(native[j], e.y[j*nm:(j+1)*nm])
		for k := 0; k < 2 && k < nm; k++ {
			noll[j][k] -= mean[k]
			// native −= ToNoll⁻¹ · (mean tilt in Noll)
			for i := 0; i < nm; i++ {
				c := 0.0
				if e.inv != nil {
					c = e.inv.At(i, k)
				} else if i == k {
					c = 1
				}
				native[j][i] -= c * mean[k]
			}
		}
	}
	return native, noll, nil
}
