package net

import (
	"fmt"

	G "gorgonia.org/gorgonia"
	"gorgonia.org/tensor"
)

// Graph is the network as a gorgonia expression graph for a fixed batch of
// Bursts bursts of Frames frames each, used to back-propagate an outside
// gradient into the weights: the graph's scalar is
//
//	c = Σ_{r,m} y_{r,m} · gin_{r,m},
//
// with y the raw outputs (as Predictor.Raw) and gin an input set at every
// step, so ∂c/∂w = Jᵀ·gin, the chain rule for any loss L(y) with
// gin = ∂L/∂y (TestGraphOuterGradient checks the back-propagated gradient
// against central differences). The weight nodes share memory with the Model's tensors, so
// updates made in place to Model.Params are used by the next Backward.
// A Graph is not safe for concurrent use.
type Graph struct {
	Bursts, Frames int
	m              *Model
	g              *G.ExprGraph
	x, gin, y      *G.Node
	w              G.Nodes
	vm             G.VM
	xT, ginT       *tensor.Dense
	grads          [][]float64
}

// NewGraph builds the graph of m for bursts × frames rows. It returns an
// error if the architecture is invalid or gorgonia rejects a shape.
func NewGraph(m *Model, bursts, frames int) (*Graph, error) {
	if err := m.check(); err != nil {
		return nil, err
	}
	if bursts < 1 || frames < 1 {
		return nil, fmt.Errorf("net: graph for %d bursts of %d frames", bursts, frames)
	}
	a := m.Arch
	r := bursts * frames
	gr := &Graph{Bursts: bursts, Frames: frames, m: m, g: G.NewGraph()}
	g := gr.g
	for _, p := range m.Params {
		t := tensor.New(tensor.WithShape(p.Shape...), tensor.WithBacking(p.Data))
		n := G.NewTensor(g, tensor.Float64, len(p.Shape), G.WithShape(p.Shape...), G.WithName(p.Name), G.WithValue(t))
		if len(p.Shape) == 2 {
			n = G.NewMatrix(g, tensor.Float64, G.WithShape(p.Shape...), G.WithName(p.Name), G.WithValue(t))
		} else if len(p.Shape) == 1 {
			n = G.NewVector(g, tensor.Float64, G.WithShape(p.Shape...), G.WithName(p.Name), G.WithValue(t))
		}
		gr.w = append(gr.w, n)
	}
	gr.xT = tensor.New(tensor.WithShape(r, a.Channels, a.Size, a.Size), tensor.Of(tensor.Float64))
	gr.x = G.NewTensor(g, tensor.Float64, 4, G.WithShape(r, a.Channels, a.Size, a.Size), G.WithName("x"), G.WithValue(gr.xT))
	gr.ginT = tensor.New(tensor.WithShape(r, a.Modes), tensor.Of(tensor.Float64))
	gr.gin = G.NewMatrix(g, tensor.Float64, G.WithShape(r, a.Modes), G.WithName("gin"), G.WithValue(gr.ginT))

	wrap := func(err error, what string) error { return fmt.Errorf("net: building %s: %w", what, err) }
	h := gr.x
	var err error
	for l := range a.Conv {
		if h, err = G.Conv2d(h, gr.w[2*l], tensor.Shape{3, 3}, []int{1, 1}, []int{2, 2}, []int{1, 1}); err != nil {
			return nil, wrap(err, "convolution")
		}
		if h, err = G.BroadcastAdd(h, gr.w[2*l+1], nil, []byte{0, 2, 3}); err != nil {
			return nil, wrap(err, "convolution bias")
		}
		if h, err = G.Rectify(h); err != nil {
			return nil, wrap(err, "ReLU")
		}
	}
	nl := len(a.Conv)
	if h, err = G.Reshape(h, tensor.Shape{r, a.flat()}); err != nil {
		return nil, wrap(err, "flatten")
	}
	fc := func(x *G.Node, l int, relu bool) (*G.Node, error) {
		y, err := G.Mul(x, gr.w[l])
		if err != nil {
			return nil, err
		}
		if y, err = G.BroadcastAdd(y, gr.w[l+1], nil, []byte{0}); err != nil {
			return nil, err
		}
		if relu {
			return G.Rectify(y)
		}
		return y, nil
	}
	if h, err = fc(h, 2*nl, true); err != nil {
		return nil, wrap(err, "encoder")
	}
	// Burst mean as a product with a constant block-averaging matrix.
	avg := make([]float64, r*r)
	for b := 0; b < bursts; b++ {
		for i := 0; i < frames; i++ {
			for j := 0; j < frames; j++ {
				avg[(b*frames+i)*r+b*frames+j] = 1 / float64(frames)
			}
		}
	}
	avgN := G.NewConstant(tensor.New(tensor.WithShape(r, r), tensor.WithBacking(avg)), G.WithName("burstmean"))
	mean, err := G.Mul(avgN, h)
	if err != nil {
		return nil, wrap(err, "burst summary")
	}
	if h, err = G.Concat(1, h, mean); err != nil {
		return nil, wrap(err, "concatenation")
	}
	if h, err = fc(h, 2*nl+2, true); err != nil {
		return nil, wrap(err, "head")
	}
	if gr.y, err = fc(h, 2*nl+4, false); err != nil {
		return nil, wrap(err, "output")
	}
	prod, err := G.HadamardProd(gr.y, gr.gin)
	if err != nil {
		return nil, wrap(err, "outer gradient")
	}
	cost, err := G.Sum(prod)
	if err != nil {
		return nil, wrap(err, "outer gradient sum")
	}
	if _, err = G.Grad(cost, gr.w...); err != nil {
		return nil, wrap(err, "gradient")
	}
	gr.vm = G.NewTapeMachine(g, G.BindDualValues(gr.w...))
	for _, p := range m.Params {
		gr.grads = append(gr.grads, make([]float64, len(p.Data)))
	}
	return gr, nil
}

