package simulate

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
)

// GranulationParams sets the look of a synthetic granulation scene. Zero
// fields take the defaults given; sizes are in arcsec on the sky (at
// 725 km per arcsec, 1 Mm ≈ 1.38 arcsec).
type GranulationParams struct {
	CellSize     float64 // number mean of the cells' equivalent diameters 2√(area/π) (granule plus half its lanes); default 1.8
	SizeSpread   float64 // standard deviation of ln(cell diameter); default 0.35; negative for cells of one size
	LaneWidth    float64 // full width at half maximum of the dark intergranular lane cores; default 0.15
	LaneDepth    float64 // fractional darkening at the lane centre, (0, 1); default 0.4
	Texture      float64 // rms of the small-scale relative modulation of the granules' excess brightness; default 0.3; negative for none
	BrightPoints float64 // bright points per granule, placed in the lanes in small clusters; default 0.15; negative for none
	BrightSize   float64 // bright point FWHM; default 0.15
	BrightPeak   float64 // bright point peak above the local intensity, in units of the mean; default 0.5
	Pores        float64 // pores per 1000 arcsec²; default 0 (quiet Sun)
	PoreSize     float64 // mean pore diameter (FWHM of the darkening); default 2
	Mesoscale    float64 // rms of a slow multiplicative modulation (scales 6–20 arcsec); default 0.01; negative for none
	Contrast     float64 // rms contrast (std/mean) of the returned scene; default 0.12
}

func (p GranulationParams) withDefaults() GranulationParams {
	def := func(v *float64, d float64) {
		if *v == 0 {
			*v = d
		}
	}
	def(&p.CellSize, 1.8)
	def(&p.SizeSpread, 0.35)
	def(&p.LaneWidth, 0.15)
	def(&p.LaneDepth, 0.25)
	def(&p.Texture, 0.2)
	def(&p.BrightPoints, 0.15)
	def(&p.BrightSize, 0.15)
	def(&p.BrightPeak, 0.5)
	def(&p.PoreSize, 2)
	def(&p.Mesoscale, 0.01)
	def(&p.Contrast, 0.12)
	return p
}

// Validate reports whether the parameters (after defaults) make a scene.
func (p GranulationParams) Validate() error {
	q := p.withDefaults()
	for _, c := range []struct {
		n string
		v float64
	}{{"cell size", q.CellSize}, {"lane width", q.LaneWidth}, {"bright point size", q.BrightSize},
		{"contrast", q.Contrast}, {"bright point peak", q.BrightPeak}, {"pore size", q.PoreSize}} {
		if !(c.v > 0) || math.IsInf(c.v, 0) {
			return fmt.Errorf("simulate: granulation %s %g, need a positive finite value", c.n, c.v)
		}
	}
	if !(q.LaneDepth > 0 && q.LaneDepth < 1) {
		return fmt.Errorf("simulate: granulation lane depth %g, want in (0, 1)", q.LaneDepth)
	}
	for _, c := range []struct {
		n        string
		v, lo, h float64
	}{{"size spread", q.SizeSpread, math.Inf(-1), 1}, {"texture", q.Texture, math.Inf(-1), 1},
		{"bright points", q.BrightPoints, math.Inf(-1), 10}, {"pores", q.Pores, 0, 100},
		{"mesoscale", q.Mesoscale, math.Inf(-1), 0.5}} {
		if !(c.v >= c.lo && c.v <= c.h) {
			return fmt.Errorf("simulate: granulation %s %g out of range (at most %g)", c.n, c.v, c.h)
		}
	}
	return nil
}

