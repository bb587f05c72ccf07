package restore

import (
	"math"
	"math/rand/v2"
	"testing"

	"pdwave/simulate"
)

// third is the third difference −v(x−1) + 3v(x) − 3v(x+1) + v(x+2) of row r
// at the pair of columns (x, x+1). It vanishes on polynomials up to the
// second degree, so a smooth blend ramp between two tiles adds almost nothing
// (its third derivative, about 0.03·|a − b| for a sin² ramp over 8 px),
// while a step δ between x and x+1 gives −2δ.
func third(r []float64, x int) float64 { return -r[x-1] + 3*r[x] - 3*r[x+1] + r[x+2] }

// seamAxis returns the seam statistic of the boundaries between patch
// columns of the nx-wide mosaic im (patch side n, origins o along the axis
// tested, oy across it; tile(i, j) is the tile at origin (o[i], oy[j])):
// the largest seamSeg.score over the boundary segments between neighbouring
// tiles of one row of patches, each over the rows that only that row of
// patches covers.
func seamAxis(im []float64, nx, n int, o, oy []int, tile func(i, j int) []float64) float64 {
	worst := 0.0
	for j := range oy {
		y0, y1 := oy[j], oy[j]+n
		if j > 0 {
			y0 = max(y0, oy[j-1]+n)
		}
		if j < len(oy)-1 {
			y1 = min(y1, oy[j+1])
		}
		for i := 1; i < len(o); i++ {
			sg := seamSeg{im: im, a: tile(i-1, j), b: tile(i, j), nx: nx, n: n, xa: o[i-1], xb: o[i], ty: oy[j]}
			worst = math.Max(worst, sg.score(y0, y1))
		}
	}
	return worst
}

// seamSeg is one boundary segment: the mosaic im (nx wide) and the two
// n×n tiles a and b at origins (xa, ty) and (xb, ty), xa < xb.
type seamSeg struct {
	im, a, b   []float64
	nx, n      int
	xa, xb, ty int
}

// score returns 1 + max R(x) / P̄ over rows [y0, y1) and the column pairs
// (x, x+1) whose third-difference support touches the overlap [xb, xa+n).
// R(x) is the residual power of the mosaic's third difference t_M after
// the best constant mix λ t_a + (1−λ) t_b, λ in [0, 1], of the tiles'
// third differences (only the tile whose support lies inside it where the
// other does not reach); P̄ is the mean over those pairs of the larger of
// the tiles' third-difference powers. A blend whose weights vary smoothly
// is locally such a mix (the third difference annihilates the blend ramp
// up to its second derivative), so it scores 1 to within the ramp's
// leakage; a cut from a to b inside the support is not a mix of the two
// and leaves the step between them.
func (s seamSeg) score(y0, y1 int) float64 {
	n := s.n
	var worst, ref, c float64
	for x := max(s.xb-2, 1); x <= min(s.xa+n, s.nx-3); x++ {
		inA := x-1 >= s.xa && x+2 < s.xa+n
		inB := x-1 >= s.xb && x+2 < s.xb+n
		var sdd, sde, see, pa, pb float64
		for y := y0; y < y1; y++ {
			tm := third(s.im[y*s.nx:(y+1)*s.nx], x)
			var ta, tb float64
			if inA {
				ta = third(s.a[(y-s.ty)*n:(y-s.ty+1)*n], x-s.xa)
			}
			if inB {
				tb = third(s.b[(y-s.ty)*n:(y-s.ty+1)*n], x-s.xb)
			}
			pa, pb = pa+ta*ta, pb+tb*tb
			d, e := ta-tb, tm-tb
			sdd, sde, see = sdd+d*d, sde+d*e, see+e*e
		}
		lam := 1.0 // only a covers the support
		switch {
		case inA && inB && sdd > 0:
			lam = math.Min(math.Max(sde/sdd, 0), 1)
		case inB:
			lam = 0
		}
		worst = math.Max(worst, see-2*lam*sde+lam*lam*sdd)
		ref += math.Max(pa, pb)
		c++
	}
	return 1 + worst/(ref/c)
}

// seamScore is the seam statistic of the mosaic im of tiles (Patch², in
// Grid id order) over g: the larger of seamAxis across the boundaries
// between patch columns and, on the transposed images, between patch rows.
// A blended mosaic scores about 1; a hard cut scores about 1 + 4δ²/P̄ at
// the cut, δ² the mean squared step between the tiles there and P̄ their
// mean third-difference power in the overlap. Overlaps of three tiles
// (a field barely wider than a clamped last patch) are not supported.
func seamScore(im []float64, tiles [][]float64, g *Grid) float64 {
	n, cols := g.Patch, len(g.X0)
	sx := seamAxis(im, g.Nx, n, g.X0, g.Y0, func(i, j int) []float64 { return tiles[j*cols+i] })
	tt := make([][]float64, len(tiles))
	for id, t := range tiles {
		tt[id] = transpose(t, n, n)
	}
	sy := seamAxis(transpose(im, g.Nx, g.Ny), g.Ny, n, g.Y0, g.X0, func(i, j int) []float64 { return tt[i*cols+j] })
	return math.Max(sx, sy)
}

