package train

import (
	"bytes"
	"errors"
	"fmt"
	"math"
	"sync"

	"gonum.org/v1/gonum/floats"

	"pdwave/internal/atomicfile"
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
	// ByScene holds SqErr and SqTrue summed over the bursts of each scene
	// group ("granulation", "real"; SceneGroup of Sample.Scene). Nil when
	// the bursts carry no scene or no truth.
	ByScene map[string]SceneErr `json:",omitempty"`
}

// SceneErr is the squared error and true variance per Noll mode
// (j = i+2, rad², as Validation.SqErr and SqTrue) of the validation bursts
// of one scene group.
type SceneErr struct {
	Bursts        int
	SqErr, SqTrue []float64
}

// ErrFrac returns the wavefront error over Noll j = lo..hi of the group as
// a fraction of its true variance (see Validation.ErrFrac).
func (e SceneErr) ErrFrac(lo, hi int) float64 {
	return Validation{SqErr: e.SqErr, SqTrue: e.SqTrue}.ErrFrac(lo, hi)
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

// burstScore is the validation of one burst.
type burstScore struct {
	ok            bool
	loss, l0, lt  float64
	sqErr, sqTrue []float64
	err           error
}

// valBuffers are one validation worker's buffers.
type valBuffers struct {
	x, alpha, zero, noll, tr []float64
}

// scoreBurst scores the network on smp with worker w: the objective at the
// prediction, at zero and at the truth, and the squared errors per Noll
// mode (burst-mean tilt removed) when smp has truth.
func (t *Trainer) scoreBurst(w *worker, smp *Sample, b valBuffers) burstScore {
	s := t.prob.setup
	nm := s.Modes
	var r burstScore
	if r.err = w.feat.Burst(b.x, smp.Data); r.err != nil {
		return r
	}
	w.pred.Forward(b.alpha, b.x, s.Frames)
	w.solver.Constrain(b.alpha)
	if err := w.solver.SetData([][][]float64{smp.Data[0], smp.Data[1]}); err != nil {
		if !errors.Is(err, pd.ErrNoSignal) {
			r.err = err
		}
		return r
	}
	r.ok = true
	r.loss = w.solver.ValueGrad(nil, b.alpha)
	r.l0 = w.solver.ValueGrad(nil, b.zero)
	if smp.Noll == nil {
		return r
	}
	if r.err = w.truthNative(t.prob, smp.Noll); r.err != nil {
		return r
	}
	r.lt = w.solver.ValueGrad(nil, w.target)
	for j := 0; j < s.Frames; j++ {
		t.prob.basis.NollEquivalent(b.noll[j*nm:(j+1)*nm], b.alpha[j*nm:(j+1)*nm])
		copy(b.tr[j*nm:(j+1)*nm], smp.Noll[j][:nm])
	}
	removeMeanTilt(b.noll, s.Frames, nm)
	removeMeanTilt(b.tr, s.Frames, nm)
	r.sqErr = make([]float64, nm)
	r.sqTrue = make([]float64, nm)
	for j := 0; j < s.Frames; j++ {
		for k := 0; k < nm; k++ {
			d := b.noll[j*nm+k] - b.tr[j*nm+k]
			r.sqErr[k] += d * d
			r.sqTrue[k] += b.tr[j*nm+k] * b.tr[j*nm+k]
		}
	}
	return r
}

// Validate scores the current weights on set (bursts of the training size).
// Bursts without signal above the noise are left out. Bursts with truth
// and a scene (Sample.Scene) are also summed per scene group (SceneGroup)
// into Validation.ByScene.
func (t *Trainer) Validate(set []*Sample) (Validation, error) {
	s := t.prob.setup
	n := s.Frames * s.Modes
	out := make([]burstScore, len(set))
	var wg sync.WaitGroup
	for wi := range t.work {
		wg.Add(1)
		go func(wi int) {
			defer wg.Done()
			w := t.work[wi]
			b := valBuffers{x: make([]float64, w.feat.Len(s.Frames)), alpha: make([]float64, n),
				zero: make([]float64, n), noll: make([]float64, n), tr: make([]float64, n)}
			for i := wi; i < len(set); i += len(t.work) {
				out[i] = t.scoreBurst(w, set[i], b)
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
			v.SqErr = addSums(v.SqErr, r.sqErr)
			v.SqTrue = addSums(v.SqTrue, r.sqTrue)
			if g := SceneGroup(set[i].Scene); g != "" {
				if v.ByScene == nil {
					v.ByScene = map[string]SceneErr{}
				}
				e := v.ByScene[g]
				e.Bursts++
				e.SqErr, e.SqTrue = addSums(e.SqErr, r.sqErr), addSums(e.SqTrue, r.sqTrue)
				v.ByScene[g] = e
			}
		}
	}
	if v.Bursts == 0 {
		return v, fmt.Errorf("train: no validation burst has signal above the noise")
	}
	nb := float64(v.Bursts)
	v.Loss /= nb
	v.LossZero /= nb
	v.LossTruth /= nb
	return v, nil
}

// addSums returns acc + a element by element, allocating acc if nil.
func addSums(acc, a []float64) []float64 {
	if acc == nil {
		acc = make([]float64, len(a))
	}
	floats.Add(acc, a)
	return acc
}

// ValidationFile lists the validation bursts of a run (index, scene
// group, scene, r0, photons, contrast) in its run directory.
const ValidationFile = "validation.csv"

// writeValidationList writes the scene, r0 (m), photon level (e⁻ per
// pixel) and scene contrast ("default" for the simulator's 0.12) of every
// burst of set to path as CSV; nothing for an empty set.
func writeValidationList(path string, set []*Sample) error {
	if len(set) == 0 {
		return nil
	}
	var b bytes.Buffer
	b.WriteString("burst,scene_group,scene,r0_m,photons_per_pixel,contrast\n")
	for i, s := range set {
		c := "default"
		if s.Contrast > 0 {
			c = fmt.Sprintf("%.4g", s.Contrast)
		}
		fmt.Fprintf(&b, "%d,%s,%q,%.6g,%.6g,%s\n", i, SceneGroup(s.Scene), s.Scene, s.R0, s.Photons, c)
	}
	return atomicfile.WriteBytes(path, b.Bytes())
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
