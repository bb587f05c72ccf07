package restore

import (
	"math"
	"math/rand/v2"
	"testing"

	"pdwave/model/burst"
)

// fieldFrames returns the frames fr dequantised.
func fieldFrames(fr []burst.Frame16) [][]float64 {
	out := make([][]float64, len(fr))
	for j := range fr {
		out[j] = make([]float64, len(fr[j].Q))
		fr[j].Dequantise(out[j], 0)
	}
	return out
}

// TestFieldQuantised checks that a Field's patches and mean are the
// frames within half a quantisation step (burst.Frame16), and that
// prepareShift adds at most half a step to the shifted frames.
func TestFieldQuantised(t *testing.T) {
	const nx, ny = 40, 30
	rng := rand.New(rand.NewPCG(3, 4))
	var data [2][][]float64
	for c := range data {
		for range 3 {
			fr := make([]float64, nx*ny)
			for i := range fr {
				fr[i] = 1e4 + 100*rng.NormFloat64() + 0.37
			}
			data[c] = append(data[c], fr)
		}
	}
	f, err := NewField(nx, ny, data)
	if err != nil {
		t.Fatal(err)
	}
	buf := restoreNewPatchBuffers(3, 16)
	f.cut(buf, 5, 7, 16)
	for c := range data {
		for j, fr := range data[c] {
			half := f.Data[c][j].Scale / 2
			for y := 0; y < 16; y++ {
				for x := 0; x < 16; x++ {
					if d := math.Abs(buf[c][j][y*16+x] - fr[(7+y)*nx+5+x]); d > half*(1+1e-9) {
						t.Fatalf("channel %d frame %d (%d, %d): patch off by %g, more than half a step %g", c, j, x, y, d, half)
					}
				}
			}
		}
	}
	// The shift: exact (float64) shift of the dequantised frames vs the
	// requantised one.
	want := fieldFrames(f.Data[1])
	s := NewShifter(nx, ny)
	for _, fr := range want {
		s.Shift(fr, fr, 0.3, -0.2)
	}
	prepareShift(f.Data[1], nx, ny, Offset{-0.3, 0.2}, true, 2)
	for j, fr := range fieldFrames(f.Data[1]) {
		half := f.Data[1][j].Scale / 2
		for i, v := range fr {
			// float32 scratch: 2⁻²⁴ relative on top of half a step.
			if d := math.Abs(v - want[j][i]); d > half+2e-7*math.Abs(v) {
				t.Fatalf("shifted frame %d pixel %d off by %g, more than half a step %g", j, i, d, half)
			}
		}
	}
}
