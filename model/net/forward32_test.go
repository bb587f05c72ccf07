package net

import (
	"math"
	"testing"
)

// tol32 is the tolerance of the float32 forward pass against the float64
// reference, relative to the output scale (the largest |y| of the burst; the
// raw outputs are of order one by construction). Float32 rounds with unit
// u = 2⁻²⁴ ≈ 6e-8; a dot product of length K errs by at most γ_K·Σ|w x|,
// γ_K ≈ K·u (Higham, Accuracy and Stability of Numerical Algorithms, 2nd
// ed., §3.1, eq. 3.5), 3e-5 for the longest sum here (K = 512, the encoder),
// and typically by √K·u ≈ 1.4e-6; the five layers add up to a few times
// that. 1e-4 leaves a margin over the worst case, and a wrong term, lane or
// bias is far beyond it.
const tol32 = 1e-4

// testArchs are the architectures of the reference tests: the default and
// odd and tiny input sizes (channels not a multiple of 4, a single output).
func testArchs() []Arch {
	return []Arch{
		DefaultArch(36),
		{Channels: 3, Size: 9, Conv: []int{5, 6, 3}, Hidden: 7, Head: 5, Modes: 3},
		{Channels: 2, Size: 7, Conv: []int{4}, Hidden: 3, Head: 4, Modes: 2},
		{Channels: 1, Size: 1, Conv: []int{9}, Hidden: 2, Head: 2, Modes: 1},
	}
}

// perturbedModel returns a model of a whose weights and biases are all
// non-zero and whose outputs are of order one.
func perturbedModel(t *testing.T, a Arch, seed int) *Model {
	t.Helper()
	scale := make([]float64, a.Modes)
	for i := range scale {
		scale[i] = 1
	}
	m, err := New(a, Meta{Patch: 2 * a.Size}, scale, uint64(seed+1))
	if err != nil {
		t.Fatal(err)
	}
	for _, q := range m.Params {
		for i := range q.Data {
			q.Data[i] += 0.05 * math.Sin(float64(3*i+seed))
		}
	}
	return m
}

// maxDiff returns max |got − want| and max |want|.
func maxDiff(got, want []float64) (diff, scale float64) {
	for i, w := range want {
		diff = math.Max(diff, math.Abs(got[i]-w))
		scale = math.Max(scale, math.Abs(w))
	}
	return diff, scale
}

// The float32 forward pass equals the float64 reference (refRaw) within
// tol32 of the output scale, for every test architecture, on the vector and
// the portable path, with changing frame counts (1, 16 and 17 frames: one
// dense tile full and just exceeded; 33: three tiles).
func TestPredictor32MatchesReference(t *testing.T) {
	paths := []bool{false}
	if useVec {
		paths = append(paths, true)
	}
	defer func(v bool) { useVec = v }(useVec)
	worst := 0.0
	for ai, a := range testArchs() {
		m := perturbedModel(t, a, ai)
		for _, vec := range paths {
			useVec = vec
			p := NewPredictor32(m)
			for _, frames := range []int{16, 1, 3, 17, 16, 5, 33} {
				x := randInput(p.InputLen(frames), uint64(frames+10*ai))
				want := refRaw(m, x, frames)
				got := make([]float64, len(want))
				p.Raw(got, x, frames)
				d, s := maxDiff(got, want)
				if s == 0 {
					t.Fatalf("arch %d frames %d: all reference outputs zero", ai, frames)
				}
				if d > tol32*s {
					t.Fatalf("arch %d vector %v frames %d: max difference %.3g, output scale %.3g (tolerance %g of it)", ai, vec, frames, d, s, tol32)
				}
				worst = math.Max(worst, d/s)
			}
		}
	}
	t.Logf("largest difference %.2g of the output scale", worst)
}

// Forward is Raw times the output scale, and the predictor keeps its own
// copy of the weights: changing the model afterwards changes nothing.
func TestPredictor32ForwardAndCopy(t *testing.T) {
	m := perturbedModel(t, DefaultArch(36), 7)
	for i := range m.Scale {
		m.Scale[i] = 0.1 * float64(i+1)
	}
	p := NewPredictor32(m)
	const frames = 3
	x := randInput(p.InputLen(frames), 4)
	raw := make([]float64, frames*36)
	p.Raw(raw, x, frames)
	for _, q := range m.Params {
		q.Data[0] += 1
	}
	m.Scale[0] = 100
	got := make([]float64, len(raw))
	p.Forward(got, x, frames)
	for i, v := range got {
		if want := raw[i] * (0.1 * float64(i%36+1)); v != want {
			t.Fatalf("output %d: %g, want Raw·Scale %g", i, v, want)
		}
	}
}

