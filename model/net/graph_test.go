package net

import (
	"math"
	"math/rand/v2"
	"testing"
)

// tinyModel is a small network for fast tests.
func tinyModel(t *testing.T, seed uint64) *Model {
	t.Helper()
	a := Arch{Channels: 3, Size: 8, Conv: []int{3, 4}, Hidden: 5, Head: 6, Modes: 4}
	m, err := New(a, Meta{Patch: 16}, []float64{0.5, 0.5, 0.2, 0.1}, seed)
	if err != nil {
		t.Fatal(err)
	}
	// Give the last layer weight of order one so the outputs are not tiny.
	rng := rand.New(rand.NewPCG(seed, 7))
	for _, p := range m.Params {
		for i := range p.Data {
			p.Data[i] += 0.3 * rng.NormFloat64()
		}
	}
	return m
}

func randInput(n int, seed uint64) []float64 {
	rng := rand.New(rand.NewPCG(seed, 11))
	x := make([]float64, n)
	for i := range x {
		x[i] = rng.NormFloat64()
	}
	return x
}

// The plain-Go forward pass and the gorgonia graph are one network.
func TestGraphMatchesPredictor(t *testing.T) {
	m := tinyModel(t, 1)
	const bursts, frames = 2, 3
	gr, err := NewGraph(m, bursts, frames)
	if err != nil {
		t.Fatal(err)
	}
	defer gr.Close()
	p := NewPredictor(m)
	x := randInput(gr.InputLen(), 2)
	for round := 0; round < 2; round++ {
		ygr := make([]float64, bursts*frames*m.Arch.Modes)
		if _, err := gr.Backward(x, make([]float64, len(ygr)), ygr); err != nil {
			t.Fatal(err)
		}
		per := p.InputLen(frames)
		for b := 0; b < bursts; b++ {
			y := make([]float64, frames*m.Arch.Modes)
			p.Raw(y, x[b*per:(b+1)*per], frames)
			for i, v := range y {
				w := ygr[b*len(y)+i]
				if math.Abs(v-w) > 1e-9*(1+math.Abs(w)) {
					t.Fatalf("round %d burst %d output %d: plain %.15g, gorgonia %.15g", round, b, i, v, w)
				}
			}
		}
		// Weights changed in place must be seen by both on the next round.
		for _, q := range m.Params {
			for i := range q.Data {
				q.Data[i] *= 1.1
			}
		}
	}
}

// The outside gradient fed through Sum(y ⊙ gin) gives ∂L/∂w for a known
// scalar function of the outputs, checked against central differences.
func TestGraphOuterGradient(t *testing.T) {
	m := tinyModel(t, 3)
	const bursts, frames = 2, 2
	gr, err := NewGraph(m, bursts, frames)
	if err != nil {
		t.Fatal(err)
	}
	defer gr.Close()
	p := NewPredictor(m)
	x := randInput(gr.InputLen(), 4)
	nm := m.Arch.Modes
	// L(y) = Σ_r Σ_m c_m sin(y_rm) + ½ y_rm², a known smooth function.
	loss := func() float64 {
		per := p.InputLen(frames)
		s := 0.0
		y := make([]float64, frames*nm)
		for b := 0; b < bursts; b++ {
			p.Raw(y, x[b*per:(b+1)*per], frames)
			for i, v := range y {
				s += float64(i%nm+1)*math.Sin(v) + 0.5*v*v
			}
		}
		return s
	}
	y := make([]float64, bursts*frames*nm)
	per := p.InputLen(frames)
	for b := 0; b < bursts; b++ {
		p.Raw(y[b*frames*nm:(b+1)*frames*nm], x[b*per:(b+1)*per], frames)
	}
	gin := make([]float64, len(y))
	for i, v := range y {
		gin[i] = float64(i%nm+1)*math.Cos(v) + v
	}
	grads, err := gr.Backward(x, gin, nil)
	if err != nil {
		t.Fatal(err)
	}
	// A second pass gives the same gradient (no accumulation between calls).
	first := make([][]float64, len(grads))
	for i, g := range grads {
		first[i] = append([]float64(nil), g...)
	}
	if grads, err = gr.Backward(x, gin, nil); err != nil {
		t.Fatal(err)
	}
	for i, g := range grads {
		for k, v := range g {
			if v != first[i][k] {
				t.Fatalf("%s[%d]: second pass %v, first %v", m.Params[i].Name, k, v, first[i][k])
			}
		}
	}
	const h = 1e-6
	checked := 0
	for ti, q := range m.Params {
		for i := 0; i < len(q.Data); i += 1 + len(q.Data)/7 {
			old := q.Data[i]
			q.Data[i] = old + h
			lp := loss()
			q.Data[i] = old - h
			lm := loss()
			q.Data[i] = old
			fd := (lp - lm) / (2 * h)
			got := grads[ti][i]
			if math.Abs(fd-got) > 1e-6*(1+math.Abs(fd)) {
				t.Errorf("%s[%d]: back-propagated %.10g, central difference %.10g", q.Name, i, got, fd)
			}
			checked++
		}
	}
	if checked < 20 {
		t.Fatalf("only %d weights checked", checked)
	}
}
