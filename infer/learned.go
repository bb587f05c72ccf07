package infer

import (
	"fmt"
	"strings"
	"sync"

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
	mu    sync.Mutex
	free  []*netWorker
}

type netWorker struct {
	f *net.Featurizer
	p *net.Predictor
	x []float64
	y []float64
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
// in new slices. It does not modify data.
func (e *NetEstimator) Estimate(data [][][]float64) ([][]float64, error) {
	if len(data) != 2 {
		return nil, fmt.Errorf("learned estimator: %d channels, want 2", len(data))
	}
	frames := len(data[0])
	w, err := e.get()
	if err != nil {
		return nil, err
	}
	defer e.put(w)
	nf := w.f.Len(frames)
	if cap(w.x) < nf {
		w.x = make([]float64, nf)
	}
	w.x = w.x[:nf]
	if err := w.f.Burst(w.x, [2][][]float64{data[0], data[1]}); err != nil {
		return nil, fmt.Errorf("learned estimator: %w", err)
	}
	m := e.m.Arch.Modes
	if cap(w.y) < frames*m {
		w.y = make([]float64, frames*m)
	}
	w.y = w.y[:frames*m]
	w.p.Forward(w.y, w.x, frames)
	out := make([][]float64, frames)
	for j := range out {
		out[j] = append([]float64(nil), w.y[j*m:(j+1)*m]...)
		if e.conv != nil {
			dst := mat.NewVecDense(m, out[j])
			dst.MulVec(e.conv, mat.NewVecDense(m, w.y[j*m:(j+1)*m]))
		}
	}
	return out, nil
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
	return &netWorker{f: f, p: net.NewPredictor(e.m)}, nil
}

func (e *NetEstimator) put(w *netWorker) {
	e.mu.Lock()
	e.free = append(e.free, w)
	e.mu.Unlock()
}
