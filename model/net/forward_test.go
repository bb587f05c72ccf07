package net

import (
	"math"
	"testing"

	"gonum.org/v1/gonum/floats"
)

// refRaw is the straightforward forward pass the optimised Predictor must
// reproduce: per frame, an explicit im2col of each 3×3 stride-2 convolution
// and one dot product per output value, then the dense layers of Raw.
func refRaw(m *Model, x []float64, frames int) []float64 {
	a := m.Arch
	ps := m.Params
	in := x
	cin, s := a.Channels, a.Size
	for l, cout := range a.Conv {
		o := convOut(s)
		k := cin * 9
		col := make([]float64, o*o*k)
		out := make([]float64, frames*cout*o*o)
		w, bias := ps[2*l].Data, ps[2*l+1].Data
		for f := 0; f < frames; f++ {
			im := in[f*cin*s*s : (f+1)*cin*s*s]
			for oy := 0; oy < o; oy++ {
				for ox := 0; ox < o; ox++ {
					row := col[(oy*o+ox)*k : (oy*o+ox+1)*k]
					i := 0
					for ch := 0; ch < cin; ch++ {
						for ky := 0; ky < 3; ky++ {
							for kx := 0; kx < 3; kx++ {
								y, xx := 2*oy+ky-1, 2*ox+kx-1
								row[i] = 0
								if y >= 0 && y < s && xx >= 0 && xx < s {
									row[i] = im[ch*s*s+y*s+xx]
								}
								i++
							}
						}
					}
				}
			}
			for ch := 0; ch < cout; ch++ {
				for q := 0; q < o*o; q++ {
					v := floats.Dot(w[ch*k:(ch+1)*k], col[q*k:(q+1)*k]) + bias[ch]
					if v < 0 {
						v = 0
					}
					out[(f*cout+ch)*o*o+q] = v
				}
			}
		}
		in, cin, s = out, cout, o
	}
	nl := len(a.Conv)
	h := a.Hidden
	enc := make([]float64, frames*h)
	dense(enc, in, ps[2*nl].Data, ps[2*nl+1].Data, frames, a.flat(), h, true)
	cat := make([]float64, frames*2*h)
	for f := 0; f < frames; f++ {
		copy(cat[f*2*h:], enc[f*h:(f+1)*h])
		for j := 0; j < h; j++ {
			mean := 0.0
			for g := 0; g < frames; g++ {
				mean += enc[g*h+j]
			}
			cat[f*2*h+h+j] = mean / float64(frames)
		}
	}
	hid := make([]float64, frames*a.Head)
	dense(hid, cat, ps[2*nl+2].Data, ps[2*nl+3].Data, frames, 2*h, a.Head, true)
	y := make([]float64, frames*a.Modes)
	dense(y, hid, ps[2*nl+4].Data, ps[2*nl+5].Data, frames, a.Head, a.Modes, false)
	return y
}

// The phase-split, all-frames convolution equals the per-frame im2col
// reference to 1e-9 (only the summation order differs), for the default
// architecture and for odd and tiny input sizes, with changing frame
// counts, on the vector and the portable path.
func TestPredictorMatchesReference(t *testing.T) {
	archs := []Arch{
		DefaultArch(36),
		{Channels: 3, Size: 9, Conv: []int{5, 6, 3}, Hidden: 7, Head: 5, Modes: 3},
		{Channels: 2, Size: 7, Conv: []int{4}, Hidden: 3, Head: 4, Modes: 2},
		{Channels: 1, Size: 1, Conv: []int{9}, Hidden: 2, Head: 2, Modes: 1},
	}
	paths := []bool{false}
	if useVec {
		paths = append(paths, true)
	}
	defer func(v bool) { useVec = v }(useVec)
	for ai, a := range archs {
		scale := make([]float64, a.Modes)
		for i := range scale {
			scale[i] = 1
		}
		m, err := New(a, Meta{Patch: 2 * a.Size}, scale, uint64(ai+1))
		if err != nil {
			t.Fatal(err)
		}
		// Non-zero biases and order-one outputs make every term count.
		for _, q := range m.Params {
			for i := range q.Data {
				q.Data[i] += 0.05 * math.Sin(float64(3*i+ai))
			}
		}
		for _, vec := range paths {
			useVec = vec
			p := NewPredictor(m)
			for _, frames := range []int{16, 1, 3, 16, 5} {
				x := randInput(p.InputLen(frames), uint64(frames+10*ai))
				want := refRaw(m, x, frames)
				got := make([]float64, len(want))
				p.Raw(got, x, frames)
				nonzero := 0
				for i, w := range want {
					if math.Abs(got[i]-w) > 1e-9*(1+math.Abs(w)) {
						t.Fatalf("arch %d vector %v frames %d output %d: %.15g, reference %.15g", ai, vec, frames, i, got[i], w)
					}
					if w != 0 {
						nonzero++
					}
				}
				if nonzero == 0 {
					t.Fatalf("arch %d frames %d: all reference outputs zero", ai, frames)
				}
			}
		}
	}
}

// After the first call for a frame count, Forward (of Predictor and
// Predictor32) and Featurizer.Burst allocate nothing.
func TestPredictNoAllocs(t *testing.T) {
	m, err := New(DefaultArch(36), demoMeta(), make36(), 1)
	if err != nil {
		t.Fatal(err)
	}
	f, err := NewFeaturizer(m)
	if err != nil {
		t.Fatal(err)
	}
	p, p32 := NewPredictor(m), NewPredictor32(m)
	const frames = 4
	d := randomBurst(frames, 64, 1)
	x := make([]float64, f.Len(frames))
	out := make([]float64, frames*36)
	run := func() {
		if err := f.Burst(x, d); err != nil {
			t.Fatal(err)
		}
		p.Forward(out, x, frames)
		p32.Forward(out, x, frames)
	}
	run()
	if n := testing.AllocsPerRun(5, run); n != 0 {
		t.Errorf("%v allocations per prediction", n)
	}
}

// The shipped weights give the reference's outputs on real features.
func TestShippedWeightsMatchReference(t *testing.T) {
	const frames = 6
	m, x := shippedFeatures(t, frames)
	want := refRaw(m, x, frames)
	got := make([]float64, len(want))
	NewPredictor(m).Raw(got, x, frames)
	for i, w := range want {
		if math.Abs(got[i]-w) > 1e-9*(1+math.Abs(w)) {
			t.Fatalf("output %d: %.15g, reference %.15g", i, got[i], w)
		}
	}
}

// shippedFeatures returns the shipped weights and the features of a
// random burst of frames frames (seed 21) for them.
func shippedFeatures(t *testing.T, frames int) (*Model, []float64) {
	t.Helper()
	m, err := Load("../../weights/demo.safetensors")
	if err != nil {
		t.Fatal(err)
	}
	f, err := NewFeaturizer(m)
	if err != nil {
		t.Fatal(err)
	}
	x := make([]float64, f.Len(frames))
	if err := f.Burst(x, randomBurst(frames, m.Meta.Patch, 21)); err != nil {
		t.Fatal(err)
	}
	return m, x
}
