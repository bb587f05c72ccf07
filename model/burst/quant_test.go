package burst

import (
	"math"
	"math/rand/v2"
	"path/filepath"
	"testing"

	"pdwave/model/fits"
)

// TestFrame16Quantise checks the quantisation of Frame16 on a frame of
// non-integer values: every pixel within half a step, the ends of the
// range kept, and the rms error step/√12, the uniform rounding error
// (Widrow & Kollár, Quantization Noise, 2008, §4; 2 % tolerance for 10⁵
// pixels). Planted: truncation (math.Floor) instead of rounding fails the
// half-step and the rms checks.
func TestFrame16Quantise(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	src := make([]float64, 100000)
	for i := range src {
		src[i] = 1e4 + 1500*rng.NormFloat64() + 0.5*rng.Float64()
	}
	var f Frame16
	f.Quantise(src)
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, v := range src {
		lo, hi = min(lo, v), max(hi, v)
	}
	if f.Offset != lo || !(math.Abs(f.Offset+f.Scale*math.MaxUint16-hi) <= 1e-9*hi) {
		t.Errorf("offset %g scale %g: range %g..%g, want %g..%g", f.Offset, f.Scale, f.Offset, f.Offset+f.Scale*math.MaxUint16, lo, hi)
	}
	var s2 float64
	for i, v := range src {
		d := f.At(i) - v
		if math.Abs(d) > f.Scale/2*(1+1e-9) {
			t.Fatalf("pixel %d: %g stored as %g, off by more than half a step %g", i, v, f.At(i), f.Scale/2)
		}
		s2 += d * d
	}
	rms, want := math.Sqrt(s2/float64(len(src))), f.Scale/math.Sqrt(12)
	if math.Abs(rms/want-1) > 0.02 {
		t.Errorf("rms error %g, want step/√12 = %g", rms, want)
	}
	dst := make([]float64, 10)
	f.Dequantise(dst, 5)
	for i, v := range dst {
		if v != f.At(5+i) {
			t.Errorf("Dequantise pixel %d: %g, At %g", 5+i, v, f.At(5+i))
		}
	}
}

// TestFrame16Exact checks that frames of integers spanning at most 65535
// (a 16-bit camera's counts) and constant frames are stored exactly, and
// that integers spanning more are not given a step of one.
func TestFrame16Exact(t *testing.T) {
	for _, tc := range []struct {
		name  string
		src   []float64
		exact bool
	}{
		{"16-bit counts", []float64{-32768, 0, 5, 32767}, true},
		{"unsigned counts", []float64{0, 1, 65535, 40000}, true},
		{"constant", []float64{3.25, 3.25, 3.25}, true},
		{"wide integers", []float64{0, 65536, 7}, false},
	} {
		var f Frame16
		f.Quantise(tc.src)
		for i, v := range tc.src {
			if got := f.At(i); tc.exact && got != v {
				t.Errorf("%s: pixel %d stored as %g, want %g exactly", tc.name, i, got, v)
			}
		}
		if !tc.exact && f.Scale <= 1 {
			t.Errorf("%s: step %g, want > 1", tc.name, f.Scale)
		}
	}
}

// TestReadQuantise16 checks that a burst read with Options.Quantise16
// holds the frames of a plain read within half a step, and no Data.
func TestReadQuantise16(t *testing.T) {
	path := filepath.Join(t.TempDir(), "burst.fits")
	in := testBurst(9, 7, 3, 5)
	if err := Write(path, in, fits.Provenance("0.0-test", nil)); err != nil {
		t.Fatal(err)
	}
	plain, err := Read(path)
	if err != nil {
		t.Fatal(err)
	}
	q, err := ReadFiles([]string{path}, Options{Quantise16: true})
	if err != nil {
		t.Fatal(err)
	}
	if q.Data[0] != nil || len(q.Data16[0]) != 3 || len(q.Data16[1]) != 3 {
		t.Fatalf("Data %d frames, Data16 %d/%d frames", len(q.Data[0]), len(q.Data16[0]), len(q.Data16[1]))
	}
	for c := range plain.Data {
		for f, fr := range plain.Data[c] {
			g := &q.Data16[c][f]
			for i, v := range fr {
				if d := math.Abs(g.At(i) - v); d > g.Scale/2*(1+1e-9) {
					t.Fatalf("channel %d frame %d pixel %d: %g, want %g within half a step %g", c, f, i, g.At(i), v, g.Scale/2)
				}
			}
		}
	}
}
