package pd

import (
	"math"
	"math/cmplx"

	"gonum.org/v1/gonum/floats"

	"pdwave/model/fft"
)

// The exact-edge objective.
//
// The metric L compares D = F{w·d} with S·F̂, which holds for a periodic
// object but not for a real one: light that the PSF carries across the
// window's taper makes w·(o⊗s) differ from (w·o)⊗s, most for the wide
// defocused PSF and for scenes with strong structure at the patch edge,
// and the fit explains that difference with wrong wavefronts. The
// exact-edge objective (SetExactEdges) has no window: the object o lives
// on an M×M support larger than the N×N data (M ≥ N + 2·N/4, a margin
// for the light the PSFs bring in), the model is the crop C of the
// convolution, and the object is eliminated by regularised least squares
// (variable projection; Golub & Pereyra 1973, SIAM J. Numer. Anal. 10,
// 413):
//
//	J(α) = min_o Σ_k ‖C(s_k ⊗ o) − (d_k − d̄)‖² + μ‖o‖²,
//	E(α) = N²·J(α)/P̄ + w·½ Σ_jm α_jm²/σ_m²,
//
// d̄ the mean of all data, P̄ the periodic metric's data power per image
// (so the prior weight w keeps its meaning: N²·J is J in the units of the
// unnormalised DFT). The normal equations (Σ_k S̃_k* F C F⁻¹ S̃_k + μ) Ô =
// Σ_k S̃_k* F Cᵀ(d_k − d̄), S̃_k the OTFs on the M grid, are solved by
// conjugate gradients preconditioned with 1/(f·Σ_k|S̃_k|² + μ), f = N²/M²,
// warm-started from the previous solution. At the solution the gradient
// needs no derivative of Ô (envelope theorem): ∂J/∂s_k = 2·res_k ⋆ ô, with
// res_k = Cᵀ(C(s_k ⊗ ô) − d_k + d̄), which enters the chain rule through
// s = |h|²/c as the periodic metric's does. An evaluation whose warm
// start already meets the tolerance costs four FFTs of M² per pair of
// images (OTFs, model, residual spectrum, gradient); each conjugate-
// gradient iteration adds two, and a solve that iterates two more.

// edgePadFrac is the margin of the extended support per side, as a
// fraction of N: it holds the object light that the seeing-blurred and
// defocused PSFs carry into the data. Measured on the demo site at D/r0 =
// 5 (eight bursts per scene): 1/8 (M = 80) was as good on granulation and
// brick but worse on the smooth camera scene (0.052 against 0.040 over
// Noll 2–10).
const edgePadFrac = 0.25

// edgeMu is the Tikhonov weight μ of the extended object relative to the
// zero-frequency value of f·Σ_k|S̃_k|² (f = N²/M², the observed share).
// Common practice (a small fixed ridge); the model images need the object
// only where it reaches the data, where the data constrain it.
const edgeMu = 1e-4

// edgeIterations bounds the conjugate-gradient iterations of one solve;
// edgeTol is the relative residual |b − A·Ô|/|b| at which it stops. The
// solve is warm-started from the previous evaluation, so 1e-3 costs about
// one iteration per L-BFGS step; measured on the demo site at D/r0 = 5
// against 1e-5 (22 iterations per step): the same medians within 0.006
// on granulation, brick and camera, at a third of the time; 1e-2 was
// worse on camera (0.115 against 0.040).
const (
	edgeIterations = 60
	edgeTol        = 1e-3
)

