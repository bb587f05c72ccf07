package train

import (
	"errors"
	"fmt"
	"math"
	"sync"

	"pdwave/model/pd"
)

// Validation is the network's score on a fixed set of bursts.
type Validation struct {
	Step      int     // steps taken when scored
	Bursts    int     // bursts scored (with signal)
	Loss      float64 // mean objective (metric + prior) at the predictions
	LossZero  float64 // mean objective at α = 0 (no correction)
	LossTruth float64 // mean objective at the true coefficients (0 without truth)
	// SqErr[i] and SqTrue[i] are Σ over bursts and frames of
	// (predicted − true)² and true² for Noll j = i+2 (rad²), after removing
	// the burst mean of tip and tilt (j = 2, 3) from both, since the metric
	// cannot see it. Empty without truth.
	SqErr, SqTrue []float64
	// Against the classical fit (RunOptions.Referee), on the first
	// FitBursts bursts: the median over bursts of the network's objective
	// divided by the fitted one, and the fraction of bursts where that ratio
	// is at most RefereeTolerance. Zero without a referee.
	FitBursts      int
	FitRatioMedian float64
	FitWithin      float64
}

// ErrFrac returns the wavefront error over Noll j = lo..hi as a fraction of
// the true wavefront variance over the same modes: Σ err² / Σ true². It
// returns NaN if there is no truth or the modes are not all estimated.
func (v Validation) ErrFrac(lo, hi int) float64 {
	if lo < 2 || hi < lo || hi-2 >= len(v.SqErr) {
		return math.NaN()
	}
	var e, t float64
	for j := lo; j <= hi; j++ {
		e += v.SqErr[j-2]
		t += v.SqTrue[j-2]
	}
	if t == 0 {
		return math.NaN()
	}
	return e / t
}

// ModeFrac returns the error of Noll mode j as a fraction of its true
// variance (NaN if unknown).
func (v Validation) ModeFrac(j int) float64 { return v.ErrFrac(j, j) }

// FetchSet returns n bursts of src (indices 0..n−1): a fixed validation set.
func FetchSet(src Source, n int) ([]*Sample, error) {
	set := make([]*Sample, n)
	for i := range set {
		s, err := src.Get(uint64(i))
		if err != nil {
			return nil, fmt.Errorf("validation burst %d: %w", i, err)
		}
		set[i] = s
	}
	return set, nil
}

// Predict returns the network's coefficients (frames × Modes, native basis,
// rad, burst-mean tilt removed as in the metric) for one burst, using
// worker 0's buffers.
func (t *Trainer) Predict(data [2][][]float64) ([]float64, error) {
	w := t.work[0]
	s := t.prob.setup
	x := make([]float64, w.feat.Len(s.Frames))
	if err := w.feat.Burst(x, data); err != nil {
		return nil, err
	}
	out := make([]float64, s.Frames*s.Modes)
	w.pred.Forward(out, x, s.Frames)
	w.solver.Constrain(out)
	return out, nil
}

// Validate scores the current weights on set (bursts of the training size).
// Bursts without signal above the noise are left out.
func (t *Trainer) Validate(set []*Sample) (Validation, error) {
	s := t.prob.setup
	nm := s.Modes
	type res struct {
		ok            bool
		loss, l0, lt  float64
		sqErr, sqTrue []float64
		err           error
	}
	out := make([]res, len(set))
	var wg sync.WaitGroup
	for wi := range t.work {
		wg.Add(1)
		go func(wi int) {
			defer wg.Done()
			w := t.work[wi]
			x := make([]float64, w.feat.Len(s.Frames))
			alpha := make([]float64, s.Frames*nm)
			zero := make([]float64, s.Frames*nm)
			noll := make([]float64, s.Frames*nm)
			for i := wi; i < len(set); i += len(t.work) {
				r := &out[i]
				smp := set[i]
				if err := w.feat.Burst(x, smp.Data); err != nil {
					r.err = err
					continue
				}
				w.pred.Forward(alpha, x, s.Frames)
				w.solver.Constrain(alpha)
				if err := w.solver.SetData([][][]float64{smp.Data[0], smp.Data[1]}); err != nil {
					if !errors.Is(err, pd.ErrNoSignal) {
						r.err = err
					}
					continue
				}
				r.ok = true
				r.loss = w.solver.ValueGrad(nil, alpha)
				r.l0 = w.solver.ValueGrad(nil, zero)
				if smp.Noll == nil {
					continue
				}
				if err := w.truthNative(t.prob, smp.Noll); err != nil {
					r.err = err
					continue
				}
				r.lt = w.solver.ValueGrad(nil, w.target)
				for j := 0; j < s.Frames; j++ {
					t.prob.basis.NollEquivalent(noll[j*nm:(j+1)*nm], alpha[j*nm:(j+1)*nm])
				}
				tr := make([]float64, s.Frames*nm)
				for j := 0; j < s.Frames; j++ {
					copy(tr[j*nm:(j+1)*nm], smp.Noll[j][:nm])
				}
				removeMeanTilt(noll, s.Frames, nm)
				removeMeanTilt(tr, s.Frames, nm)
				r.sqErr = make([]float64, nm)
				r.sqTrue = make([]float64, nm)
				for j := 0; j < s.Frames; j++ {
					for k := 0; k < nm; k++ {
						d := noll[j*nm+k] - tr[j*nm+k]
						r.sqErr[k] += d * d
						r.sqTrue[k] += tr[j*nm+k] * tr[j*nm+k]
					}
				}
			}
		}(wi)
	}
	wg.Wait()
	v := Validation{Step: t.step}
	for i, r := range out {
		if r.err != nil {
			return v, fmt.Errorf("train: validation burst %d: %w", i, r.err)
		}
		if !r.ok {
			continue
		}
		v.Bursts++
		v.Loss += r.loss
		v.LossZero += r.l0
		v.LossTruth += r.lt
		if r.sqErr != nil {
			if v.SqErr == nil {
				v.SqErr = make([]float64, nm)
				v.SqTrue = make([]float64, nm)
			}
			for k := range r.sqErr {
				v.SqErr[k] += r.sqErr[k]
				v.SqTrue[k] += r.sqTrue[k]
			}
		}
	}
	if v.Bursts == 0 {
		return v, fmt.Errorf("train: no validation burst has signal above the noise")
	}
	n := float64(v.Bursts)
	v.Loss /= n
	v.LossZero /= n
	v.LossTruth /= n
	return v, nil
}

// removeMeanTilt subtracts the burst mean of Noll j = 2, 3 (indices 0, 1) of
// frames × nm Noll coefficients.
func removeMeanTilt(a []float64, frames, nm int) {
	for k := 0; k < 2 && k < nm; k++ {
		var m float64
		for j := 0; j < frames; j++ {
			m += a[j*nm+k]
		}
		m /= float64(frames)
		for j := 0; j < frames; j++ {
			a[j*nm+k] -= m
		}
	}
}
