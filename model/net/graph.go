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
	gr := &Graph{Bursts: bursts, Frames: frames, m: m, g: G.NewGraph()}
	gr.addWeights()
	gr.addInputs()
	y, err := gr.forward()
	if err != nil {
		return nil, err
	}
	gr.y = y
	if err := gr.addOuterGradient(); err != nil {
		return nil, err
	}
	gr.vm = G.NewTapeMachine(gr.g, G.BindDualValues(gr.w...))
	for _, p := range m.Params {
		gr.grads = append(gr.grads, make([]float64, len(p.Data)))
	}
	return gr, nil
}

// addWeights adds a node per tensor of Model.Params, in their order, each
// sharing its backing array with the Model's tensor.
func (gr *Graph) addWeights() {
	for _, p := range gr.m.Params {
		t := tensor.New(tensor.WithShape(p.Shape...), tensor.WithBacking(p.Data))
		opts := []G.NodeConsOpt{G.WithShape(p.Shape...), G.WithName(p.Name), G.WithValue(t)}
		var n *G.Node
		switch len(p.Shape) {
		case 1:
			n = G.NewVector(gr.g, tensor.Float64, opts...)
		case 2:
			n = G.NewMatrix(gr.g, tensor.Float64, opts...)
		default:
			n = G.NewTensor(gr.g, tensor.Float64, len(p.Shape), opts...)
		}
		gr.w = append(gr.w, n)
	}
}

// addInputs adds the feature input x (rows × Channels × Size × Size) and the
// outer gradient gin (rows × Modes), with the tensors Backward copies into.
func (gr *Graph) addInputs() {
	a := gr.m.Arch
	r := gr.Bursts * gr.Frames
	gr.xT = tensor.New(tensor.WithShape(r, a.Channels, a.Size, a.Size), tensor.Of(tensor.Float64))
	gr.x = G.NewTensor(gr.g, tensor.Float64, 4, G.WithShape(r, a.Channels, a.Size, a.Size), G.WithName("x"), G.WithValue(gr.xT))
	gr.ginT = tensor.New(tensor.WithShape(r, a.Modes), tensor.Of(tensor.Float64))
	gr.gin = G.NewMatrix(gr.g, tensor.Float64, G.WithShape(r, a.Modes), G.WithName("gin"), G.WithValue(gr.ginT))
}

// graphErr is the error of a gorgonia call building part what of the graph.
func graphErr(err error, what string) error { return fmt.Errorf("net: building %s: %w", what, err) }

// forward adds the network from x to the raw outputs y (rows × Modes), the
// same layers as Predictor.Raw: the stride-2 convolutions with ReLU, the
// per-frame encoder, the burst mean concatenated to each frame's features,
// the head and the linear output.
func (gr *Graph) forward() (*G.Node, error) {
	a := gr.m.Arch
	h, err := gr.convolutions(gr.x)
	if err != nil {
		return nil, err
	}
	nl := len(a.Conv)
	if h, err = G.Reshape(h, tensor.Shape{gr.Bursts * gr.Frames, a.flat()}); err != nil {
		return nil, graphErr(err, "flatten")
	}
	if h, err = gr.dense(h, 2*nl, true); err != nil {
		return nil, graphErr(err, "encoder")
	}
	mean, err := G.Mul(gr.burstMean(), h)
	if err != nil {
		return nil, graphErr(err, "burst summary")
	}
	if h, err = G.Concat(1, h, mean); err != nil {
		return nil, graphErr(err, "concatenation")
	}
	if h, err = gr.dense(h, 2*nl+2, true); err != nil {
		return nil, graphErr(err, "head")
	}
	y, err := gr.dense(h, 2*nl+4, false)
	if err != nil {
		return nil, graphErr(err, "output")
	}
	return y, nil
}

// convolutions adds the 3×3 stride-2 convolutions (padding 1), each with its
// bias and a ReLU; weights and bias of layer l are w[2l] and w[2l+1].
func (gr *Graph) convolutions(h *G.Node) (*G.Node, error) {
	var err error
	for l := range gr.m.Arch.Conv {
		if h, err = G.Conv2d(h, gr.w[2*l], tensor.Shape{3, 3}, []int{1, 1}, []int{2, 2}, []int{1, 1}); err != nil {
			return nil, graphErr(err, "convolution")
		}
		if h, err = G.BroadcastAdd(h, gr.w[2*l+1], nil, []byte{0, 2, 3}); err != nil {
			return nil, graphErr(err, "convolution bias")
		}
		if h, err = G.Rectify(h); err != nil {
			return nil, graphErr(err, "ReLU")
		}
	}
	return h, nil
}

// dense adds the fully connected layer x·w[l] + w[l+1], with a ReLU if relu.
func (gr *Graph) dense(x *G.Node, l int, relu bool) (*G.Node, error) {
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

// burstMean is the constant rows × rows block-averaging matrix: its product
// with per-frame features gives every row its burst's mean.
func (gr *Graph) burstMean() *G.Node {
	r, frames := gr.Bursts*gr.Frames, gr.Frames
	avg := make([]float64, r*r)
	for b := 0; b < gr.Bursts; b++ {
		for i := 0; i < frames; i++ {
			for j := 0; j < frames; j++ {
				avg[(b*frames+i)*r+b*frames+j] = 1 / float64(frames)
			}
		}
	}
	return G.NewConstant(tensor.New(tensor.WithShape(r, r), tensor.WithBacking(avg)), G.WithName("burstmean"))
}

// addOuterGradient adds the scalar c = Σ y·gin and its gradient with
// respect to every weight node.
func (gr *Graph) addOuterGradient() error {
	prod, err := G.HadamardProd(gr.y, gr.gin)
	if err != nil {
		return graphErr(err, "outer gradient")
	}
	cost, err := G.Sum(prod)
	if err != nil {
		return graphErr(err, "outer gradient sum")
	}
	if _, err = G.Grad(cost, gr.w...); err != nil {
		return graphErr(err, "gradient")
	}
	return nil
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