// edgeModel holds the buffers of the exact-edge objective, allocated by
// the first SetExactEdges. Images are handled in pairs (a, a+1), two real
// images per complex FFT; pair p holds images 2p and 2p+1.
type edgeModel struct {
	m, pad  int
	plan    *fft.Plan
	neg     []int          // index of −u on the M grid
	hp      int            // M²/2 + M/2 + 1: the index prefix [0, hp) holds u or −u of every frequency (rows 0 and M/2 hold both)
	emb     []int          // M-grid index of each N-grid pixel (origin-centred, wrap-around)
	otf     [][]complex128 // [nimg][M²] OTFs on the M grid
	data    [][]complex128 // [nimg][M²] F{Cᵀ(d_k − d̄)}
	pixels  [][]complex128 // [pairs][M²] Cᵀ(d_a − d̄) + i·Cᵀ(d_b − d̄)
	res     [][]complex128 // [pairs][M²] residual spectra F{res_a + i·res_b}
	dir     [][]complex128 // [pairs][M²] F{C F⁻¹(S̃·P)} of the CG direction, per pair
	pre     []float64      // preconditioner at each M-grid frequency
	x       []complex128   // Ô, kept between evaluations as the warm start
	b, r, z []complex128   // CG vectors
	p, q    []complex128
	w1      []complex128 // M² scratch
	on      bool         // ValueGrad evaluates the exact-edge objective
	lastRes float64      // relative residual of the last object solve
	tol     float64      // stopping residual of the object solve (edgeTol)
}

// smoothSize returns the smallest n' ≥ n whose only prime factors are 2, 3
// and 5 (sizes the FFT handles fast).
func smoothSize(n int) int {
	for m := max(n, 1); ; m++ {
		k := m
		for _, p := range []int{2, 3, 5} {
			for k%p == 0 {
				k /= p
			}
		}
		if k == 1 {
			return m
		}
	}
}

func (s *Objective) newEdgeModel() *edgeModel {
	pad := int(math.Ceil(edgePadFrac * float64(s.n)))
	m := smoothSize(s.n + 2*pad)
	e := &edgeModel{m: m, pad: (m - s.n) / 2, plan: fft.NewPlan(m, m), tol: edgeTol}
	mm := m * m
	e.neg = make([]int, mm)
	for y := 0; y < m; y++ {
		for x := 0; x < m; x++ {
			e.neg[y*m+x] = ((m-y)%m)*m + (m-x)%m
		}
	}
	e.hp = mm/2 + m/2 + 1
	n := s.n
	e.emb = make([]int, s.npix)
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			e.emb[y*n+x] = wrapTo(y, n, m)*m + wrapTo(x, n, m)
		}
	}
	grid := func(k int) [][]complex128 {
		g := make([][]complex128, k)
		for i := range g {
			g[i] = make([]complex128, mm)
		}
		return g
	}
	pairs := (s.nimg + 1) / 2
	e.otf, e.data = grid(s.nimg), grid(s.nimg)
	e.pixels, e.res, e.dir = grid(pairs), grid(pairs), grid(pairs)
	e.pre = make([]float64, mm)
	for _, v := range []*[]complex128{&e.x, &e.b, &e.r, &e.z, &e.p, &e.q, &e.w1} {
		*v = make([]complex128, mm)
	}
	return e
}

// wrapTo maps index i of an n-point origin-centred periodic grid to the
// same offset on an m-point grid (m ≥ n).
func wrapTo(i, n, m int) int {
	if i >= (n+1)/2 {
		return i - n + m
	}
	return i
}

// SetExactEdges switches ValueGrad to the exact-edge objective (see the
// comment above) for data, which must be what the last successful SetData
// received, or back to the periodic metric L if data is nil. A new
// SetData also switches back. The first call allocates about
// (3·images + 8)·M² complex values; later calls allocate nothing. It
// returns an error on wrong sizes or non-finite values and panics if
// SetData has not succeeded.
func (s *Objective) SetExactEdges(data [][][]float64) error {
	if !s.hasData {
		panic("pd: SetExactEdges before a successful SetData")
	}
	if data == nil {
		if s.edge != nil {
			s.edge.on = false
		}
		return nil
	}
	if err := s.checkData(data); err != nil {
		return err
	}
	if s.edge == nil {
		s.edge = s.newEdgeModel()
	}
	e := s.edge
	var level float64
	for k := range data {
		for _, im := range data[k] {
			level += floats.Sum(im)
		}
	}
	level /= float64(s.nimg * s.npix)
	for a := 0; a < s.nimg; a += 2 {
		w := e.pixels[a/2]
		clear(w)
		for i := a; i < min(a+2, s.nimg); i++ {
			e.placeData(w, data[i%s.nch][i/s.nch], level, s.n, i > a)
		}
		e.plan.Forward(e.w1, w)
		e.splitInto(e.data[a], e.data[min(a+1, s.nimg-1)], e.w1)
	}
	clear(e.x)
	e.on = true
	return nil
}