// perturbedTiles cuts the tiles of g from field and changes each as
// separately restored patches differ: a contrast gain 1 + gain·N(0,1)
// about the tile mean, an offset off·N(0,1) (in units of the mean) and a
// shift uniform in ±shift pixels along each axis.
func perturbedTiles(field []float64, g *Grid, gain, off, shift float64, rng *rand.Rand) [][]float64 {
	n := g.Patch
	sh := NewShifter(n, n)
	tiles := make([][]float64, g.Count())
	for id := range tiles {
		x0, y0 := g.Origin(id)
		t := make([]float64, n*n)
		for y := 0; y < n; y++ {
			copy(t[y*n:(y+1)*n], field[(y0+y)*g.Nx+x0:])
		}
		sh.Shift(t, t, shift*(2*rng.Float64()-1), shift*(2*rng.Float64()-1))
		var m float64
		for _, v := range t {
			m += v / float64(len(t))
		}
		k, c := 1+gain*rng.NormFloat64(), off*rng.NormFloat64()*m
		for i, v := range t {
			t[i] = m + k*(v-m) + c
		}
		tiles[id] = t
	}
	return tiles
}

// seamField returns a diffraction-limited granulation scene of the demo
// telescope (simulate.Granulation at 0.120"/px seen through the
// aberration-free PSF), nx×ny, cut from a periodic nx×nx scene (ny ≤ nx).
func seamField(t *testing.T, nx, ny int, seed uint64) []float64 {
	t.Helper()
	sq := make([]float64, nx*nx)
	if err := simulate.Granulation(sq, nx, nx, 0.120, simulate.GranulationParams{}, rand.New(rand.NewPCG(seed, 4))); err != nil {
		t.Fatal(err)
	}
	return diffractionBlur(t, sq, nx)[:nx*ny]
}

// seamMosaics blends tiles over g with Mosaic and, as a control, cuts them
// hard (each pixel from the nearest patch centre); it returns both images.
func seamMosaics(g *Grid, tiles [][]float64) (blended, hard []float64) {
	m := NewMosaic(g)
	h := newHardMosaic(g)
	for id, tl := range tiles {
		m.Add(id, tl)
		x0, y0 := g.Origin(id)
		h.add(&PatchResult{ID: id, X0: x0, Y0: y0, Tile: tl})
	}
	return m.Image(nil), h.out
}

// seamTol is the largest seam score (seamScore) accepted for a blended
// mosaic: our acceptance level, set between the blended mosaics measured
// (1.04 for the synthetic tiles of TestMosaicSeams, 1.07 for the
// restorations of TestRestoreField) and their hard cuts (4.4 and 2.9).
const seamTol = 1.25

// TestMosaicSeams blends tiles that differ from patch to patch as separate
// restorations do (contrast gain 5 % rms, offset 0.5 % of the mean rms,
// shifts uniform in ±0.2 px: our choice, from memory of per-patch MFBD
// restorations; the residual image shift is what phase diversity cannot
// measure) over a 256×240 field, patch 64, overlap 16 (the last row of
// patches clamped to a 32 px overlap), and checks that no boundary shows a
// step: the seam score must stay below seamTol, while the hard cut of the
// same tiles must exceed it by a wide margin (so the score can see seams).
func TestMosaicSeams(t *testing.T) {
	const nx, ny = 256, 240
	g, err := NewGrid(nx, ny, 64, 16)
	if err != nil {
		t.Fatal(err)
	}
	field := seamField(t, nx, ny, 3)
	tiles := perturbedTiles(field, g, 0.05, 0.005, 0.2, rand.New(rand.NewPCG(5, 6)))
	blended, hard := seamMosaics(g, tiles)
	sb, sh := seamScore(blended, tiles, g), seamScore(hard, tiles, g)
	t.Logf("seam score: blended %.3f, hard cut %.3f (tolerance %.2f)", sb, sh, seamTol)
	if !(sb < seamTol) {
		t.Errorf("seam score of the blended mosaic %.3f ≥ %.2f: patch boundaries visible", sb, seamTol)
	}
	// Control: the hard cut must exceed four times the tolerated excess
	// over 1.
	if !(sh > 1+4*(seamTol-1)) {
		t.Errorf("seam score of the hard cut %.3f ≤ %.2f: the score cannot see seams", sh, 1+4*(seamTol-1))
	}
}
