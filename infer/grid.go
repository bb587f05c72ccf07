package infer

import (
	"fmt"
	"math"
)

// DefaultOverlap returns the overlap of neighbouring patches used by restore
// and compare when none is given: a quarter of the patch side.
func DefaultOverlap(patch int) int { return patch / 4 }

// Grid is the tiling of an Nx×Ny field into overlapping Patch×Patch patches.
//
// Patch origins along each axis start at 0 and advance by Patch−Overlap; the
// last origin is clamped to Nx−Patch (Ny−Patch) so the field is covered
// exactly, which may make the last overlap larger than Overlap. Patches are
// numbered row by row: id = iy·len(X0) + ix.
//
// Blending (see Weight): inside an overlap each patch discards Margin pixels
// next to its own edge (where the apodisation window of the fit tapers the
// data), then ramps from 0 to 1 as sin² over Overlap−2·Margin pixels. Where
// two neighbours overlap by exactly Overlap their ramps coincide and sum to
// one (sin² + cos² = 1); the mosaic divides by the accumulated weight, so the
// weights sum to one everywhere, including the wider clamped overlaps. Edges
// of the field get no ramp.
type Grid struct {
	Nx, Ny  int   // field size, pixels
	Patch   int   // patch side N, pixels
	Overlap int   // nominal overlap of neighbouring patches, pixels
	Margin  int   // pixels discarded at each inner patch edge
	X0, Y0  []int // patch origins along x and y
}

// NewGrid returns the tiling of an nx×ny field with patch side patch and
// overlap overlap. The discard margin is overlap/4. It returns an error if
// the field is smaller than one patch, if patch < 8, or if overlap is outside
// [0, patch/2].
func NewGrid(nx, ny, patch, overlap int) (*Grid, error) {
	if patch < 8 {
		return nil, fmt.Errorf("grid: patch size %d too small (need at least 8 pixels)", patch)
	}
	if nx < patch || ny < patch {
		return nil, fmt.Errorf("grid: field %d×%d is smaller than one %d×%d patch", nx, ny, patch, patch)
	}
	if overlap < 0 || 2*overlap > patch {
		return nil, fmt.Errorf("grid: overlap %d must lie in [0, %d] for patch %d", overlap, patch/2, patch)
	}
	g := &Grid{Nx: nx, Ny: ny, Patch: patch, Overlap: overlap, Margin: overlap / 4}
	g.X0 = gridOrigins(nx, patch, patch-overlap)
	g.Y0 = gridOrigins(ny, patch, patch-overlap)
	return g, nil
}

func gridOrigins(n, patch, step int) []int {
	var o []int
	for x := 0; ; x += step {
		if x+patch >= n {
			o = append(o, n-patch)
			break
		}
		o = append(o, x)
	}
	return o
}

// Count returns the number of patches.
func (g *Grid) Count() int { return len(g.X0) * len(g.Y0) }

// Origin returns the lower-left pixel (x0, y0) of patch id. It panics if id is
// out of range.
func (g *Grid) Origin(id int) (x0, y0 int) {
	if id < 0 || id >= g.Count() {
		panic(fmt.Sprintf("grid: patch id %d out of range [0,%d)", id, g.Count()))
	}
	return g.X0[id%len(g.X0)], g.Y0[id/len(g.X0)]
}

// profile fills w (len Patch) with the 1-D blend weight of the patch at
// position i of origins o.
func (g *Grid) profile(w []float64, o []int, i int) {
	n := g.Patch
	for k := range w {
		w[k] = 1
	}
	ramp := g.Overlap - 2*g.Margin
	if g.Overlap == 0 || ramp <= 0 {
		return
	}
	rampUp := func(k int) float64 { // weight at distance k from the patch edge
		if k < g.Margin {
			return 0
		}
		t := (float64(k-g.Margin) + 0.5) / float64(ramp)
		if t >= 1 {
			return 1
		}
		s := math.Sin(0.5 * math.Pi * t)
		return s * s
	}
	if i > 0 {
		for k := 0; k < g.Margin+ramp; k++ {
			w[k] *= rampUp(k)
		}
	}
	if i < len(o)-1 {
		for k := 0; k < g.Margin+ramp; k++ {
			w[n-1-k] *= rampUp(k)
		}
	}
}

// Weight fills dst (len Patch²) with the blend weight of patch id, the
// separable product of the x and y profiles described on Grid. Values lie in
// [0, 1]. It panics if len(dst) != Patch² or id is out of range.
func (g *Grid) Weight(dst []float64, id int) {
	n := g.Patch
	if len(dst) != n*n {
		panic("grid: Weight: wrong destination length")
	}
	if id < 0 || id >= g.Count() {
		panic(fmt.Sprintf("grid: patch id %d out of range [0,%d)", id, g.Count()))
	}
	wx := make([]float64, n)
	wy := make([]float64, n)
	g.profile(wx, g.X0, id%len(g.X0))
	g.profile(wy, g.Y0, id/len(g.X0))
	for y := 0; y < n; y++ {
		row := dst[y*n : (y+1)*n]
		for x := range row {
			row[x] = wy[y] * wx[x]
		}
	}
}