// ExactEdges reports whether ValueGrad evaluates the exact-edge objective,
// and the relative residual |b − A·Ô|/|b| of its last object solve.
func (s *Objective) ExactEdges() (on bool, residual float64) {
	if s.edge == nil {
		return false, 0
	}
	return s.edge.on, s.edge.lastRes
}

// exactValueGrad is ValueGrad for the exact-edge objective: it returns
// N²·J/P̄ (the prior is added by the caller) and, if grad is not nil,
// leaves the phase densities in s.qacc and s.offGrad.
func (s *Objective) exactValueGrad(grad []float64) float64 {
	e := s.edge
	for j := 0; j < s.frames; j++ {
		s.framePhase(j)
		for k := 0; k < s.nch; k++ {
			s.pupilField(j*s.nch+k, k)
		}
	}
	e.fillOTFs(s)
	e.rhsAndPreconditioner(s)
	rr := e.solve(s)
	J := rr + e.edgeMuAbs(s)*dotRe(e.x, e.x)/float64(e.m*e.m)
	if grad != nil {
		for j := range s.qacc {
			clear(s.qacc[j])
		}
		clear(s.offGrad)
		for a := 0; a < s.nimg; a += 2 {
			e.densityPair(s, a)
		}
	}
	return float64(s.npix) * J / s.norm
}

// residuals stores in e.res the residual spectra at Ô = e.x,
// F{C(s_k ⊗ ô) − Cᵀ(d_k − d̄)} for each pair, and returns Σ_k ‖res_k‖².
func (e *edgeModel) residuals(s *Objective) float64 {
	var rr float64
	for a := 0; a < s.nimg; a += 2 {
		w := e.res[a/2]
		e.pairProduct(w, e.x, a, s.nimg)
		e.plan.Inverse(w, w)
		e.cropInPlace(w, s.n)
		for u, d := range e.pixels[a/2] {
			z := w[u] - d
			w[u] = z
			rr += real(z)*real(z) + imag(z)*imag(z)
		}
		e.plan.Forward(w, w)
	}
	return rr
}

// pairProduct stores S̃_a·X + i·S̃_b·X in dst (S̃_a·X alone if b = a + 1
// does not exist).
func (e *edgeModel) pairProduct(dst, x []complex128, a, nimg int) {
	oa := e.otf[a]
	if a+1 >= nimg {
		for u, v := range x {
			dst[u] = oa[u] * v
		}
		return
	}
	ob := e.otf[a+1]
	for u, v := range x {
		t := ob[u] * v
		dst[u] = oa[u]*v + complex(-imag(t), real(t))
	}
}

// densityPair adds the phase densities of images a and a+1 from their
// residual spectra in e.res: the PSF gradient 2·res ⋆ ô, on the N grid
// and scaled to the periodic metric's convention, goes through
// imageDensity.
func (e *edgeModel) densityPair(s *Objective, a int) {
	w := e.res[a/2]
	for u := range e.hp {
		// q = RA·X* + i·RB·X*, at u and at −u (where RA, RB and X are
		// conjugated).
		ra, rb := e.split(w, u)
		xu := e.x[u]
		c := cmplx.Conj(xu)
		t := rb * c
		e.q[u] = ra*c + complex(-imag(t), real(t))
		t = cmplx.Conj(rb) * xu
		e.q[e.neg[u]] = cmplx.Conj(ra)*xu + complex(-imag(t), real(t))
	}
	e.plan.Inverse(e.q, e.q)
	sc := complex(float64(s.npix), 0)
	for x, u := range e.emb {
		s.work[x] = sc * e.q[u]
	}
	scale := -4 / (s.c * float64(s.npix)) / s.norm
	s.imageDensity(a, scale, false)
	if a+1 < s.nimg {
		s.imageDensity(a+1, scale, true)
	}
}

