package simulate

import (
	"math/rand/v2"
	"testing"
)

// BenchmarkPatch: one demo burst, 64×64 px, 16 frames, 36 KL modes of
// truth, three layers, noise, default Oversample 2 (all cores).
func BenchmarkPatch(b *testing.B) {
	s := newSim(b, demoConfig())
	var i uint64
	for b.Loop() {
		i++
		if _, err := s.Patch(rand.New(rand.NewPCG(i, 1)), Options{}); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkPatchOversample1: BenchmarkPatch with Oversample 1 (the fit's
// own model: N×N PSFs, screens at the fit's pupil pixel, no pixel box).
func BenchmarkPatchOversample1(b *testing.B) {
	c := demoConfig()
	c.Oversample = 1
	s := newSim(b, c)
	var i uint64
	for b.Loop() {
		i++
		if _, err := s.Patch(rand.New(rand.NewPCG(i, 1)), Options{}); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkField512: one demo full-field burst, 512×512 px, 16 frames, PSF
// nodes every 32 px (all cores).
func BenchmarkField512(b *testing.B) {
	s := newSim(b, demoConfig())
	var i uint64
	for b.Loop() {
		i++
		if _, err := s.Field(rand.New(rand.NewPCG(i, 1)), 512, 512, Options{}); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkScreen1024: one pair of 1024² screens with 3 subharmonic levels.
func BenchmarkScreen1024(b *testing.B) {
	g, err := NewScreenGenerator(ScreenParams{N: 1024, Dx: 0.016, R0: 0.1, L0: 30, Subharmonics: true})
	if err != nil {
		b.Fatal(err)
	}
	a := make([]float64, 1024*1024)
	c := make([]float64, 1024*1024)
	rng := rand.New(rand.NewPCG(1, 1))
	for b.Loop() {
		g.GeneratePair(a, c, rng)
	}
}

// BenchmarkGranulation512: one 512² granulation scene.
func BenchmarkGranulation512(b *testing.B) {
	im := make([]float64, 512*512)
	rng := rand.New(rand.NewPCG(1, 1))
	for b.Loop() {
		if err := Granulation(im, 512, 512, 0.12, GranulationParams{}, rng); err != nil {
			b.Fatal(err)
		}
	}
}
