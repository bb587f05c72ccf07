package net

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"

	"pdwave/model/instrument"
	"pdwave/model/modes"
)

// Estimator predicts the wavefronts of whole bursts with a Model: features,
// forward pass, and removal of the burst-mean tip/tilt, which the
// phase-diversity metric (and hence the training loss) cannot see. It owns
// buffers and is not safe for concurrent use.
//
// The forward pass is Predictor32's (float32; the weights as they were at
// NewEstimator) unless the Estimator comes from NewEstimator64: on the
// shipped weights the coefficients of the two differ by 3e-7 rad rms
// (TestShippedWeights32), far below their error, and the float32 pass takes
// less than half the time. The float32 path hands the features to the
// network frame by frame (Predictor32.Predict).
type Estimator struct {
	m      *Model
	basis  *modes.Basis
	inv    *mat.Dense // native = inv · noll (nil for Zernike)
	feat   *Featurizer
	pred   *Predictor   // float64 forward pass (NewEstimator64), else nil
	pred32 *Predictor32 // float32 forward pass (NewEstimator), else nil
	x, y   []float64
	corr   []float64 // the native correction for the mean tip/tilt
}

// NewEstimator builds the pupil and basis the model was made for with
// instrument.Build, in the clear-aperture basis of the network's outputs,
// from the instrument the weights' own metadata describe (madeFor) and
// returns an Estimator with the float32 forward pass (Predictor32) over
// m's weights as they are now. It returns an error if the metadata do not
// describe a usable telescope, patch and basis.
func NewEstimator(m *Model) (*Estimator, error) {
	e, err := newEstimator(m)
	if err != nil {
		return nil, err
	}
	e.pred32 = NewPredictor32(m)
	return e, nil
}

// NewEstimator64 is NewEstimator with the float64 forward pass
// (Predictor), the reference for the float32 default: it reads m's weights
// at every Burst.
func NewEstimator64(m *Model) (*Estimator, error) {
	e, err := newEstimator(m)
	if err != nil {
		return nil, err
	}
	e.pred = NewPredictor(m)
	return e, nil
}

// newEstimator is NewEstimator without a forward pass.
func newEstimator(m *Model) (*Estimator, error) {
	if err := m.check(); err != nil {
		return nil, err
	}
	in, err := m.madeFor()
	if err != nil {
		return nil, err
	}
	bt, err := instrument.Build(in, instrument.ClearAperture)
	if err != nil {
		return nil, fmt.Errorf("net: weights optics: %w", err)
	}
	b := bt.Basis
	e := &Estimator{m: m, basis: b}
	if e.feat, err = NewFeaturizer(m); err != nil {
		return nil, err
	}
	if b.Kind != modes.KindZernike && b.ToNoll != nil {
		var inv mat.Dense
		if err := inv.Inverse(b.ToNoll); err != nil {
			return nil, fmt.Errorf("net: basis to Noll matrix: %w", err)
		}
		e.inv = &inv
	}
	return e, nil
}

// madeFor returns the instrument the weights were made for, resolved
// (instrument.Resolve) from their metadata alone (Meta.Instrument) with
// the network's output count as the mode count. Metadata without a
// diversity (weights of earlier versions) give one focused channel, and
// the expected D/r0 is the default: neither matters to the network's
// pupil and basis. It errors if the metadata lack the telescope or do not
// describe a usable one.
func (m *Model) madeFor() (instrument.Instrument, error) {
	w := m.Meta.Instrument()
	w.Modes = instrument.Some(m.Arch.Modes)
	if !w.Diversity.Set {
		w.Diversity = instrument.Some([]float64{0})
	}
	in, _, err := instrument.Resolve(instrument.Sources{Weights: w})
	if err != nil {
		return in, fmt.Errorf("net: weights metadata: %w", err)
	}
	return in, nil
}

// Basis returns the basis of the native coefficients (shared; do not modify).
func (e *Estimator) Basis() *modes.Basis { return e.basis }

// MaxPredictionSigma bounds a plausible prediction: a coefficient beyond
// this many output scales (the Kolmogorov standard deviation at the
// training seeing) has a chance below 1e-100 under the prior, so the
// network was fed data it does not understand or its weights are broken.
const MaxPredictionSigma = 30

