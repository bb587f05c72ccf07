package simulate

import (
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/stat"
)

// valueNoise is smooth random noise: independent N(0, 1) values on a
// square lattice of spacing step px, interpolated by cubic B-splines and
// scaled to unit rms (the mean squared B-spline weight sum is 151/315 per
// axis).
type valueNoise struct {
	step   float64
	off    float64 // lattice index of position 0
	lx, ly int
	v      []float64
}

// newValueNoise covers [−margin, n+margin] in each axis.
func newValueNoise(rng *rand.Rand, nx, ny int, step, margin float64) *valueNoise {
	off := math.Ceil(margin/step) + 2
	lx := int(math.Ceil((float64(nx)+2*margin)/step)) + 6
	ly := int(math.Ceil((float64(ny)+2*margin)/step)) + 6
	n := &valueNoise{step: step, off: off, lx: lx, ly: ly, v: make([]float64, lx*ly)}
	const scale = 315.0 / 151
	for i := range n.v {
		n.v[i] = scale * rng.NormFloat64()
	}
	return n
}

// bspline sets w to the cubic B-spline weights of the four lattice points
// around fractional position t ∈ [0, 1).
func bspline(w *[4]float64, t float64) {
	s := 1 - t
	w[0] = s * s * s / 6
	w[1] = (3*t*t*t - 6*t*t + 4) / 6
	w[2] = (-3*t*t*t + 3*t*t + 3*t + 1) / 6
	w[3] = t * t * t / 6
}

// at returns the noise at (x, y) px.
func (n *valueNoise) at(x, y float64) float64 {
	fx, fy := x/n.step+n.off, y/n.step+n.off
	ix, iy := math.Floor(fx), math.Floor(fy)
	var wx, wy [4]float64
	bspline(&wx, fx-ix)
	bspline(&wy, fy-iy)
	i0 := min(max(int(ix)-1, 0), n.lx-4)
	j0 := min(max(int(iy)-1, 0), n.ly-4)
	var s float64
	for j := 0; j < 4; j++ {
		row := n.v[(j0+j)*n.lx+i0 : (j0+j)*n.lx+i0+4]
		s += wy[j] * (wx[0]*row[0] + wx[1]*row[1] + wx[2]*row[2] + wx[3]*row[3])
	}
	return s
}

// render writes the granules and lanes (before bright points, pores and
// the mesoscale modulation) and returns the mask of lane-centre pixels.
// Each cell's excess brightness is then rescaled so that the cell's mean
// intensity moves to within balance × its deviation from the mean over
// all cells: granules and their lanes carry nearly the same mean flux, so
// there is little power at scales of several cells.
func (g *granCells) render(dst []float64, nx, ny int, ps float64, p GranulationParams, rng *rand.Rand) []bool {
	const balance = 0.6
	label := make([]int32, nx*ny)
	mul := make([]float32, nx*ny) // lane factor 1 − depth·profile
	lanes := g.shade(dst, label, mul, nx, ny, ps, p, rng)
	// Cell means A_k + s·B_k with A = mean(mul), B = mean(ex·mul).
	n := len(g.x)
	A, B, cnt := make([]float64, n), make([]float64, n), make([]float64, n)
	for i, k := range label {
		A[k] += float64(mul[i])
		B[k] += dst[i] * float64(mul[i])
		cnt[k]++
	}
	var tot, num float64
	for k := range A {
		tot += A[k] + B[k]
		num += cnt[k]
	}
	m0 := tot / num
	s := make([]float64, n)
	for k := range s {
		if cnt[k] == 0 || B[k] <= 0 {
			s[k] = 1
			continue
		}
		mk := (A[k] + B[k]) / cnt[k]
		target := m0 + balance*(mk-m0)
		s[k] = math.Min(3, math.Max(0.3, (target*cnt[k]-A[k])/B[k]))
	}
	for i, k := range label {
		dst[i] = (1 + s[k]*dst[i]) * float64(mul[i])
	}
	return lanes
}