// Forward32 and Raw panic on wrong lengths and frame counts, as Predictor.
func TestPredictor32Panics(t *testing.T) {
	m := perturbedModel(t, DefaultArch(4), 1)
	p := NewPredictor32(m)
	for name, f := range map[string]func(){
		"no frames":    func() { p.Forward(nil, nil, 0) },
		"short input":  func() { p.Forward(make([]float64, 8), make([]float64, p.InputLen(2)-1), 2) },
		"short output": func() { p.Forward(make([]float64, 7), make([]float64, p.InputLen(2)), 2) },
	} {
		func() {
			defer func() {
				if recover() == nil {
					t.Errorf("%s: no panic", name)
				}
			}()
			f()
		}()
	}
}

// The shipped weights on real features: the float32 pass equals the float64
// reference within tol32 of the output scale, and the coefficients (rad)
// differ from the float64 Predictor's by far less than their error (the
// model card's rms error is of order 0.1 rad): below 1e-4 rad rms.
func TestShippedWeights32(t *testing.T) {
	const frames = 16
	m, x := shippedFeatures(t, frames)
	p := NewPredictor32(m)
	want := refRaw(m, x, frames)
	got := make([]float64, len(want))
	p.Raw(got, x, frames)
	if d, s := maxDiff(got, want); d > tol32*s {
		t.Fatalf("max difference %.3g, output scale %.3g (tolerance %g of it)", d, s, tol32)
	}
	a64 := make([]float64, len(want))
	NewPredictor(m).Forward(a64, x, frames)
	p.Forward(got, x, frames)
	var ss float64
	for i, v := range a64 {
		ss += (got[i] - v) * (got[i] - v)
	}
	rms := math.Sqrt(ss / float64(len(a64)))
	d, s := maxDiff(got, a64)
	t.Logf("coefficients float32 − float64: rms %.2g rad, max %.2g rad (largest coefficient %.2g rad)", rms, d, s)
	if rms > 1e-4 {
		t.Errorf("coefficients differ by %.3g rad rms, want < 1e-4", rms)
	}
}

// Predict equals Featurizer.Burst followed by Forward (the same float32
// arithmetic, so to rounding of the order of summation only), also after
// switching to a featurizer with a tighter cut-off (blocks that were inside
// before must read zero), and allocates nothing after the first call.
func TestPredictor32Predict(t *testing.T) {
	m := perturbedModel(t, DefaultArch(36), 3)
	m.Meta = demoMeta()
	p := NewPredictor32(m)
	f1, err := NewFeaturizer(m)
	if err != nil {
		t.Fatal(err)
	}
	m2 := *m
	m2.Meta.PixelScale *= 0.6
	f2, err := NewFeaturizer(&m2)
	if err != nil {
		t.Fatal(err)
	}
	const frames = 5
	d := randomBurst(frames, 64, 8)
	for _, f := range []*Featurizer{f1, f2, f1} {
		x := make([]float64, f.Len(frames))
		if err := f.Burst(x, d); err != nil {
			t.Fatal(err)
		}
		want := make([]float64, frames*36)
		NewPredictor32(m).Forward(want, x, frames)
		got := make([]float64, len(want))
		if err := p.Predict(got, f, d); err != nil {
			t.Fatal(err)
		}
		if diff, s := maxDiff(got, want); diff > 1e-6*s {
			t.Fatalf("cut-off %.3g px: Predict differs from Burst + Forward by %.3g (scale %.3g)", f.cutoff, diff, s)
		}
	}
	out := make([]float64, frames*36)
	if n := testing.AllocsPerRun(5, func() {
		if err := p.Predict(out, f1, d); err != nil {
			t.Fatal(err)
		}
	}); n != 0 {
		t.Errorf("%v allocations per Predict", n)
	}
	bad := d
	bad[1] = bad[1][:frames-1]
	if err := p.Predict(out, f1, bad); err == nil {
		t.Error("Predict with 5 focused and 4 defocused frames: no error")
	}
}
