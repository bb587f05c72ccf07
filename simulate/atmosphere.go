package simulate

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"sync"
)

// Layer is one turbulent layer of the atmosphere, frozen in shape and
// carried by the wind (Taylor's frozen-flow hypothesis).
type Layer struct {
	Height    float64 // m above the telescope, along the line of sight
	Weight    float64 // share of the integrated r0^(−5/3) (normalised over the layers), > 0
	Speed     float64 // wind speed, m/s, ≥ 0
	Direction float64 // direction the layer moves towards, rad from +x towards +y
}

// Turbulence describes the whole atmosphere at the observing wavelength.
type Turbulence struct {
	R0     float64 // Fried parameter of all layers together, m, at the wavelength in use
	L0     float64 // outer scale, m; ≤ 0 or +Inf means Kolmogorov
	Layers []Layer // empty means one ground layer at rest
}

// Validate reports whether the turbulence is usable.
func (t Turbulence) Validate() error {
	if !(t.R0 > 0) || math.IsInf(t.R0, 0) {
		return fmt.Errorf("simulate: Fried parameter r0 = %g m, need a positive finite value", t.R0)
	}
	if math.IsNaN(t.L0) {
		return errors.New("simulate: outer scale L0 is NaN")
	}
	for i, l := range t.Layers {
		switch {
		case !(l.Weight > 0) || math.IsInf(l.Weight, 0):
			return fmt.Errorf("simulate: layer %d: weight %g, need a positive finite value", i+1, l.Weight)
		case !(l.Height >= 0) || math.IsInf(l.Height, 0):
			return fmt.Errorf("simulate: layer %d: height %g m, need a finite value ≥ 0", i+1, l.Height)
		case !(l.Speed >= 0) || math.IsInf(l.Speed, 0):
			return fmt.Errorf("simulate: layer %d: wind speed %g m/s, need a finite value ≥ 0", i+1, l.Speed)
		case math.IsNaN(l.Direction) || math.IsInf(l.Direction, 0):
			return fmt.Errorf("simulate: layer %d: wind direction %g is not finite", i+1, l.Direction)
		}
	}
	return nil
}

// layers returns the layers with weights normalised to sum to one.
func (t Turbulence) layers() []Layer {
	if len(t.Layers) == 0 {
		return []Layer{{Weight: 1}}
	}
	var s float64
	for _, l := range t.Layers {
		s += l.Weight
	}
	out := make([]Layer, len(t.Layers))
	for i, l := range t.Layers {
		l.Weight /= s
		out[i] = l
	}
	return out
}

// LayerR0 returns the Fried parameter of a layer carrying the share w of
// r0^(−5/3): r0_i = r0·w^(−3/5), since r0^(−5/3) = Σ_i r0_i^(−5/3)
// (Fried parameters of independent layers add as r0^(−5/3); Roddier 1981,
// Progress in Optics 19, 281; equation number not checked).
func LayerR0(r0, w float64) float64 { return r0 * math.Pow(w, -3.0/5) }

// Extent is the span an Atmosphere must cover besides one pupil grid.
type Extent struct {
	Duration       float64 // s from the first to the last frame
	FieldX, FieldY float64 // full field of view along x and y, rad (0 for one patch)
}

// Atmosphere holds one phase screen per layer, sized to cover the pupil
// grid over the Extent it was made for, and gives the wavefront on the
// pupil grid at any time and field angle.
//
// Geometry: pupil-grid pixel (x, y) at time t and field angle (ϑx, ϑy)
// sees layer i at the screen position
//
//	origin_i + (x, y) + (h_i·ϑ − v_i·t)/Dx      (screen pixels)
//
// so the layer pattern moves with the wind velocity v_i (frozen flow) and
// a direction ϑ off axis sees the layer shifted by h_i·ϑ (anisoplanatism).
// Screen values between pixels are bilinearly interpolated. The screens
// are read-only after NewAtmosphere: Phase is safe for concurrent use.
type Atmosphere struct {
	N       int       // pupil grid side, px
	Dx      float64   // pupil grid pixel size, m
	Layers  []Layer   // normalised weights
	Screens []*Screen // one phase screen per layer, rad at the observing wavelength
	origin  [][2]float64
}

// MaxScreen is the largest screen side NewAtmosphere makes, pixels.
const MaxScreen = 8192

// NewAtmosphere draws the screens of turb for an n×n pupil grid of pixel
// size dx metres covering ext: each layer's screen is a power of two at
// least twice the span it must cover (pupil grid plus wind travel over
// ext.Duration plus h·field), so the used part keeps the right statistics
// (see TestStructureFunction), and it is placed at a random position so
// the covered span does not wrap. Subharmonic levels follow LevelsFor
// when subharmonics is true. Screens are drawn from rng in layer order.
// It returns an error for invalid input or a screen larger than MaxScreen.
func NewAtmosphere(rng *rand.Rand, turb Turbulence, n int, dx float64, ext Extent, subharmonics bool) (*Atmosphere, error) {
	return newAtmosphere(rng, turb, n, dx, ext, subharmonics, nil)
}

// genPool keeps screen generators for reuse across atmospheres (building
// one costs more than drawing a screen). It is safe for concurrent use; a
// generator is used by one goroutine at a time.
type genPool struct {
	mu   sync.Mutex
	free map[ScreenParams][]*ScreenGenerator
}