// shade writes each pixel's excess granule brightness into dst, its cell
// into label and its lane factor into mul, and returns the mask of
// lane-centre pixels.
func (g *granCells) shade(dst []float64, label []int32, mul []float32, nx, ny int, ps float64, p GranulationParams, rng *rand.Rand) []bool {
	cell := g.mean
	warpX := newValueNoise(rng, nx, ny, 0.8*cell, cell)
	warpY := newValueNoise(rng, nx, ny, 0.8*cell, cell)
	tex := newValueNoise(rng, nx, ny, 0.3*cell, 0)
	depth := newValueNoise(rng, nx, ny, 0.6*cell, 0)
	amp := 0.15 * cell
	wpx := p.LaneWidth / ps
	weff := math.Hypot(wpx, 1.2) // FWHM widened against aliasing, px
	hw := weff / 2
	dep0 := p.LaneDepth * wpx / weff // same integrated darkening
	texAmp := max(p.Texture, 0)
	lanes := make([]bool, nx*ny)
	buf := make([]candidate, 0, 64)
	for y := 0; y < ny; y++ {
		fy := float64(y)
		for x := 0; x < nx; x++ {
			fx := float64(x)
			px, py := fx+amp*warpX.at(fx, fy), fy+amp*warpY.at(fx, fy)
			var k int
			var db float64
			k, db, buf = g.locate(px, py, buf)
			d := g.d[k]
			dx, dy := px-g.x[k], py-g.y[k]
			r2 := dx*dx + dy*dy
			r1 := math.Sqrt(r2)
			u := 0.0
			if r1+db > 0 {
				u = r1 / (r1 + db)
			}
			ex := g.bright[k] * math.Pow(1-u*u, g.dome[k])
			if r := db / (0.12 * d); r < 20 {
				ex *= 1 - math.Exp(-r)
			}
			if texAmp > 0 {
				ex *= math.Max(0, 1+texAmp*tex.at(fx, fy))
			}
			if g.dark[k] > 0 {
				s := 0.22 * d
				ex *= 1 - g.dark[k]*math.Exp(-r2/(s*s))
			}
			dep := math.Min(0.95, math.Max(0, dep0*(1+0.25*depth.at(fx, fy))))
			q := db / hw
			i := y*nx + x
			dst[i], label[i] = ex, int32(k)
			mul[i] = 1
			if q < 6 {
				mul[i] = float32(1 - dep*math.Exp(-math.Ln2*q*q))
			}
			lanes[i] = db < 0.5*hw+0.5
		}
	}
	return lanes
}

// brightPoints adds Gaussian bright points on lane-centre pixels, in
// clusters of 1–4 within 0.6 cell of a random lane pixel.
func brightPoints(dst []float64, lanes []bool, nx, ny int, ps, cell float64, p GranulationParams, rng *rand.Rand) {
	ncell := float64(nx*ny) / (math.Pi / 4 * cell * cell)
	total := int(p.BrightPoints*ncell + rng.Float64())
	sig := p.BrightSize / ps / (2 * math.Sqrt(2*math.Ln2))
	seff := math.Hypot(sig, 0.5) // widened against aliasing, same flux
	peak := p.BrightPeak * stat.Mean(dst, nil) * sig * sig / (seff * seff)
	rad := int(math.Ceil(3 * seff))
	lane := func(cx, cy, r float64) (float64, float64, bool) {
		for try := 0; try < 40; try++ {
			x, y := cx-r+2*r*rng.Float64(), cy-r+2*r*rng.Float64()
			ix, iy := int(math.Floor(x)), int(math.Floor(y))
			if ix >= 0 && iy >= 0 && ix < nx && iy < ny && lanes[iy*nx+ix] {
				return x, y, true
			}
		}
		return 0, 0, false
	}
	for placed := 0; placed < total; {
		sx, sy, ok := lane(float64(nx)/2, float64(ny)/2, float64(max(nx, ny)))
		if !ok {
			return
		}
		for b, size := 0, 1+rng.IntN(4); b < size && placed < total; b++ {
			x, y, ok := lane(sx, sy, 0.6*cell)
			if !ok {
				break
			}
			addGauss(dst, nx, ny, x, y, seff, peak*(0.5+rng.Float64()), rad)
			placed++
		}
	}
}

