package net

import "testing"

// BenchmarkPredict measures one prediction with the default architecture for
// a 64×64 patch, 16 frames: features (16 FFTs of 64×64) plus the plain-Go
// forward pass.
func BenchmarkPredict(b *testing.B) {
	scale := make([]float64, 21)
	for i := range scale {
		scale[i] = 1
	}
	m, err := New(DefaultArch(21), demoMeta(), scale, 1)
	if err != nil {
		b.Fatal(err)
	}
	f, err := NewFeaturizer(m)
	if err != nil {
		b.Fatal(err)
	}
	p := NewPredictor(m)
	const frames = 16
	d := randomBurst(frames, 64, 1)
	x := make([]float64, f.Len(frames))
	out := make([]float64, frames*21)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if err := f.Burst(x, d); err != nil {
			b.Fatal(err)
		}
		p.Forward(out, x, frames)
	}
}

// BenchmarkFeatures measures the feature extraction alone (64×64, 16 frames).
func BenchmarkFeatures(b *testing.B) {
	m, err := New(DefaultArch(21), demoMeta(), make21(), 1)
	if err != nil {
		b.Fatal(err)
	}
	f, _ := NewFeaturizer(m)
	d := randomBurst(16, 64, 1)
	x := make([]float64, f.Len(16))
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if err := f.Burst(x, d); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkGraphStep measures one gorgonia forward+backward pass for a batch
// of 4 bursts of 16 frames (the training step's network part).
func BenchmarkGraphStep(b *testing.B) {
	m, err := New(DefaultArch(21), demoMeta(), make21(), 1)
	if err != nil {
		b.Fatal(err)
	}
	gr, err := NewGraph(m, 4, 16)
	if err != nil {
		b.Fatal(err)
	}
	defer gr.Close()
	x := randInput(gr.InputLen(), 1)
	gin := randInput(4*16*21, 2)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := gr.Backward(x, gin, nil); err != nil {
			b.Fatal(err)
		}
	}
}

func make21() []float64 {
	s := make([]float64, 21)
	for i := range s {
		s[i] = 1
	}
	return s
}
