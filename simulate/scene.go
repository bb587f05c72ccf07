package simulate

import (
	"bytes"
	"fmt"
	"math"
	"math/rand/v2"
	"os"

	"github.com/astrogo/fitsio"

	"pdwave/model/burst"
)

// GranulationParams sets the look of a synthetic granulation scene. Zero
// fields take the defaults given; sizes are in arcsec on the sky.
type GranulationParams struct {
	CellSize     float64 // mean spacing of granule centres; default 1.3
	LaneWidth    float64 // full width at half maximum of the dark intergranular lanes; default 0.25
	LaneDepth    float64 // fractional darkening at the lane centre, (0, 1); default 0.45
	BrightPoints float64 // bright points per granule; default 0.15; negative for none
	BrightSize   float64 // bright point FWHM; default 0.15
	BrightPeak   float64 // bright point peak above the local intensity, in units of the mean; default 0.6
	Mesoscale    float64 // rms of a slow multiplicative modulation (scales 6–20 arcsec); default 0.03; negative for none
	Contrast     float64 // rms contrast (std/mean) of the returned scene; default 0.12
}

func (p GranulationParams) withDefaults() GranulationParams {
	def := func(v *float64, d float64) {
		if *v == 0 {
			*v = d
		}
	}
	def(&p.CellSize, 1.3)
	def(&p.LaneWidth, 0.25)
	def(&p.LaneDepth, 0.45)
	def(&p.BrightPoints, 0.15)
	def(&p.BrightSize, 0.15)
	def(&p.BrightPeak, 0.6)
	def(&p.Mesoscale, 0.03)
	def(&p.Contrast, 0.12)
	return p
}

// Validate reports whether the parameters (after defaults) make a scene.
func (p GranulationParams) Validate() error {
	q := p.withDefaults()
	pos := func(name string, v float64) error {
		if !(v > 0) || math.IsInf(v, 0) {
			return fmt.Errorf("simulate: granulation %s %g, need a positive finite value", name, v)
		}
		return nil
	}
	for _, c := range []struct {
		n string
		v float64
	}{{"cell size", q.CellSize}, {"lane width", q.LaneWidth}, {"bright point size", q.BrightSize}, {"contrast", q.Contrast}, {"bright point peak", q.BrightPeak}} {
		if err := pos(c.n, c.v); err != nil {
			return err
		}
	}
	if !(q.LaneDepth > 0 && q.LaneDepth < 1) {
		return fmt.Errorf("simulate: granulation lane depth %g, want in (0, 1)", q.LaneDepth)
	}
	if math.IsNaN(q.BrightPoints) || math.IsInf(q.BrightPoints, 0) || math.IsNaN(q.Mesoscale) || math.IsInf(q.Mesoscale, 0) || q.Mesoscale > 0.5 {
		return fmt.Errorf("simulate: granulation bright points %g or mesoscale %g out of range", q.BrightPoints, q.Mesoscale)
	}
	return nil
}

