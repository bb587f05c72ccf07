package simulate

import (
	"fmt"
	"math"
	"math/rand/v2"

	"pdwave/model/burst"
)

// MaxField is the largest field side Field accepts, pixels.
const MaxField = 4096

// Field simulates a full-field burst of nx×ny pixels and Config.Frames
// frames whose PSF varies smoothly over the field (anisoplanatism), with
// Object (the true object over the same pixels, in the data's units before
// noise) and no Truth: use Result.Atmosphere and TruthAt for the wavefront
// at any position.
//
// Method: the object is drawn on a canvas half a PSF support (qN/2 px, q =
// Oversample) wider than the field on every side. PSFs (qN×qN, formed on
// the imaging pupil grid as in Patch) are computed on a square grid of
// nodes with spacing S = Options.NodeSpacing (default N/2) covering the
// canvas, each for the field angle of its node. Bilinear "hat" weights w_k
// centred on the nodes (1 at the node, 0 at the neighbours; they sum to one
// everywhere) split the object into overlapping pieces, and the image is
// Σ_k (w_k·o) ⊗ s_k: each object point is imaged with the PSF interpolated
// from the nodes around it (a piecewise-linear space-variant PSF). Each
// piece is convolved (for q > 1 also with the pixel box) on its own FFT
// canvas large enough that nothing wraps. Granulation contrast is set at
// the diffraction limit over the field, as in Patch. Photons are scaled so
// the object's mean over the field gives Camera.Photons electrons per
// pixel. Deterministic given rng. It returns an error for sizes outside
// [Patch, MaxField] or invalid options.
func (s *Simulator) Field(rng *rand.Rand, nx, ny int, o Options) (*Result, error) {
	n, frames := s.cfg.Patch, s.cfg.Frames
	if nx < n || ny < n || nx > MaxField || ny > MaxField {
		return nil, fmt.Errorf("simulate: field %d×%d px, want each side in [%d, %d]", nx, ny, n, MaxField)
	}
	S := o.NodeSpacing
	if S == 0 {
		S = n / 2
	}
	if S < 2 || S > 4*n {
		return nil, fmt.Errorf("simulate: PSF node spacing %d px, want in [2, %d]", S, 4*n)
	}
	turb, err := s.turbulence(o)
	if err != nil {
		return nil, err
	}
	div, err := s.diversity(o)
	if err != nil {
		return nil, err
	}
	g := s.newFieldGeom(nx, ny, S)
	dur := float64(frames-1) * s.cfg.FrameInterval
	// Node angles span the canvas: (mx + 2S) pixels at most.
	ext := Extent{Duration: dur, FieldX: float64(g.mx+2*S) * g.scale, FieldY: float64(g.my+2*S) * g.scale}
	atm, err := newAtmosphere(rng, turb, g.p, s.dx/float64(s.q), ext, !o.NoSubharmonics, s.gens)
	if err != nil {
		return nil, err
	}
	obj, scene, err := s.object(rng, o, g.mx, g.my)
	if err != nil {
		return nil, err
	}
	seeds := frameSeeds(rng, frames)
	workers := s.workers(o)
	if o.Object == nil {
		stretch(obj, s.fieldContrast(obj, g, o.Scene.withDefaults().Contrast))
	}
	b := burst.New(nx, ny, frames)
	b.Optics = s.opticsHeader()
	res := &Result{Burst: b, R0: turb.R0, Atmosphere: atm, Times: make([]float64, frames), Scene: scene}
	ws := make([]*fieldWorker, min(workers, frames))
	for i := range ws {
		ws[i] = &fieldWorker{former: s.newFormer(g.f), piece: make([]float64, g.f*g.f),
			spec: make([]complex128, g.f*g.f), phase: make([]float64, g.p*g.p)}
		ws[i].div = div
	}
	parallel(frames, len(ws), func(wi, fr int) {
		t := float64(fr) * s.cfg.FrameInterval
		res.Times[fr] = t
		for j := 0; j < g.gy; j++ {
			for i := 0; i < g.gx; i++ {
				ws[wi].node(s, g, obj, atm, t, i, j, b.Data[0][fr], b.Data[1][fr])
			}
		}
	})
	scale := s.setObject(b, obj, g.mx, g.off, g.off)
	s.finish(b, seeds, scale, workers)
	return res, nil
}

// fieldGeom is the layout of one Field: the object canvas mx×my holds the
// field at offset (off, off); nodes sit at canvas (i·S, j·S), i < gx,
// j < gy, covering [0, mx)×[0, my); pieces are convolved on f×f canvases.
type fieldGeom struct {
	nx, ny, n, p, S int     // field, patch, PSF side, node spacing (px)
	mx, my, off     int     // object canvas and the field's offset in it
	gx, gy, f       int     // node grid, piece canvas side
	scale           float64 // pixel scale, rad
}

func (s *Simulator) newFieldGeom(nx, ny, S int) *fieldGeom {
	p := s.fpupil.N
	g := &fieldGeom{nx: nx, ny: ny, n: s.cfg.Patch, p: p, S: S,
		mx: nx + p, my: ny + p, off: p / 2, scale: s.cfg.Telescope.PixelScale}
	g.gx = (g.mx+S-1)/S + 1
	g.gy = (g.my+S-1)/S + 1
	g.f = canvasSide(2*S+p, s.q)
	return g
}

