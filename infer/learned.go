package infer

import (
	"fmt"
	"strings"
	"sync"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"

	"pdwave/model/modes"
	"pdwave/model/net"
)

// NetEstimator runs a trained network (model/net) on patches. It
// implements Estimator and is safe for concurrent use: every concurrent
// call takes its own Featurizer and Predictor from a pool, which it keeps
// for later calls.
type NetEstimator struct {
	m     *net.Model
	basis *modes.Basis
	conv  *mat.Dense // native coefficients of the network's own basis → basis; nil if the same
	back  *TurnBack  // with turns > 1
	turns int        // symmetries averaged over (SetTurns); 0 or 1 = none
	mu    sync.Mutex
	free  []*netWorker
}

type netWorker struct {
	f      *net.Featurizer
	p      *net.Predictor32
	x      []float64
	y      []float64
	c, d   []float64      // one frame's coefficients and scratch
	turned [2][][]float64 // a turned burst (SetTurns)
}

// NewNetEstimator checks that m was made for the basis kind, mode count
// and patch size of b and returns an estimator whose coefficients refer to
// b. The network predicts in the basis its weights record (today always
// the clear-aperture Kolmogorov basis of modes.New); when b was built for
// another aperture (modes.NewFor), the prediction c is converted exactly,
// both bases spanning Noll j = 2…Count+1: b's coefficients are
// ToNoll_b⁻¹·ToNoll_net·c. It returns an error on a mismatch, naming both
// sides.
func NewNetEstimator(m *net.Model, b *modes.Basis) (*NetEstimator, error) {
	if m == nil {
		return nil, fmt.Errorf("learned estimator: no model")
	}
	if m.Arch.Modes != b.Count || (m.Meta.Modes != 0 && m.Meta.Modes != b.Count) {
		return nil, fmt.Errorf("learned estimator: weights predict %d modes, the fit uses %d", m.Arch.Modes, b.Count)
	}
	if m.Meta.Basis != "" && !strings.EqualFold(m.Meta.Basis, string(b.Kind)) {
		return nil, fmt.Errorf("learned estimator: weights are for the %s basis, the fit uses %s", m.Meta.Basis, b.Kind)
	}
	if m.Meta.Patch != 0 && m.Meta.Patch != b.N {
		return nil, fmt.Errorf("learned estimator: weights are for %d px patches, the fit uses %d", m.Meta.Patch, b.N)
	}
	if _, err := net.NewFeaturizer(m); err != nil {
		return nil, fmt.Errorf("learned estimator: %w", err)
	}
	conv, err := basisConversion(b)
	if err != nil {
		return nil, fmt.Errorf("learned estimator: %w", err)
	}
	return &NetEstimator{m: m, basis: b, conv: conv}, nil
}

// basisConversion returns the matrix taking native coefficients of the
// clear-aperture basis of b's kind and size (modes.New) to native
// coefficients of b, or nil when b is that basis.
func basisConversion(b *modes.Basis) (*mat.Dense, error) {
	own, err := modes.New(b.Kind, b.Count, b.N, b.Radius)
	if err != nil {
		return nil, err
	}
	if own.Describe() == b.Describe() {
		return nil, nil
	}
	var inv, t mat.Dense
	if err := inv.Inverse(b.ToNoll); err != nil {
		return nil, fmt.Errorf("basis %s: %w", b.Describe(), err)
	}
	t.Mul(&inv, own.ToNoll)
	return &t, nil
}

// Basis implements Estimator: the basis the coefficients refer to.
func (e *NetEstimator) Basis() *modes.Basis { return e.basis }

// Estimate implements Estimator: it predicts frames × modes native
// coefficients (rad) for data[channel][frame] (two channels, N×N images),
// in new slices. With SetTurns(k > 1) it is the mean of the predictions for
// the burst under the first k symmetries of the square (TurnImage), each
// turned back (TurnBack). It does not modify data.
func (e *NetEstimator) Estimate(data [][][]float64) ([][]float64, error) {
	if len(data) != 2 {
		return nil, fmt.Errorf("learned estimator: %d channels, want 2", len(data))
	}
	frames := len(data[0])
	if frames < 1 || len(data[1]) != frames {
		return nil, fmt.Errorf("learned estimator: %d and %d frames, want the same number ≥ 1", len(data[0]), len(data[1]))
	}
	w, err := e.get()
	if err != nil {
		return nil, err
	}
	defer e.put(w)
	m := e.m.Arch.Modes
	out := make([][]float64, frames)
	for j := range out {
		out[j] = make([]float64, m)
	}
	if e.turns <= 1 {
		return out, e.predict(w, [2][][]float64{data[0], data[1]}, out, 0)
	}
	turned := w.turnBuffers(frames, e.basis.N)
	for t := 0; t < e.turns; t++ {
		for c := range turned {
			for j, im := range data[c] {
				if len(im) != len(turned[c][j]) {
					return nil, fmt.Errorf("learned estimator: channel %d frame %d has %d pixels, want %d", c, j, len(im), len(turned[c][j]))
				}
				TurnImage(turned[c][j], im, e.basis.N, t)
			}
		}
		if err := e.predict(w, turned, out, t); err != nil {
			return nil, err
		}
	}
	for _, row := range out {
		floats.Scale(1/float64(e.turns), row)
	}
	return out, nil
}