// addGauss adds amp·exp(−r²/2σ²) around (x, y) within rad pixels.
func addGauss(dst []float64, nx, ny int, x, y, sigma, amp float64, rad int) {
	for yy := max(int(y)-rad, 0); yy <= min(int(y)+rad+1, ny-1); yy++ {
		for xx := max(int(x)-rad, 0); xx <= min(int(x)+rad+1, nx-1); xx++ {
			dx, dy := float64(xx)-x, float64(yy)-y
			dst[yy*nx+xx] += amp * math.Exp(-(dx*dx+dy*dy)/(2*sigma*sigma))
		}
	}
}

// pores darkens round patches: a factor 1 − 0.7·exp(−ln2 (r/R)⁴) with R
// the half width at half darkening (0.7–1.3 × PoreSize/2), centres
// uniform, expected count Pores per 1000 arcsec².
func pores(dst []float64, nx, ny int, ps float64, p GranulationParams, rng *rand.Rand) {
	n := int(p.Pores*float64(nx*ny)*ps*ps/1000 + rng.Float64())
	for i := 0; i < n; i++ {
		cx, cy := float64(nx)*rng.Float64(), float64(ny)*rng.Float64()
		R := p.PoreSize / ps / 2 * (0.7 + 0.6*rng.Float64())
		rad := int(math.Ceil(2 * R))
		for y := max(int(cy)-rad, 0); y <= min(int(cy)+rad, ny-1); y++ {
			for x := max(int(cx)-rad, 0); x <= min(int(cx)+rad, nx-1); x++ {
				q := math.Hypot(float64(x)-cx, float64(y)-cy) / R
				dst[y*nx+x] *= 1 - 0.7*math.Exp(-math.Ln2*q*q*q*q)
			}
		}
	}
}

// mesoscale multiplies dst by 1 + a·Σ cos(k·x + φ) over 12 plane waves of
// wavelengths 6–20 arcsec and random directions, scaled so the modulation
// has rms amp.
func mesoscale(dst []float64, nx, ny int, ps, amp float64, rng *rand.Rand) {
	const waves = 12
	a := amp * math.Sqrt(2.0/waves)
	// cos(kx·x + ky·y + φ) = Re(e^{i kx x}·e^{i(ky y + φ)}): phasors per
	// column and per row.
	ex := make([]complex128, waves*nx)
	ey := make([]complex128, waves*ny)
	for i := 0; i < waves; i++ {
		lambda := (6 + 14*rng.Float64()) / ps
		s, c := math.Sincos(2 * math.Pi * rng.Float64())
		kx, ky := 2*math.Pi*c/lambda, 2*math.Pi*s/lambda
		ph := 2 * math.Pi * rng.Float64()
		for x := 0; x < nx; x++ {
			s, c := math.Sincos(kx * float64(x))
			ex[x*waves+i] = complex(c, s)
		}
		for y := 0; y < ny; y++ {
			s, c := math.Sincos(ky*float64(y) + ph)
			ey[y*waves+i] = complex(c, s)
		}
	}
	for y := 0; y < ny; y++ {
		ry := ey[y*waves : y*waves+waves]
		for x := 0; x < nx; x++ {
			rx := ex[x*waves : x*waves+waves]
			var m float64
			for i, e := range ry {
				m += real(rx[i])*real(e) - imag(rx[i])*imag(e)
			}
			dst[y*nx+x] *= 1 + a*m
		}
	}
}
