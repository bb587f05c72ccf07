package net

import (
	"math"
	"math/rand/v2"
	"testing"
)

func randomBurst(frames, n int, seed uint64) [2][][]float64 {
	rng := rand.New(rand.NewPCG(seed, 3))
	var d [2][][]float64
	for c := 0; c < 2; c++ {
		for j := 0; j < frames; j++ {
			im := make([]float64, n*n)
			for i := range im {
				im[i] = 100 + 10*rng.NormFloat64()
			}
			d[c] = append(d[c], im)
		}
	}
	return d
}

// Swapping the two channels changes the sign of the power difference and of
// Im(D1 D2*) and leaves Re(D1 D2*) alone; identical channels give
// P = 0, Im = 0 and Re = 2|D|²/(2|D|²+2ν) ≤ 1 (definitions in Featurizer).
func TestFeaturesChannelSymmetry(t *testing.T) {
	m, err := New(DefaultArch(4), demoMeta(), []float64{1, 1, 1, 1}, 1)
	if err != nil {
		t.Fatal(err)
	}
	f, err := NewFeaturizer(m)
	if err != nil {
		t.Fatal(err)
	}
	const frames = 3
	d := randomBurst(frames, 64, 9)
	a := make([]float64, f.Len(frames))
	b := make([]float64, f.Len(frames))
	if err := f.Burst(a, d); err != nil {
		t.Fatal(err)
	}
	if err := f.Burst(b, [2][][]float64{d[1], d[0]}); err != nil {
		t.Fatal(err)
	}
	pl := 32 * 32
	nonzero := 0
	for j := 0; j < frames; j++ {
		o := j * FeatureChannels * pl
		for k := 0; k < pl; k++ {
			p, re, im := a[o+2*pl+k], a[o+3*pl+k], a[o+4*pl+k]
			ps, res, ims := b[o+2*pl+k], b[o+3*pl+k], b[o+4*pl+k]
			if math.Abs(p+ps) > 1e-12 || math.Abs(re-res) > 1e-12 || math.Abs(im+ims) > 1e-12 {
				t.Fatalf("frame %d block %d: (%g %g %g) swapped (%g %g %g)", j, k, p, re, im, ps, res, ims)
			}
			if p*p+re*re+im*im > 1+1e-12 {
				t.Fatalf("frame %d block %d: ratio magnitude above 1", j, k)
			}
			if p != 0 {
				nonzero++
			}
		}
	}
	if nonzero < frames*pl/2 {
		t.Fatalf("only %d non-zero spectral blocks", nonzero)
	}
	if err := f.Burst(a, [2][][]float64{d[0], d[0]}); err != nil {
		t.Fatal(err)
	}
	for k := 0; k < pl; k++ {
		if p, re, im := a[2*pl+k], a[3*pl+k], a[4*pl+k]; math.Abs(p) > 1e-12 || math.Abs(im) > 1e-12 || re > 1+1e-12 || re < 0 {
			t.Fatalf("identical channels, block %d: P=%g Re=%g Im=%g", k, p, re, im)
		}
	}
	// Normalisation: the image channels do not depend on brightness.
	for c := 0; c < 2; c++ {
		for _, im := range d[c] {
			for i := range im {
				im[i] *= 7
			}
		}
	}
	c := make([]float64, f.Len(frames))
	if err := f.Burst(c, randomBurst(frames, 64, 9)); err != nil {
		t.Fatal(err)
	}
	if err := f.Burst(a, d); err != nil {
		t.Fatal(err)
	}
	for i := range a {
		if math.Abs(a[i]-c[i]) > 1e-9 {
			t.Fatalf("feature %d changes with brightness: %g vs %g", i, a[i], c[i])
		}
	}
	// Constant data is refused, not divided by zero.
	for _, im := range d[0] {
		for i := range im {
			im[i] = 1
		}
	}
	if err := f.Burst(a, d); err == nil {
		t.Error("constant focused images accepted")
	}
}