// predict adds to out (frames × modes, e.basis) the prediction for data,
// a burst turned by t, turned back (t > 0) to the burst as recorded.
func (e *NetEstimator) predict(w *netWorker, data [2][][]float64, out [][]float64, t int) error {
	frames := len(data[0])
	nf := w.f.Len(frames)
	if cap(w.x) < nf {
		w.x = make([]float64, nf)
	}
	w.x = w.x[:nf]
	if err := w.f.Burst(w.x, data); err != nil {
		return fmt.Errorf("learned estimator: %w", err)
	}
	m := e.m.Arch.Modes
	if cap(w.y) < frames*m {
		w.y = make([]float64, frames*m)
	}
	w.y = w.y[:frames*m]
	w.p.Forward(w.y, w.x, frames)
	if len(w.c) != m {
		w.c, w.d = make([]float64, m), make([]float64, m)
	}
	for j := range out {
		copy(w.c, w.y[j*m:(j+1)*m])
		if e.conv != nil {
			mulRows(w.d, e.conv, w.c)
			w.c, w.d = w.d, w.c
		}
		if t > 0 {
			e.back.Back(w.d, w.c, t)
			w.c, w.d = w.d, w.c
		}
		floats.Add(out[j], w.c)
	}
	return nil
}

// DefaultTurns is the number of symmetries of the square the commands
// average the learned estimate over unless told otherwise (see SetTurns:
// four turns give nearly all of the eight's gain at half the cost).
const DefaultTurns = 4

// SetTurns sets how many symmetries of the square Estimate averages over:
// 1 (the burst as recorded; the default), 4 (the four rotations) or 8
// (rotations and reflections). Averaging k turned predictions costs k
// predictions. Measured on 60 demo bursts (D/r0 3–7, scene mix and
// granulation, shipped weights; TestTurnStudy): median error over Noll
// 2–21 0.269 → 0.237 (4) → 0.234 (8) on the mix, 0.205 → 0.190 → 0.187 on
// granulation; 8 turns better on 55 of 60 bursts. It returns an error for
// other k. It must not be called concurrently with Estimate.
func (e *NetEstimator) SetTurns(k int) error {
	if k != 1 && k != 4 && k != Turns {
		return fmt.Errorf("learned estimator: %d turns, want 1, 4 or %d", k, Turns)
	}
	if k > 1 && e.back == nil {
		tb, err := NewTurnBack(e.basis)
		if err != nil {
			return fmt.Errorf("learned estimator: %w", err)
		}
		e.back = tb
	}
	e.turns = k
	return nil
}

// Turns returns the number of symmetries Estimate averages over.
func (e *NetEstimator) Turns() int { return max(e.turns, 1) }

// turnBuffers returns the worker's 2 × frames × n² buffers for a turned
// burst, allocated on first use.
func (w *netWorker) turnBuffers(frames, n int) [2][][]float64 {
	if len(w.turned[0]) != frames || len(w.turned[0][0]) != n*n {
		for c := range w.turned {
			w.turned[c] = make([][]float64, frames)
			for j := range w.turned[c] {
				w.turned[c][j] = make([]float64, n*n)
			}
		}
	}
	return w.turned
}

func (e *NetEstimator) get() (*netWorker, error) {
	e.mu.Lock()
	if n := len(e.free); n > 0 {
		w := e.free[n-1]
		e.free = e.free[:n-1]
		e.mu.Unlock()
		return w, nil
	}
	e.mu.Unlock()
	f, err := net.NewFeaturizer(e.m)
	if err != nil {
		return nil, fmt.Errorf("learned estimator: %w", err)
	}
	return &netWorker{f: f, p: net.NewPredictor32(e.m)}, nil
}

func (e *NetEstimator) put(w *netWorker) {
	e.mu.Lock()
	e.free = append(e.free, w)
	e.mu.Unlock()
}

// RemoveMeanTilt removes from native (frames × Count coefficients of b,
// modified in place) the burst mean of the Noll tip and tilt (j = 2, 3),
// which phase diversity cannot see, and returns the Noll equivalents
// (j = 2…Count+1) of the result. It returns an error if b.ToNoll is
// singular or a row has the wrong length.
func RemoveMeanTilt(b *modes.Basis, native [][]float64) ([][]float64, error) {
	m := b.Count
	noll := make([][]float64, len(native))
	var mean [2]float64
	for j, c := range native {
		if len(c) != m {
			return nil, fmt.Errorf("remove mean tilt: frame %d has %d coefficients, want %d", j, len(c), m)
		}
		noll[j] = make([]float64, m)
		b.NollEquivalent(noll[j], c)
		for k := 0; k < 2 && k < m; k++ {
			mean[k] += noll[j][k] / float64(len(native))
		}
	}
	var inv mat.Dense
	if err := inv.Inverse(b.ToNoll); err != nil {
		return nil, fmt.Errorf("remove mean tilt: basis %s: %w", b.Describe(), err)
	}
	for j := range native {
		for k := 0; k < 2 && k < m; k++ {
			noll[j][k] -= mean[k]
			for i := 0; i < m; i++ {
				native[j][i] -= inv.At(i, k) * mean[k]
			}
		}
	}
	return noll, nil
}