// splitInto stores in da and db the two Hermitian spectra held together
// in z (see split); with da and db the same slice (an odd last image) the
// first is kept.
func (e *edgeModel) splitInto(da, db, z []complex128) {
	for u := range e.hp {
		a, b := e.split(z, u)
		n := e.neg[u]
		db[u], db[n] = b, cmplx.Conj(b)
		da[u], da[n] = a, cmplx.Conj(a)
	}
}

// split separates the spectra of two real images transformed together,
// z = F{a + i·b}: A = (z(u) + z*(−u))/2, B = (z(u) − z*(−u))/(2i).
func (e *edgeModel) split(z []complex128, u int) (a, b complex128) {
	zu, zn := z[u], cmplx.Conj(z[e.neg[u]])
	d := 0.5 * (zu - zn)
	return 0.5 * (zu + zn), complex(imag(d), -real(d))
}

// fillOTFs computes the OTFs of the current PSFs (|s.h|²/c, on the N grid)
// on the M grid, two images per FFT.
func (e *edgeModel) fillOTFs(s *Objective) {
	ic := 1 / s.c
	for a := 0; a < s.nimg; a += 2 {
		clear(e.w1)
		for i := a; i < min(a+2, s.nimg); i++ {
			for x, z := range s.h[i] {
				v := (real(z)*real(z) + imag(z)*imag(z)) * ic
				if i > a {
					e.w1[e.emb[x]] += complex(0, v)
				} else {
					e.w1[e.emb[x]] += complex(v, 0)
				}
			}
		}
		e.plan.Forward(e.w1, e.w1)
		e.splitInto(e.otf[a], e.otf[min(a+1, s.nimg-1)], e.w1)
	}
}

// rhsAndPreconditioner sets, in one pass over the OTFs, the right-hand
// side b = Σ_k S̃_k*·F{Cᵀ(d_k − d̄)} of the normal equations and the
// preconditioner 1/(f·Σ_k|S̃_k|² + μ), f = N²/M².
func (e *edgeModel) rhsAndPreconditioner(s *Objective) {
	f := float64(s.npix) / float64(e.m*e.m)
	mu := e.edgeMuAbs(s)
	for u := range e.hp {
		var t complex128
		var p float64
		for i, o := range e.otf {
			z := o[u]
			t += cmplx.Conj(z) * e.data[i][u]
			p += real(z)*real(z) + imag(z)*imag(z)
		}
		n := e.neg[u]
		e.b[u], e.b[n] = t, cmplx.Conj(t)
		e.pre[u] = 1 / (f*p + mu)
		e.pre[n] = e.pre[u]
	}
}

// edgeMuAbs returns μ in the units of the normal equations.
func (e *edgeModel) edgeMuAbs(s *Objective) float64 {
	return edgeMu * float64(s.npix) / float64(e.m*e.m) * float64(s.nimg)
}

// placeData writes im − level into the data region of dst (real part, or
// imaginary part if imagPart).
func (e *edgeModel) placeData(dst []complex128, im []float64, level float64, n int, imagPart bool) {
	m, p := e.m, e.pad
	for y := 0; y < n; y++ {
		row := dst[(y+p)*m+p : (y+p)*m+p+n]
		for x, v := range im[y*n : (y+1)*n] {
			if imagPart {
				row[x] += complex(0, v-level)
			} else {
				row[x] += complex(v-level, 0)
			}
		}
	}
}

