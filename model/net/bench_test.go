package net

import "testing"

// BenchmarkPredict measures one prediction with the default architecture for
// a 64×64 patch, 16 frames: features (16 FFTs of 64×64) into their float64
// array plus the float32 forward pass (Predictor32).
func BenchmarkPredict(b *testing.B) {
	m, err := New(DefaultArch(36), demoMeta(), make36(), 1)
	if err != nil {
		b.Fatal(err)
	}
	benchPredict(b, m, NewPredictor32(m))
}

// BenchmarkPredict64 is BenchmarkPredict with the float64 forward pass
// (Predictor).
func BenchmarkPredict64(b *testing.B) {
	m, err := New(DefaultArch(36), demoMeta(), make36(), 1)
	if err != nil {
		b.Fatal(err)
	}
	benchPredict(b, m, NewPredictor(m))
}

// forwarder is the forward pass of Predictor and Predictor32.
type forwarder interface {
	Forward(dst, x []float64, frames int)
}

func benchPredict(b *testing.B, m *Model, p forwarder) {
	f, err := NewFeaturizer(m)
	if err != nil {
		b.Fatal(err)
	}
	const frames = 16
	d := randomBurst(frames, 64, 1)
	x := make([]float64, f.Len(frames))
	out := make([]float64, frames*36)
	cpuLoop(b, func() {
		if err := f.Burst(x, d); err != nil {
			b.Fatal(err)
		}
		p.Forward(out, x, frames)
	})
}

// BenchmarkEstimator measures Estimator.Burst (features, forward pass, Noll
// equivalents, removal of the mean tip/tilt) for 16 frames of 64×64.
func BenchmarkEstimator(b *testing.B) {
	benchBurst(b, benchEstimator(b, NewEstimator))
}

// BenchmarkEstimator64 is BenchmarkEstimator with the float64 forward pass
// (NewEstimator64).
func BenchmarkEstimator64(b *testing.B) {
	benchBurst(b, benchEstimator(b, NewEstimator64))
}

func benchBurst(b *testing.B, e *Estimator) {
	d := randomBurst(16, 64, 1)
	cpuLoop(b, func() {
		if _, _, err := e.Burst(d); err != nil {
			b.Fatal(err)
		}
	})
}

// BenchmarkForward measures the float64 forward pass alone (16 frames).
func BenchmarkForward(b *testing.B) {
	m, err := New(DefaultArch(36), demoMeta(), make36(), 1)
	if err != nil {
		b.Fatal(err)
	}
	p := NewPredictor(m)
	x := randInput(p.InputLen(16), 1)
	out := make([]float64, 16*36)
	cpuLoop(b, func() { p.Forward(out, x, 16) })
}

func make36() []float64 {
	s := make([]float64, 36)
	for i := range s {
		s[i] = 1
	}
	return s
}

// BenchmarkFeatures measures the feature extraction alone (64×64, 16 frames).
func BenchmarkFeatures(b *testing.B) {
	m, err := New(DefaultArch(36), demoMeta(), make36(), 1)
	if err != nil {
		b.Fatal(err)
	}
	f, _ := NewFeaturizer(m)
	d := randomBurst(16, 64, 1)
	x := make([]float64, f.Len(16))
	cpuLoop(b, func() {
		if err := f.Burst(x, d); err != nil {
			b.Fatal(err)
		}
	})
}

// BenchmarkGraphStep measures one gorgonia forward+backward pass for a batch
// of 4 bursts of 16 frames (the training step's network part).
func BenchmarkGraphStep(b *testing.B) {
	m, err := New(DefaultArch(36), demoMeta(), make36(), 1)
	if err != nil {
		b.Fatal(err)
	}
	gr, err := NewGraph(m, 4, 16)
	if err != nil {
		b.Fatal(err)
	}
	defer gr.Close()
	x := randInput(gr.InputLen(), 1)
	gin := randInput(4*16*36, 2)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := gr.Backward(x, gin, nil); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkGraphBurst measures the gorgonia tape machine on one burst of 16
// frames (forward and backward run together), to compare with the plain-Go
// forward pass of BenchmarkForward.
func BenchmarkGraphBurst(b *testing.B) {
	m, err := New(DefaultArch(36), demoMeta(), make36(), 1)
	if err != nil {
		b.Fatal(err)
	}
	gr, err := NewGraph(m, 1, 16)
	if err != nil {
		b.Fatal(err)
	}
	defer gr.Close()
	x := randInput(gr.InputLen(), 1)
	gin := make([]float64, 16*36)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := gr.Backward(x, gin, nil); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkEstimatorStream is BenchmarkEstimator over 64 different bursts in
// turn (64 MB of images, more than the caches hold), as when a restoration
// streams patches: each burst's images come from main memory.
func BenchmarkEstimatorStream(b *testing.B) {
	e := benchEstimator(b, NewEstimator)
	var ds [64][2][][]float64
	for i := range ds {
		ds[i] = randomBurst(16, 64, uint64(i+1))
	}
	i := 0
	cpuLoop(b, func() {
		if _, _, err := e.Burst(ds[i%len(ds)]); err != nil {
			b.Fatal(err)
		}
		i++
	})
}

// benchEstimator returns an Estimator made by newEst for the default
// architecture (36 modes, demo optics) with weights drawn from seed 1.
func benchEstimator(b *testing.B, newEst func(*Model) (*Estimator, error)) *Estimator {
	return benchEstimatorArch(b, DefaultArch(36), newEst)
}

// benchEstimatorArch is benchEstimator for the architecture a (36 modes).
func benchEstimatorArch(b *testing.B, a Arch, newEst func(*Model) (*Estimator, error)) *Estimator {
	m, err := New(a, demoMeta(), make36(), 1)
	if err != nil {
		b.Fatal(err)
	}
	e, err := newEst(m)
	if err != nil {
		b.Fatal(err)
	}
	return e
}

// BenchmarkForward32 measures the float32 forward pass alone (16 frames).
func BenchmarkForward32(b *testing.B) {
	m, err := New(DefaultArch(36), demoMeta(), make36(), 1)
	if err != nil {
		b.Fatal(err)
	}
	p := NewPredictor32(m)
	x := randInput(p.InputLen(16), 1)
	out := make([]float64, 16*36)
	cpuLoop(b, func() { p.Forward(out, x, 16) })
}

// wideArch is the wider network of the model card's experiment (twice the
// convolution channels and feature widths, 192 900 weights).
func wideArch() Arch {
	a := DefaultArch(36)
	a.Conv, a.Hidden, a.Head = []int{16, 32, 64}, 128, 128
	return a
}

// BenchmarkEstimatorWide is BenchmarkEstimator for the wider network.
func BenchmarkEstimatorWide(b *testing.B) {
	benchBurst(b, benchEstimatorArch(b, wideArch(), NewEstimator))
}

// BenchmarkEstimatorWide64 is BenchmarkEstimatorWide with the float64
// forward pass.
func BenchmarkEstimatorWide64(b *testing.B) {
	benchBurst(b, benchEstimatorArch(b, wideArch(), NewEstimator64))
}
