package patchrun

import (
	"errors"
	"time"

	"pdwave/infer"
)

// Chain is the wavefront estimate of one patch in its stages: the learned
// estimate, a polish started from it, and a full fit. Every field is
// optional, but at least one stage must be set. A Chain is read-only
// while in use and safe for concurrent use when its estimator and fitters
// are (infer.NetEstimator and infer.Fitter are).
type Chain struct {
	// Learned makes the first coefficients (the network); nil: no learned
	// stage, and no polish.
	Learned infer.Estimator
	// Polish is the fit stopped after a few iterations that continues from
	// the learned coefficients; nil: no polish.
	Polish *infer.Fitter
	// Fit is the full fit; nil: none.
	Fit *infer.Fitter
	// FitFromZero starts the full fit from zero coefficients, independent
	// of the earlier stages; otherwise it continues from the last of them.
	FitFromZero bool
	// Constrain, if set, is applied to the learned coefficients before they
	// are kept and polished (compare removes the burst-mean tip/tilt the
	// metric cannot see); it must return new slices.
	Constrain func([][]float64) [][]float64
}

// Stage is the outcome of one stage of a Chain.
type Stage struct {
	Coeffs     [][]float64 // frames × modes, native basis, rad
	Seconds    float64     // wall time of this stage
	Total      float64     // wall time of the stages that led to Coeffs, this one included
	Iterations int         // L-BFGS iterations (0 for the learned stage)
}

// Estimates are the stages of a Chain run on one patch; a stage that is
// not set in the Chain is nil.
type Estimates struct {
	// Raw holds the learned coefficients as the estimator returned them,
	// before Chain.Constrain; nil without a learned stage.
	Raw                       [][]float64
	Learned, Polished, Fitted *Stage
}

// Final returns the coefficients of the last stage run: the fit's, else
// the polish's, else the learned ones (nil when none ran).
func (e *Estimates) Final() [][]float64 {
	for _, s := range []*Stage{e.Fitted, e.Polished, e.Learned} {
		if s != nil {
			return s.Coeffs
		}
	}
	return nil
}

// Stage names of StageError.
const (
	StageLearned = "learned"
	StagePolish  = "polish"
	StageFit     = "fit"
)

// StageError is the failure of one stage of a Chain.
type StageError struct {
	Stage string // StageLearned, StagePolish or StageFit
	Err   error
}

// Error returns "stage: error".
func (e *StageError) Error() string { return e.Stage + ": " + e.Err.Error() }

// Unwrap returns the stage's own error.
func (e *StageError) Unwrap() error { return e.Err }

// ErrNoStage is the error of a Chain without any stage.
var ErrNoStage = errors.New("patchrun: chain has no stage")

// Estimate runs the stages on the patch data[channel][frame] (N×N images,
// not windowed; not retained or modified): the learned estimate
// (constrained by Constrain), the polish from it, then the full fit from
// zero or from the last stage. It returns the first failure as a
// *StageError, or ErrNoStage.
func (c *Chain) Estimate(data [][][]float64) (*Estimates, error) {
	if c.Learned == nil && c.Fit == nil {
		return nil, ErrNoStage
	}
	est := &Estimates{}
	var start [][]float64
	var elapsed float64
	if c.Learned != nil {
		t0 := time.Now()
		raw, err := c.Learned.Estimate(data)
		if err != nil {
			return nil, &StageError{StageLearned, err}
		}
		sec := time.Since(t0).Seconds()
		coeffs := raw
		if c.Constrain != nil {
			coeffs = c.Constrain(raw)
		}
		est.Raw = raw
		est.Learned = &Stage{Coeffs: coeffs, Seconds: sec, Total: sec}
		start, elapsed = coeffs, sec
		if c.Polish != nil {
			s, err := fitStage(c.Polish, data, start, elapsed)
			if err != nil {
				return nil, &StageError{StagePolish, err}
			}
			est.Polished = s
			start, elapsed = s.Coeffs, s.Total
		}
	}
	if c.Fit != nil {
		if c.FitFromZero {
			start, elapsed = nil, 0
		}
		s, err := fitStage(c.Fit, data, start, elapsed)
		if err != nil {
			return nil, &StageError{StageFit, err}
		}
		est.Fitted = s
	}
	return est, nil
}

// fitStage runs f on data from start (nil: zero) after earlier stages
// that took elapsed seconds.
func fitStage(f *infer.Fitter, data [][][]float64, start [][]float64, elapsed float64) (*Stage, error) {
	res, err := f.Fit(data, start)
	if err != nil {
		return nil, err
	}
	sec := res.Elapsed.Seconds()
	return &Stage{Coeffs: res.Coeffs, Seconds: sec, Total: elapsed + sec, Iterations: res.Iterations}, nil
}