func (p *genPool) get(sp ScreenParams) (*ScreenGenerator, error) {
	if p != nil {
		p.mu.Lock()
		l := p.free[sp]
		if len(l) > 0 {
			g := l[len(l)-1]
			p.free[sp] = l[:len(l)-1]
			p.mu.Unlock()
			return g, nil
		}
		p.mu.Unlock()
	}
	return NewScreenGenerator(sp)
}

func (p *genPool) put(g *ScreenGenerator) {
	if p == nil {
		return
	}
	p.mu.Lock()
	if p.free == nil {
		p.free = map[ScreenParams][]*ScreenGenerator{}
	}
	// Keep a handful per size; screens of many r0 would otherwise pile up.
	if len(p.free) > 64 {
		clear(p.free)
	}
	p.free[g.p] = append(p.free[g.p], g)
	p.mu.Unlock()
}

func newAtmosphere(rng *rand.Rand, turb Turbulence, n int, dx float64, ext Extent, subharmonics bool, pool *genPool) (*Atmosphere, error) {
	if err := turb.Validate(); err != nil {
		return nil, err
	}
	if n < 2 || !(dx > 0) || math.IsInf(dx, 0) {
		return nil, fmt.Errorf("simulate: pupil grid %d px of %g m, need ≥ 2 px and a positive size", n, dx)
	}
	if !(ext.Duration >= 0) || !(ext.FieldX >= 0) || !(ext.FieldY >= 0) ||
		math.IsInf(ext.Duration+ext.FieldX+ext.FieldY, 0) {
		return nil, fmt.Errorf("simulate: extent %+v needs finite non-negative values", ext)
	}
	a := &Atmosphere{N: n, Dx: dx, Layers: turb.layers()}
	spare := map[ScreenParams][]float64{}
	for i, l := range a.Layers {
		sn, cs := math.Sincos(l.Direction)
		vx, vy := l.Speed*cs, l.Speed*sn
		// Span of the shifts (h·ϑ − v·t)/dx over the extent, pixels.
		x0 := math.Min(0, -vx*ext.Duration) - l.Height*ext.FieldX/2
		x1 := math.Max(0, -vx*ext.Duration) + l.Height*ext.FieldX/2
		y0 := math.Min(0, -vy*ext.Duration) - l.Height*ext.FieldY/2
		y1 := math.Max(0, -vy*ext.Duration) + l.Height*ext.FieldY/2
		wx := (x1-x0)/dx + float64(n) + 2
		wy := (y1-y0)/dx + float64(n) + 2
		side := 64
		for float64(side) < 2*math.Max(wx, wy) {
			side *= 2
		}
		if side > MaxScreen {
			return nil, fmt.Errorf("simulate: layer %d at %g m needs a %d-pixel screen (> %d): shorten the burst or the field", i+1, l.Height, side, MaxScreen)
		}
		// Screens are drawn for r0 = 1 m and scaled by r0_i^(−5/6) (the
		// phase scales as r0^(−5/6), since Φ ∝ r0^(−5/3)), so generators
		// are shared between layers and bursts of any r0, and the second
		// screen of each pair serves the next layer of the same size.
		p := ScreenParams{N: side, Dx: dx, R0: 1, L0: turb.L0, Subharmonics: subharmonics}
		if subharmonics {
			p.Levels = LevelsFor(side, dx, turb.L0)
		}
		s := &Screen{N: side, Dx: dx}
		if sp := spare[p]; sp != nil {
			s.Data = sp
			delete(spare, p)
		} else {
			g, err := pool.get(p)
			if err != nil {
				return nil, fmt.Errorf("layer %d: %w", i+1, err)
			}
			s.Data = make([]float64, side*side)
			other := make([]float64, side*side)
			g.GeneratePair(s.Data, other, rng)
			pool.put(g)
			spare[p] = other
		}
		k := math.Pow(LayerR0(turb.R0, l.Weight), -5.0/6)
		for j := range s.Data {
			s.Data[j] *= k
		}
		a.Screens = append(a.Screens, s)
		// Place the covered box [x0/dx, x1/dx + n + 1] inside the screen.
		ox := -x0/dx + rng.Float64()*(float64(side)-wx)
		oy := -y0/dx + rng.Float64()*(float64(side)-wy)
		a.origin = append(a.origin, [2]float64{ox, oy})
	}
	return a, nil
}

// Phase writes into dst (length N*N, overwritten) the wavefront in radians
// on the pupil grid at time t (s) for field angle (ax, ay) (rad): the sum
// of the layer screens at their shifted positions. It panics if len(dst)
// != N*N. It allocates nothing.
func (a *Atmosphere) Phase(dst []float64, t, ax, ay float64) {
	if len(dst) != a.N*a.N {
		panic(fmt.Sprintf("simulate: phase buffer length %d, want %d", len(dst), a.N*a.N))
	}
	clear(dst)
	for i, l := range a.Layers {
		sn, cs := math.Sincos(l.Direction)
		sx := (l.Height*ax - l.Speed*cs*t) / a.Dx
		sy := (l.Height*ay - l.Speed*sn*t) / a.Dx
		a.Screens[i].AddWindow(dst, a.N, a.origin[i][0]+sx, a.origin[i][1]+sy)
	}
}