// angle returns the field angle (rad) of canvas pixel (cx, cy): field
// pixel (cx − off, cy − off) at ((x − nx/2)·p, (y − ny/2)·p), as in TruthAt.
func (g *fieldGeom) angle(cx, cy int) (float64, float64) {
	return (float64(cx-g.off) - float64(g.nx)/2) * g.scale, (float64(cy-g.off) - float64(g.ny)/2) * g.scale
}

// fieldContrast returns the contrast factor (see contrastFactor) found on
// the central region of the canvas (at most 2N wide), convolved on its own.
func (s *Simulator) fieldContrast(obj []float64, g *fieldGeom, target float64) float64 {
	w := min(g.nx, g.ny, 2*g.n)
	m := canvasSide(w+g.p, s.q)
	c := s.newFormer(m)
	sub := make([]float64, m*m)
	ox, oy := (g.mx-m)/2, (g.my-m)/2
	for y := 0; y < m; y++ {
		for x := 0; x < m; x++ {
			sub[y*m+x] = obj[wrap(oy+y, g.my)*g.mx+wrap(ox+x, g.mx)]
		}
	}
	return s.contrastFactor(c, sub, (m-w)/2, (m-w)/2, w, w, target)
}

// fieldWorker holds one goroutine's buffers for Field.
type fieldWorker struct {
	*former
	piece []float64    // f*f hat-weighted object piece
	spec  []complex128 // f*f its spectrum
	phase []float64    // p*p imaging-grid wavefront
}

// node adds to out0, out1 (the two channels of one frame, nx×ny) the
// image of the piece of obj around node (i, j) at time t. It allocates
// nothing.
func (w *fieldWorker) node(s *Simulator, g *fieldGeom, obj []float64, atm *Atmosphere, t float64, i, j int, out0, out1 []float64) {
	S, F, h := g.S, g.f, g.p/2
	// Piece: canvas [i·S−S, i·S+S) in each axis, placed in the FFT canvas
	// at offset p/2 (so its image, p wider, fits).
	px0, py0 := i*S-S, j*S-S
	if !w.cutPiece(g, obj, i, j) {
		return
	}
	w.plan.ForwardReal(w.spec, w.piece)
	ax, ay := g.angle(i*S, j*S)
	atm.Phase(w.phase, t, ax, ay)
	w.psfs(s, w.phase)
	w.blurPair(w.spec)
	// FFT-canvas pixel (bx, by) is canvas (px0−p/2+bx, py0−p/2+by),
	// field pixel (px0−p/2+bx−off, …).
	for by := 0; by < 2*S+g.p; by++ {
		fy := py0 - h + by - g.off
		if fy < 0 || fy >= g.ny {
			continue
		}
		for bx := 0; bx < 2*S+g.p; bx++ {
			fx := px0 - h + bx - g.off
			if fx < 0 || fx >= g.nx {
				continue
			}
			v := w.buf[by*F+bx]
			out0[fy*g.nx+fx] += real(v)
			out1[fy*g.nx+fx] += imag(v)
		}
	}
}

// cutPiece sets w.piece to the hat-weighted object around node (i, j),
// placed at offset p/2 of the f×f canvas, and reports whether any of it
// lies on the object canvas.
func (w *fieldWorker) cutPiece(g *fieldGeom, obj []float64, i, j int) bool {
	S, F, h := g.S, g.f, g.p/2
	px0, py0 := i*S-S, j*S-S
	clear(w.piece)
	any := false
	for y := 0; y < 2*S; y++ {
		cy := py0 + y
		if cy < 0 || cy >= g.my {
			continue
		}
		wy := 1 - math.Abs(float64(cy-j*S))/float64(S)
		if wy <= 0 {
			continue
		}
		for x := 0; x < 2*S; x++ {
			cx := px0 + x
			if cx < 0 || cx >= g.mx {
				continue
			}
			wx := 1 - math.Abs(float64(cx-i*S))/float64(S)
			if wx <= 0 {
				continue
			}
			w.piece[(y+h)*F+x+h] = wx * wy * obj[cy*g.mx+cx]
			any = true
		}
	}
	return any
}

// TruthAt returns the true wavefront coefficients of a Field result at
// field pixel (x, y) (fractional allowed) for every frame: the layers
// sampled on the imaging pupil grid at that position's field angle and
// each frame's time, then projected as in Truth.
func (s *Simulator) TruthAt(r *Result, x, y float64) *burst.Truth {
	b := r.Burst
	p := s.cfg.Telescope.PixelScale
	ax := (x - float64(b.Nx)/2) * p
	ay := (y - float64(b.Ny)/2) * p
	n := r.Atmosphere.N
	phases := make([][]float64, len(r.Times))
	for f, t := range r.Times {
		phases[f] = make([]float64, n*n)
		r.Atmosphere.Phase(phases[f], t, ax, ay)
	}
	return s.Truth(phases)
}