// Granulation writes into dst (length nx*ny, row-major) a solar-like
// granulation scene sampled at pixelScale arcsec per pixel, with mean 1 and
// rms contrast p.Contrast at that sampling. It panics if len(dst) != nx*ny
// and returns an error for invalid parameters (see Validate) or a cell
// smaller than 2 pixels.
//
// Construction (our own model, tuned by eye to continuum granulation):
// granule centres on a jittered grid of spacing CellSize (a Worley/Voronoi
// pattern); each granule a smooth dome 1 − 0.35u² (u = 0 at its centre,
// 1 at its boundary) times a random brightness 1 + 0.1·N(0,1); dark lanes
// along the cell boundaries, 1 − LaneDepth·exp(−4 ln2 (2d/LaneWidth)²) with d
// the distance to the boundary; Gaussian bright points placed on the lanes;
// a slow multiplicative modulation of random plane waves (mesogranular
// scales). The result is rescaled linearly to the requested contrast and
// clipped below at 5 % of the mean.
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
	// Jittered grid of centres with a margin of two cells on each side.
	const pad = 2
	gx := int(math.Ceil(float64(nx)/cell)) + 2*pad
	gy := int(math.Ceil(float64(ny)/cell)) + 2*pad
	cx := make([]float64, gx*gy)
	cy := make([]float64, gx*gy)
	bright := make([]float64, gx*gy)
	for j := 0; j < gy; j++ {
		for i := 0; i < gx; i++ {
			k := j*gx + i
			cx[k] = (float64(i-pad) + 0.1 + 0.8*rng.Float64()) * cell
			cy[k] = (float64(j-pad) + 0.1 + 0.8*rng.Float64()) * cell
			bright[k] = math.Max(0.6, 1+0.1*rng.NormFloat64())
		}
	}
	// nearest2 returns the two nearest centres of the point (x, y).
	nearest2 := func(x, y float64) (k1, k2 int, d1, d2 float64) {
		i0 := int(math.Floor(x/cell)) + pad
		j0 := int(math.Floor(y/cell)) + pad
		d1, d2 = math.Inf(1), math.Inf(1)
		k1, k2 = -1, -1
		for j := max(j0-2, 0); j <= min(j0+2, gy-1); j++ {
			for i := max(i0-2, 0); i <= min(i0+2, gx-1); i++ {
				k := j*gx + i
				dx, dy := x-cx[k], y-cy[k]
				d := dx*dx + dy*dy
				switch {
				case d < d1:
					d2, k2 = d1, k1
					d1, k1 = d, k
				case d < d2:
					d2, k2 = d, k
				}
			}
		}
		return k1, k2, d1, d2
	}
	// boundary returns the distance from (x, y), nearest to centre k1 at
	// squared distance d1, to the edge of k1's Voronoi cell: a soft minimum
	// −s·ln Σ exp(−b_k/s), s = 0.08 cell, of the distances to the bisectors,
	// b_k = (d_k − d1)/(2|c_k − c_k1|), so granules are rounded (no creases
	// towards the vertices) and lanes widen at the vertices; clamped at 0.
	soft := 0.08 * cell
	boundary := func(x, y float64, k1 int, d1 float64) float64 {
		i0 := int(math.Floor(x/cell)) + pad
		j0 := int(math.Floor(y/cell)) + pad
		var sum float64
		for j := max(j0-2, 0); j <= min(j0+2, gy-1); j++ {
			for i := max(i0-2, 0); i <= min(i0+2, gx-1); i++ {
				k := j*gx + i
				if k == k1 {
					continue
				}
				dx, dy := x-cx[k], y-cy[k]
				b := (dx*dx + dy*dy - d1) / (2 * math.Hypot(cx[k]-cx[k1], cy[k]-cy[k1]))
				if b < 10*soft { // farther edges add < e^−10 of the nearest
					sum += math.Exp(-b / soft)
				}
			}
		}
		return math.Max(0, -soft*math.Log(sum))
	}
	// Domain warp: the lookup position wanders by ≈ 0.08 cell (wavelengths 1–2 cells, gentle enough not to fold) so that cell
	// boundaries bend instead of being straight polygon edges.
	const warps = 6
	var wkx, wky, wph [warps]float64
	warpAmp := 0.08 * cell * math.Sqrt(2.0/warps)
	for i := range wkx {
		lambda := cell * (1 + rng.Float64())
		s, c := math.Sincos(2 * math.Pi * rng.Float64())
		wkx[i], wky[i] = 2*math.Pi*c/lambda, 2*math.Pi*s/lambda
		wph[i] = 2 * math.Pi * rng.Float64()
	}
	warp := func(x, y float64) (float64, float64) {
		var dx, dy float64
		for i := 0; i < warps; i += 2 {
			dx += math.Sin(wkx[i]*x + wky[i]*y + wph[i])
			dy += math.Sin(wkx[i+1]*x + wky[i+1]*y + wph[i+1])
		}
		return x + warpAmp*dx, y + warpAmp*dy
	}
	hw := p.LaneWidth / pixelScale / 2 // half width at half maximum, px
	for y := 0; y < ny; y++ {
		for x := 0; x < nx; x++ {
			px, py := warp(float64(x), float64(y))
			k1, _, d1, _ := nearest2(px, py)
			db := boundary(px, py, k1, d1)
			r1 := math.Sqrt(d1)
			u := r1 / (r1 + db) // 0 at the centre, 1 on the boundary
			// Lane: exponential flanks with half maximum at db = hw.
			lane := math.Exp(-math.Ln2 * db / hw)
			dst[y*nx+x] = bright[k1] * (1 - 0.35*u*u) * (1 - p.LaneDepth*lane)
		}
	}
	// Bright points: random points moved onto the nearest lane.
	if p.BrightPoints > 0 {
		area := float64((nx + 2*int(cell)) * (ny + 2*int(cell)))
		nbp := int(p.BrightPoints*area/(cell*cell) + 0.5)
		bs := p.BrightSize / pixelScale / (2 * math.Sqrt(2*math.Ln2)) // σ, px
		rad := int(math.Ceil(3 * bs))
		for b := 0; b < nbp; b++ {
			x := (rng.Float64()*(float64(nx)+2*cell) - cell)
			y := (rng.Float64()*(float64(ny)+2*cell) - cell)
			amp := p.BrightPeak * (0.5 + rng.Float64())
			k1, k2, _, _ := nearest2(warp(x, y))
			// Project onto the bisector plane of centres k1 and k2.
			mx, my := (cx[k1]+cx[k2])/2, (cy[k1]+cy[k2])/2
			ex, ey := cx[k2]-cx[k1], cy[k2]-cy[k1]
			en := math.Hypot(ex, ey)
			ex, ey = ex/en, ey/en
			t := (x-mx)*ex + (y-my)*ey
			x -= t * ex
			y -= t * ey
			for yy := max(int(y)-rad, 0); yy <= min(int(y)+rad+1, ny-1); yy++ {
				for xx := max(int(x)-rad, 0); xx <= min(int(x)+rad+1, nx-1); xx++ {
					dx, dy := float64(xx)-x, float64(yy)-y
					dst[yy*nx+xx] += amp * math.Exp(-(dx*dx+dy*dy)/(2*bs*bs))
				}
			}
		}
	}
	// Mesoscale modulation: 12 plane waves of wavelengths 6–20 arcsec.
	if p.Mesoscale > 0 {
		const waves = 12
		a := p.Mesoscale * math.Sqrt(2.0/waves)
		// cos(kx·x + ky·y + φ) = Re(e^{i kx x}·e^{i(ky y + φ)}): phasors
		// per column and per row.
		ex := make([]complex128, waves*nx)
		ey := make([]complex128, waves*ny)
		for i := 0; i < waves; i++ {
			lambda := (6 + 14*rng.Float64()) / pixelScale
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
	SetContrast(dst, p.Contrast)
	return nil
}

// Contrast returns the rms contrast std/mean of im (0 for a constant or
// empty image).
func Contrast(im []float64) float64 {
	if len(im) == 0 {
		return 0
	}
	var s, s2 float64
	for _, v := range im {
		s += v
	}
	m := s / float64(len(im))
	for _, v := range im {
		s2 += (v - m) * (v - m)
	}
	if m == 0 {
		return 0
	}
	return math.Sqrt(s2/float64(len(im))) / math.Abs(m)
}

// SetContrast rescales im in place to mean 1 and rms contrast c by the
// linear map v → 1 + (v/mean − 1)·c/Contrast(im), then clips values below
// 0.05 (so the final contrast can be slightly lower for very high c). A
// constant image becomes all ones.
func SetContrast(im []float64, c float64) {
	if len(im) == 0 {
		return
	}
	var s float64
	for _, v := range im {
		s += v
	}
	m := s / float64(len(im))
	c0 := Contrast(im)
	k := 0.0
	if c0 > 0 {
		k = c / c0
	}
	for i, v := range im {
		im[i] = math.Max(0.05, 1+(v/m-1)*k)
	}
}

// ReadObject reads a user object map from the first image HDU of a FITS
// file that has at least two axes (a 3-D or 4-D cube contributes its first
// plane). BITPIX 8, 16, 32, 64, −32 and −64 are accepted, with BZERO and
// BSCALE applied. It returns the map (row-major, NAXIS1 = nx fastest) and
// errors with the path for unreadable files, missing images, non-finite
// values, or a map that is not positive on average.
func ReadObject(path string) (data []float64, nx, ny int, err error) {
	raw, err := os.ReadFile(path)
	if err != nil {
		return nil, 0, 0, fmt.Errorf("reading object map: %w", err)
	}
	defer func() {
		if r := recover(); r != nil { // fitsio panics on some malformed input
			data, nx, ny, err = nil, 0, 0, fmt.Errorf("reading object map %s: malformed FITS (%v)", path, r)
		}
	}()
	f, err := fitsio.Open(bytes.NewReader(raw))
	if err != nil {
		return nil, 0, 0, fmt.Errorf("reading object map %s: %w", path, err)
	}
	defer f.Close()
	for _, h := range f.HDUs() {
		img, ok := h.(fitsio.Image)
		if !ok {
			continue
		}
		axes := img.Header().Axes()
		if len(axes) < 2 || axes[0] < 1 || axes[1] < 1 {
			continue
		}
		nx, ny = axes[0], axes[1]
		data, err = imagePlane(img, nx*ny)
		if err != nil {
			return nil, 0, 0, fmt.Errorf("reading object map %s: %w", path, err)
		}
		var s float64
		for i, v := range data {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, 0, 0, fmt.Errorf("reading object map %s: pixel (%d, %d) is %g", path, i%nx, i/nx, v)
			}
			s += v
		}
		if !(s > 0) {
			return nil, 0, 0, fmt.Errorf("reading object map %s: mean %g is not positive", path, s/float64(len(data)))
		}
		return data, nx, ny, nil
	}
	return nil, 0, 0, fmt.Errorf("reading object map %s: no image with two or more axes", path)
}

// imagePlane returns the first n values of img as float64, with BZERO and
// BSCALE applied.
func imagePlane(img fitsio.Image, n int) ([]float64, error) {
	v, err := burst.ImagePixels(img)
	if err != nil {
		return nil, err
	}
	return v[:n], nil
}
