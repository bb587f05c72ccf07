package infer

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/stat"

	"pdwave/model/fft"
	"pdwave/model/optics"
)

// TestDiffractionLimitedMTF checks the reference image against Goodman's
// clear-aperture MTF (Introduction to Fourier Optics, eq. 6-32 in the 3rd
// edition, from memory): a cosine object at ν = f/(D/λ) keeps the fraction
// MTF(ν) of its amplitude. Tolerance 0.01: the hard-edged pupil of radius
// 31 px is accurate to about 3e-3 (optics tests). Planted: skipping the OTF
// product leaves the amplitude at 1 and fails.
func TestDiffractionLimitedMTF(t *testing.T) {
	tel := optics.Telescope{Diameter: 0.5, Wavelength: 600e-9, PixelScale: 0.12 * math.Pi / 180 / 3600}
	const n, k = 128, 20
	obj := make([]float64, n*n)
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			obj[y*n+x] = 1 + 0.5*math.Cos(2*math.Pi*k*float64(x)/n)
		}
	}
	img, err := DiffractionLimited(obj, n, n, tel)
	if err != nil {
		t.Fatal(err)
	}
	var c float64 // amplitude of the cosine along one row
	for x := 0; x < n; x++ {
		c += (img[n/2*n+x] - 1) * math.Cos(2*math.Pi*k*float64(x)/n)
	}
	got := c * 2 / n / 0.5
	nu := (k / float64(n)) / (tel.Diameter * tel.PixelScale / tel.Wavelength)
	if want := optics.DiffractionMTF(nu); math.Abs(got-want) > 0.01 {
		t.Errorf("transfer at ν = %.3f: %.4f, want Goodman's MTF %.4f", nu, got, want)
	}
}

// TestScoreImage checks the score's definition on exact cases: the
// reference scores 0; its mean 1; doubled fluctuations (over-restoration)
// exactly 1 and halved ones 0.5, with the contrasts reported; a copy
// shifted by (2.3, −1.6) px is registered back (error < 1e-3, shift within
// 0.05 px). Planted: registering without the refinement leaves the shift
// 0.03 px off and an error of 0.007.
func TestScoreImage(t *testing.T) {
	const n = 96
	rng := rand.New(rand.NewPCG(4, 5))
	ref := smoothField(rng, n)
	mean := make([]float64, n*n)
	double, half := make([]float64, n*n), make([]float64, n*n)
	m := stat.Mean(region(ref, n, n, 8), nil) // fluctuations about the scored region's mean
	for i, v := range ref {
		mean[i] = 1
		double[i] = m + 2*(v-m)
		half[i] = m + 0.5*(v-m)
	}
	for _, c := range []struct {
		name string
		img  []float64
		want float64
	}{{"itself", ref, 0}, {"its mean", mean, 1}, {"doubled", double, 1}, {"halved", half, 0.5}} {
		s, err := ScoreImage(c.img, ref, n, n, 8, 0)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(s.Error-c.want) > 1e-9 {
			t.Errorf("%s: error %g, want %g", c.name, s.Error, c.want)
		}
	}
	plan := fft.NewPlan(n, n)
	moved := fourierShift(plan, ref, n, n, 2.3, -1.6)
	s, err := ScoreImage(moved, ref, n, n, 8, 4)
	if err != nil {
		t.Fatal(err)
	}
	if s.Error > 1e-3 || math.Abs(s.DX-2.3) > 0.05 || math.Abs(s.DY+1.6) > 0.05 {
		t.Errorf("shifted copy: error %g, shift (%.3f, %.3f), want ≈ 0 and (2.3, −1.6)", s.Error, s.DX, s.DY)
	}
	if _, err := ScoreImage(ref, ref, n, n, n/2, 0); err == nil {
		t.Error("an edge that leaves no region was accepted")
	}
}

// smoothField is a positive random field of mean about 1, smooth over a few
// pixels (so sub-pixel registration is well defined).
func smoothField(rng *rand.Rand, n int) []float64 {
	f := make([]float64, n*n)
	for k := 0; k < 40; k++ {
		kx, ky := rng.IntN(9)-4, rng.IntN(9)-4
		a, ph := 0.05*rng.Float64(), 2*math.Pi*rng.Float64()
		for y := 0; y < n; y++ {
			for x := 0; x < n; x++ {
				f[y*n+x] += a * math.Cos(2*math.Pi*float64(kx*x+ky*y)/float64(n)+ph)
			}
		}
	}
	for i := range f {
		f[i] += 1
	}
	return f
}