// adjoint stores in dst Σ_pairs (S̃_a*·A + S̃_b*·B) + μ·x, A and B the two
// spectra held together in each of w.
func (e *edgeModel) adjoint(dst []complex128, w [][]complex128, x []complex128, s *Objective) {
	mu := complex(e.edgeMuAbs(s), 0)
	for u := range e.hp {
		dst[u] = mu * x[u]
	}
	for a := 0; a < s.nimg; a += 2 {
		z, oa := w[a/2], e.otf[a]
		if a+1 >= s.nimg {
			for u := range e.hp {
				za, _ := e.split(z, u)
				dst[u] += cmplx.Conj(oa[u]) * za
			}
			continue
		}
		ob := e.otf[a+1]
		for u := range e.hp {
			za, zb := e.split(z, u)
			dst[u] += cmplx.Conj(oa[u])*za + cmplx.Conj(ob[u])*zb
		}
	}
	for u := range e.hp {
		dst[e.neg[u]] = cmplx.Conj(dst[u])
	}
}

// apply stores A·X in dst: Σ_k S̃_k* F C F⁻¹ (S̃_k X) + μX, leaving the
// per-pair spectra F C F⁻¹ (S̃ X) in e.dir.
func (e *edgeModel) apply(dst, x []complex128, s *Objective) {
	for a := 0; a < s.nimg; a += 2 {
		w := e.dir[a/2]
		e.pairProduct(w, x, a, s.nimg)
		e.plan.Inverse(w, w)
		e.cropInPlace(w, s.n)
		e.plan.Forward(w, w)
	}
	e.adjoint(dst, e.dir, x, s)
}

// cropInPlace zeroes w outside the data region.
func (e *edgeModel) cropInPlace(w []complex128, n int) {
	m, p := e.m, e.pad
	for y := 0; y < m; y++ {
		row := w[y*m : (y+1)*m]
		if y < p || y >= p+n {
			clear(row)
			continue
		}
		clear(row[:p])
		clear(row[p+n:])
	}
}

// dotRe returns Re Σ conj(a)·b.
func dotRe(a, b []complex128) float64 {
	var t float64
	for i, v := range a {
		t += real(v)*real(b[i]) + imag(v)*imag(b[i])
	}
	return t
}

// solve brings e.x to the solution of A·X = b (preconditioned conjugate
// gradients from the warm start e.x, until the relative residual is below
// edgeTol), leaves the residual spectra at the final e.x in e.res, records
// the relative residual in e.lastRes and returns Σ_k ‖res_k‖².
func (e *edgeModel) solve(s *Objective) float64 {
	rr := e.residuals(s)
	// b − A·x = −(Σ S̃* RES + μx): the residual pass gives it for free.
	e.adjoint(e.r, e.res, e.x, s)
	bn := math.Sqrt(dotRe(e.b, e.b))
	if bn == 0 {
		e.lastRes = 0
		return rr
	}
	for u, v := range e.r {
		e.r[u] = -v
		e.z[u] = complex(e.pre[u], 0) * e.r[u]
	}
	res := math.Sqrt(dotRe(e.r, e.r)) / bn
	if res <= e.tol {
		e.lastRes = res
		return rr
	}
	copy(e.p, e.z)
	rz := dotRe(e.r, e.z)
	for it := 0; it < edgeIterations && res > e.tol; it++ {
		e.apply(e.q, e.p, s)
		alpha := complex(rz/dotRe(e.p, e.q), 0)
		for u := range e.x {
			e.x[u] += alpha * e.p[u]
			e.r[u] -= alpha * e.q[u]
			e.z[u] = complex(e.pre[u], 0) * e.r[u]
		}
		// The residual images are linear in X: move them along too.
		a := real(alpha)
		for i, w := range e.res {
			for u, d := range e.dir[i] {
				w[u] += complex(a*real(d), a*imag(d))
			}
		}
		rzNew := dotRe(e.r, e.z)
		beta := complex(rzNew/rz, 0)
		rz = rzNew
		for u := range e.p {
			e.p[u] = e.z[u] + beta*e.p[u]
		}
		res = math.Sqrt(dotRe(e.r, e.r)) / bn
	}
	e.lastRes = res
	// Σ‖res‖² from the spectra (Parseval: Σ_x |z|² = Σ_u |Z|²/M², and
	// |a + i·b|² = a² + b² for the real pair a, b).
	rr = 0
	for _, w := range e.res {
		rr += dotRe(w, w)
	}
	return rr / float64(e.m*e.m)
}
