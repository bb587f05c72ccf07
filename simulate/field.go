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
// Method: the object is drawn on a canvas half a patch wider than the field
// on every side. PSFs are computed on a square grid of nodes with spacing
// S = Options.NodeSpacing (default N/2) covering the canvas, each for the
// field angle of its node. Bilinear "hat" weights w_k centred on the nodes
// (1 at the node, 0 at the neighbours; they sum to one everywhere) split the
// object into overlapping pieces, and the image is Σ_k (w_k·o) ⊗ s_k: each
// object point is imaged with the PSF interpolated from the nodes around it
// (a piecewise-linear space-variant PSF). Each piece is convolved on its own
// FFT canvas large enough that nothing wraps. Granulation contrast is set
// at the diffraction limit over the field, as in Patch. Photons are scaled
// so the object's mean over the field gives Camera.Photons electrons per
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
	p := s.cfg.Telescope.PixelScale
	mx, my := nx+n, ny+n // canvas; field at offset (n/2, n/2)
	off := n / 2
	dur := float64(frames-1) * s.cfg.FrameInterval
	// Node angles span the canvas: (mx + 2S) pixels at most.
	ext := Extent{Duration: dur, FieldX: float64(mx+2*S) * p, FieldY: float64(my+2*S) * p}
	atm, err := newAtmosphere(rng, turb, n, s.dx, ext, !o.NoSubharmonics, s.gens)
	if err != nil {
		return nil, err
	}
	obj, scene, err := s.object(rng, o, mx, my)
	if err != nil {
		return nil, err
	}
	seeds := frameSeeds(rng, frames)
	workers := s.workers(o)

	F := nextPow2(2*S + n) // piece canvas
	if o.Object == nil {
		// Diffraction-limited contrast from the central region of the
		// canvas (at most 2N wide) convolved on its own; the factor found
		// there stretches the whole object.
		w := min(nx, ny, 2*n)
		m := nextPow2(w + n)
		c := s.newFormer(m)
		sub := make([]float64, m*m)
		ox, oy := (mx-m)/2, (my-m)/2
		for y := 0; y < m; y++ {
			for x := 0; x < m; x++ {
				sub[y*m+x] = obj[wrap(oy+y, my)*mx+wrap(ox+x, mx)]
			}
		}
		k := s.contrastFactor(c, sub, (m-w)/2, (m-w)/2, w, w, o.Scene.withDefaults().Contrast)
		stretch(obj, k)
	}

	// Nodes at canvas positions (i·S, j·S), i = 0..gx−1, covering [0, mx).
	gx := (mx+S-1)/S + 1
	gy := (my+S-1)/S + 1
	b := burst.New(nx, ny, frames)
	b.Optics = s.opticsHeader()
	res := &Result{Burst: b, R0: turb.R0, Atmosphere: atm, Times: make([]float64, frames), Scene: scene}
	type fieldWorker struct {
		f     *former
		piece []complex128
		phase []float64
	}
	ws := make([]*fieldWorker, min(workers, frames))
	for i := range ws {
		fm := s.newFormer(F)
		ws[i] = &fieldWorker{f: fm, piece: make([]complex128, F*F), phase: make([]float64, n*n)}
	}
	parallel(frames, len(ws), func(wi, fr int) {
		w := ws[wi]
		t := float64(fr) * s.cfg.FrameInterval
		res.Times[fr] = t
		out0, out1 := b.Data[0][fr], b.Data[1][fr]
		for j := 0; j < gy; j++ {
			for i := 0; i < gx; i++ {
				// Piece: canvas [i·S−S, i·S+S) in each axis, placed in the
				// FFT canvas at offset n/2 (so its image, n wider, fits).
				px0, py0 := i*S-S, j*S-S
				clear(w.piece)
				any := false
				for y := 0; y < 2*S; y++ {
					cy := py0 + y
					if cy < 0 || cy >= my {
						continue
					}
					wy := 1 - math.Abs(float64(cy-j*S))/float64(S)
					if wy <= 0 {
						continue
					}
					for x := 0; x < 2*S; x++ {
						cx := px0 + x
						if cx < 0 || cx >= mx {
							continue
						}
						wx := 1 - math.Abs(float64(cx-i*S))/float64(S)
						if wx <= 0 {
							continue
						}
						w.piece[(y+n/2)*F+x+n/2] = complex(wx*wy*obj[cy*mx+cx], 0)
						any = true
					}
				}
				if !any {
					continue
				}
				w.f.plan.Forward(w.piece, w.piece)
				ax := (float64(i*S) - float64(mx)/2) * p
				ay := (float64(j*S) - float64(my)/2) * p
				atm.Phase(w.phase, t, ax, ay)
				w.f.psfs(s, w.phase)
				w.f.blurPair(w.piece)
				// FFT-canvas pixel (bx, by) is canvas (px0−n/2+bx, py0−n/2+by),
				// field pixel (px0−n/2+bx−off, …).
				for by := 0; by < 2*S+n; by++ {
					fy := py0 - n/2 + by - off
					if fy < 0 || fy >= ny {
						continue
					}
					for bx := 0; bx < 2*S+n; bx++ {
						fx := px0 - n/2 + bx - off
						if fx < 0 || fx >= nx {
							continue
						}
						v := w.f.buf[by*F+bx]
						out0[fy*nx+fx] += real(v)
						out1[fy*nx+fx] += imag(v)
					}
				}
			}
		}
	})
	scale := s.setObject(b, obj, mx, off, off)
	s.finish(b, seeds, scale, workers)
	return res, nil
}

// TruthAt returns the true wavefront coefficients of a Field result at
// field pixel (x, y) (fractional allowed) for every frame: the layers
// sampled at that position's field angle and each frame's time, then
// projected as in Truth.
func (s *Simulator) TruthAt(r *Result, x, y float64) *burst.Truth {
	b := r.Burst
	p := s.cfg.Telescope.PixelScale
	ax := (x - float64(b.Nx)/2) * p
	ay := (y - float64(b.Ny)/2) * p
	n := s.cfg.Patch
	phases := make([][]float64, len(r.Times))
	for f, t := range r.Times {
		phases[f] = make([]float64, n*n)
		r.Atmosphere.Phase(phases[f], t, ax, ay)
	}
	return s.Truth(phases)
}