// InputLen is the length of x in Backward: Bursts·Frames·Channels·Size².
func (gr *Graph) InputLen() int {
	a := gr.m.Arch
	return gr.Bursts * gr.Frames * a.Channels * a.Size * a.Size
}

// Backward runs the graph with inputs x (Bursts·Frames rows of features,
// burst-major then frame, as Featurizer writes them) and outer gradient gin
// (rows × Modes, ∂L/∂y for the raw outputs y; for a gradient g w.r.t. the
// coefficients α = Scale·y use gin = Scale·g). It returns ∂L/∂w for every
// tensor of Model.Params, in their order; the returned slices belong to the
// Graph and are overwritten by the next call. If y is not nil it receives the
// raw outputs of this pass. The inputs are copied.
func (gr *Graph) Backward(x, gin, y []float64) ([][]float64, error) {
	a := gr.m.Arch
	r := gr.Bursts * gr.Frames
	if len(x) != gr.InputLen() {
		return nil, fmt.Errorf("net: graph input has length %d, want %d", len(x), gr.InputLen())
	}
	if len(gin) != r*a.Modes {
		return nil, fmt.Errorf("net: outer gradient has length %d, want %d", len(gin), r*a.Modes)
	}
	copy(gr.xT.Data().([]float64), x)
	copy(gr.ginT.Data().([]float64), gin)
	if err := G.Let(gr.x, gr.xT); err != nil {
		return nil, fmt.Errorf("net: setting input: %w", err)
	}
	if err := G.Let(gr.gin, gr.ginT); err != nil {
		return nil, fmt.Errorf("net: setting outer gradient: %w", err)
	}
	defer gr.vm.Reset()
	if err := gr.vm.RunAll(); err != nil {
		return nil, fmt.Errorf("net: running graph: %w", err)
	}
	for i, n := range gr.w {
		gv, err := n.Grad()
		if err != nil {
			return nil, fmt.Errorf("net: gradient of %s: %w", n.Name(), err)
		}
		copy(gr.grads[i], gv.Data().([]float64))
		// The machine accumulates into the dual values; clear them so the
		// next pass starts from zero.
		d, ok := gv.(*tensor.Dense)
		if !ok {
			return nil, fmt.Errorf("net: gradient of %s is a %T", n.Name(), gv)
		}
		d.Zero()
	}
	if y != nil {
		if len(y) != r*a.Modes {
			return nil, fmt.Errorf("net: output buffer has length %d, want %d", len(y), r*a.Modes)
		}
		copy(y, gr.y.Value().Data().([]float64))
	}
	return gr.grads, nil
}

// Close releases the graph's machine.
func (gr *Graph) Close() error { return gr.vm.Close() }