// Granulation writes into dst (length nx*ny, row-major) a solar-like
// continuum granulation scene sampled at pixelScale arcsec per pixel, with
// mean 1 and rms contrast p.Contrast at that sampling. It panics if
// len(dst) != nx*ny and returns an error for invalid parameters (see
// Validate), a pixel scale that is not positive and finite, or a mean cell
// smaller than 2 pixels. Deterministic given rng.
//
// Construction (our own model):
//   - Cells: diameters drawn log-normal (mean CellSize, ln-spread
//     SizeSpread, clipped to 0.38–1.9 × the mean, i.e. 0.5–2.5 Mm for the
//     default) until they tile the canvas; centres placed largest first by
//     random sequential adsorption (no two closer than 0.9 × the sum of
//     their radii, relaxed when a disc finds no room); the cells are the
//     power (weighted Voronoi) diagram of the centres with weights r², so
//     large discs own large cells. The lookup position is warped by smooth
//     noise (≈ 0.1 cell) so that edges bend.
//   - Granules: from the lane level 1 up to a peak 1 + A that grows with
//     the cell size (small granules are dimmer), times a dome 1 − a·u²
//     (u = 0 at the centre, 1 at the edge), an edge roll-off
//     1 − exp(−d/(0.1·diameter)) (d the distance to the edge), a
//     multiplicative small-scale texture, and a dark centre in some large
//     granules. Every cell meets its neighbours at the same level, so there
//     are no steps at cell edges.
//   - Lanes: 1 − LaneDepth·exp(−4 ln2 (d/LaneWidth)²) with the depth
//     varying smoothly; the cell edges are a soft minimum of the distances
//     to the bisectors, so lanes widen where cells meet. Lanes and bright
//     points narrower than the pixels are widened to ≈ 1.2 px FWHM with the
//     same integrated darkening or light (no aliasing).
//   - Bright points in small clusters on the lane centres, optional pores,
//     and a slow modulation of random plane waves (mesogranulation).
//
// The result is rescaled linearly to the requested contrast and clipped
// below at 5 % of the mean (SetContrast).
func Granulation(dst []float64, nx, ny int, pixelScale float64, p GranulationParams, rng *rand.Rand) error {
	if len(dst) != nx*ny {
		panic(fmt.Sprintf("simulate: scene buffer length %d, want %d×%d", len(dst), nx, ny))
	}
	if err := p.Validate(); err != nil {
		return err
	}
	if !(pixelScale > 0) || math.IsInf(pixelScale, 0) {
		return fmt.Errorf("simulate: pixel scale %g arcsec, need a positive finite value", pixelScale)
	}
	p = p.withDefaults()
	cell := p.CellSize / pixelScale
	if cell < 2 {
		return fmt.Errorf("simulate: granules of %g arcsec span %.2f px at %g arcsec/px; need at least 2", p.CellSize, cell, pixelScale)
	}
	if nx < 1 || ny < 1 {
		return nil
	}
	g := newGranCells(rng, nx, ny, cell, p.SizeSpread)
	lanes := g.render(dst, nx, ny, pixelScale, p, rng)
	if p.BrightPoints > 0 {
		brightPoints(dst, lanes, nx, ny, pixelScale, cell, p, rng)
	}
	if p.Pores > 0 {
		pores(dst, nx, ny, pixelScale, p, rng)
	}
	if p.Mesoscale > 0 {
		mesoscale(dst, nx, ny, pixelScale, p.Mesoscale, rng)
	}
	SetContrast(dst, p.Contrast)
	return nil
}

// granCells is the power diagram of the granule centres, with a bin grid
// for neighbour lookups. Coordinates are pixels.
type granCells struct {
	x, y, w []float64 // centres and power weights (radius², px²)
	d       []float64 // cell diameters, px
	bright  []float64 // peak excess brightness above the lane level
	dome    []float64 // dome curvature a in 1 − a·u²
	dark    []float64 // central darkening of large granules (0 for most)
	ox, oy  float64   // bin grid origin (the canvas corner minus the margin)
	bin     float64   // bin side, px: at least the largest diameter
	bx, by  int       // bins per row and per column
	bins    [][]int32 // cells whose centre lies in each bin
	mean    float64   // mean cell diameter, px
}

// newGranCells draws cell diameters and places the centres over the canvas
// nx×ny plus a margin of the largest diameter.
func newGranCells(rng *rand.Rand, nx, ny int, cell, spread float64) *granCells {
	dmax := 1.9 * cell
	margin := 1.5 * dmax
	w, h := float64(nx)+2*margin, float64(ny)+2*margin
	g := &granCells{ox: -margin, oy: -margin, bin: dmax, mean: cell}
	g.bx, g.by = int(math.Ceil(w/dmax)), int(math.Ceil(h/dmax))
	g.bins = make([][]int32, g.bx*g.by)
	var ds []float64
	for area := 0.0; area < w*h; {
		d := cell
		if spread > 0 {
			d = cell * math.Exp(spread*rng.NormFloat64()-spread*spread/2)
			d = math.Min(dmax, math.Max(0.38*cell, d))
		}
		ds = append(ds, d)
		area += math.Pi / 4 * d * d
	}
	slices.Sort(ds)
	slices.Reverse(ds)
	for _, d := range ds {
		g.place(rng, d, w, h)
	}
	n := len(g.x)
	g.bright, g.dome, g.dark = make([]float64, n), make([]float64, n), make([]float64, n)
	for k := range n {
		s := math.Min(1.3, math.Max(0.6, 0.4+0.6*g.d[k]/cell))
		g.bright[k] = 0.45 * s * math.Max(0.3, 1+0.25*rng.NormFloat64())
		g.dome[k] = 0.8 + 1.2*rng.Float64()
		if g.d[k] > 1.3*cell {
			g.dark[k] = 0.6 * rng.Float64()
		}
	}
	return g
}

