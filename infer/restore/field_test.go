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
	buf := newPatchBuffers(3, 16)
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

// TestMosaicWeights checks Mosaic.Image, which sums the weights again,
// against the blend with the weights accumulated beside the tiles, to the
// bit, for a subset of the patches added out of id order (pixels no tile
// reached are NaN). Planted: the weights summed over every patch of the
// grid instead of those added fails it.
func TestMosaicWeights(t *testing.T) {
	g, err := NewGrid(150, 120, 48, 12)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(5, 6))
	m := NewMosaic(g)
	sum, wsum := make([]float64, g.Nx*g.Ny), make([]float64, g.Nx*g.Ny)
	w, tile := make([]float64, g.Patch*g.Patch), make([]float64, g.Patch*g.Patch)
	for _, id := range []int{3, 0, 5, 1} {
		for i := range tile {
			tile[i] = 1 + rng.Float64()
		}
		m.Add(id, tile)
		g.Weight(w, id)
		x0, y0 := g.Origin(id)
		for y := 0; y < g.Patch; y++ {
			for x := 0; x < g.Patch; x++ {
				i := (y0+y)*g.Nx + x0 + x
				sum[i] += w[y*g.Patch+x] * tile[y*g.Patch+x]
				wsum[i] += w[y*g.Patch+x]
			}
		}
	}
	img := m.Image(nil)
	for i := range img {
		want := math.NaN()
		if wsum[i] > 0 {
			want = sum[i] / wsum[i]
		}
		if math.Float64bits(img[i]) != math.Float64bits(want) && !(math.IsNaN(img[i]) && math.IsNaN(want)) {
			t.Fatalf("pixel %d: %v, want %v", i, img[i], want)
		}
	}
}