// ErrImplausible is returned (wrapped) for a prediction that is not finite
// or exceeds MaxPredictionSigma output scales.
var ErrImplausible = errors.New("implausible network prediction")

// checkPrediction checks e.y (frames × modes, rad) against
// MaxPredictionSigma.
func (e *Estimator) checkPrediction(frames int) error {
	nm := e.m.Arch.Modes
	for j := 0; j < frames; j++ {
		for m, v := range e.y[j*nm : (j+1)*nm] {
			if !(math.Abs(v) <= MaxPredictionSigma*e.m.Scale[m]) {
				return fmt.Errorf("%w: frame %d mode %d is %.3g rad, the output scale %.3g rad", ErrImplausible, j+1, m+1, v, e.m.Scale[m])
			}
		}
	}
	return nil
}

// Burst returns, for every frame of data (data[channel][frame], N×N images,
// channel 0 focused), the native coefficients and their Noll equivalents
// (j = 2..Modes+1), in rad, with the burst mean of Noll tip and tilt
// (j = 2, 3) removed. It returns an error for images of the wrong size or
// without signal.
func (e *Estimator) Burst(data [2][][]float64) (native, noll [][]float64, err error) {
	if err := e.predict(data); err != nil {
		return nil, nil, err
	}
	frames := len(data[0])
	nm := e.m.Arch.Modes
	if err := e.checkPrediction(frames); err != nil {
		return nil, nil, err
	}
	// One backing array per result: the caller owns them.
	nollAll := make([]float64, frames*nm)
	nativeAll := make([]float64, frames*nm)
	copy(nativeAll, e.y)
	e.nollEquivalent(nollAll, e.y, frames)
	var mean [2]float64
	for j := 0; j < frames; j++ {
		for k := 0; k < 2 && k < nm; k++ {
			mean[k] += nollAll[j*nm+k] / float64(frames)
		}
	}
	// native −= ToNoll⁻¹ · (mean tilt in Noll), the same for every frame.
	e.corr = grow(e.corr, nm)
	corr := e.corr
	for i := range corr {
		corr[i] = 0
		for k := 0; k < 2 && k < nm; k++ {
			c := 0.0
			if e.inv != nil {
				c = e.inv.At(i, k)
			} else if i == k {
				c = 1
			}
			corr[i] += c * mean[k]
		}
	}
	noll = make([][]float64, frames)
	native = make([][]float64, frames)
	for j := range native {
		noll[j] = nollAll[j*nm : (j+1)*nm : (j+1)*nm]
		native[j] = nativeAll[j*nm : (j+1)*nm : (j+1)*nm]
		for k := 0; k < 2 && k < nm; k++ {
			noll[j][k] -= mean[k]
		}
		floats.Sub(native[j], corr)
	}
	return native, noll, nil
}

// nollEquivalent sets dst (frames × Modes) to the Noll equivalents of the
// native coefficients y, as Basis.NollEquivalent row by row, in one matrix
// product: dst = y · ToNollᵀ.
func (e *Estimator) nollEquivalent(dst, y []float64, frames int) {
	b := e.basis
	if b.Kind == modes.KindZernike {
		copy(dst, y)
		return
	}
	nm := b.Count
	blas64.Gemm(blas.NoTrans, blas.Trans, 1,
		blas64.General{Rows: frames, Cols: nm, Stride: nm, Data: y},
		b.ToNoll.RawMatrix(),
		0, blas64.General{Rows: frames, Cols: nm, Stride: nm, Data: dst})
}

// predict sets e.y to the coefficients (frames × Modes, rad) of data.
func (e *Estimator) predict(data [2][][]float64) error {
	frames := len(data[0])
	nm := e.m.Arch.Modes
	if cap(e.y) < frames*nm {
		e.y = make([]float64, frames*nm)
	}
	e.y = e.y[:frames*nm]
	if e.pred32 == nil {
		n := e.feat.Len(frames)
		if cap(e.x) < n {
			e.x = make([]float64, n)
		}
		e.x = e.x[:n]
		if err := e.feat.Burst(e.x, data); err != nil {
			return err
		}
		e.pred.Forward(e.y, e.x, frames)
		return nil
	}
	return e.pred32.Predict(e.y, e.feat, data)
}