// place puts a disc of diameter d at a random free position of the
// w×h region: no other centre closer than κ·(r + r_j), κ = 0.9 relaxed by
// 10 % after every 30 failed tries, so placement always ends.
func (g *granCells) place(rng *rand.Rand, d, w, h float64) {
	r := d / 2
	kappa := 0.9
	for try := 1; ; try++ {
		x, y := g.ox+w*rng.Float64(), g.oy+h*rng.Float64()
		if g.free(x, y, r, kappa) {
			i, j := g.binOf(x, y)
			g.bins[j*g.bx+i] = append(g.bins[j*g.bx+i], int32(len(g.x)))
			g.x, g.y, g.w, g.d = append(g.x, x), append(g.y, y), append(g.w, r*r), append(g.d, d)
			return
		}
		if try%30 == 0 {
			kappa *= 0.9
		}
	}
}

// free reports whether no centre lies closer than κ·(r + r_j) to (x, y).
func (g *granCells) free(x, y, r, kappa float64) bool {
	i0, j0 := g.binOf(x, y)
	for j := max(j0-1, 0); j <= min(j0+1, g.by-1); j++ {
		for i := max(i0-1, 0); i <= min(i0+1, g.bx-1); i++ {
			for _, k := range g.bins[j*g.bx+i] {
				dx, dy := x-g.x[k], y-g.y[k]
				s := kappa * (r + g.d[k]/2)
				if dx*dx+dy*dy < s*s {
					return false
				}
			}
		}
	}
	return true
}

// binOf returns the bin of (x, y), clamped to the grid.
func (g *granCells) binOf(x, y float64) (int, int) {
	i := int((x - g.ox) / g.bin)
	j := int((y - g.oy) / g.bin)
	return min(max(i, 0), g.bx-1), min(max(j, 0), g.by-1)
}

// candidate is a cell near a lookup position and its power there.
type candidate struct {
	k     int32
	power float64
}

// locate returns the cell k of (x, y) in the power diagram (smallest
// power |p − c_k|² − w_k) and the distance from (x, y) to that cell's
// edge: a soft minimum −s·ln Σ exp(−b_j/s), s = 0.03 × the cell's
// diameter, of the distances b_j = (p_j − p_k)/(2|c_j − c_k|) to the power
// bisectors, so granules are rounded and lanes widen where three cells
// meet; clamped at 0. buf is scratch space, returned for reuse.
func (g *granCells) locate(x, y float64, buf []candidate) (int, float64, []candidate) {
	i0, j0 := g.binOf(x, y)
	buf = buf[:0]
	best, bp := -1, math.Inf(1)
	for j := max(j0-1, 0); j <= min(j0+1, g.by-1); j++ {
		for i := max(i0-1, 0); i <= min(i0+1, g.bx-1); i++ {
			for _, k := range g.bins[j*g.bx+i] {
				dx, dy := x-g.x[k], y-g.y[k]
				pw := dx*dx + dy*dy - g.w[k]
				buf = append(buf, candidate{k, pw})
				if pw < bp {
					best, bp = int(k), pw
				}
			}
		}
	}
	// The nearest bisector: b_j = gap_j/(2|e_j|) compared without square
	// roots (gap ≥ 0): b_i < b_j ⇔ gap_i²·|e_j|² < gap_j²·|e_i|².
	bg, be, bi := math.Inf(1), 1.0, -1
	for i, c := range buf {
		if int(c.k) == best {
			continue
		}
		ex, ey := g.x[c.k]-g.x[best], g.y[c.k]-g.y[best]
		e2 := ex*ex + ey*ey
		gap := c.power - bp
		buf[i].power = gap
		if gap*gap*be < bg*bg*e2 {
			bg, be, bi = gap, e2, i
		}
	}
	if math.IsInf(bg, 1) {
		return best, g.d[best], buf // a lone cell
	}
	soft := 0.03 * g.d[best]
	bmin := bg / (2 * math.Sqrt(be))
	reach := bmin + 10*soft // farther bisectors add < e^−10
	sum := 1.0              // the nearest bisector's term
	for i, c := range buf {
		if int(c.k) == best || i == bi {
			continue
		}
		ex, ey := g.x[c.k]-g.x[best], g.y[c.k]-g.y[best]
		e2 := ex*ex + ey*ey
		if c.power*c.power < 4*e2*reach*reach {
			sum += math.Exp(-(c.power/(2*math.Sqrt(e2)) - bmin) / soft)
		}
	}
	return best, math.Max(0, bmin-soft*math.Log(sum)), buf
}
