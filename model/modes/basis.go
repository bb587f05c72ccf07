package modes

import (
	"fmt"
	"math"
	"sort"
	"sync"

	"gonum.org/v1/gonum/mat"
)

// Kind names a wavefront basis.
type Kind string

// The supported bases.
const (
	// KindZernike is Noll-ordered, Noll-normalised Zernike polynomials j = 2..Count+1.
	KindZernike Kind = "zernike"
	// KindKL is Karhunen–Loève modes for Kolmogorov turbulence (New) or for
	// the aperture and outer scale given to NewFor, built from the Zernike
	// polynomials j = 2..Count+1.
	KindKL Kind = "kl"
)

// ParseKind converts a user string ("zernike" or "kl") to a Kind.
func ParseKind(s string) (Kind, error) {
	switch Kind(s) {
	case KindZernike, KindKL:
		return Kind(s), nil
	}
	return "", fmt.Errorf("unknown basis %q (want %q or %q)", s, KindZernike, KindKL)
}

// Basis is a set of wavefront modes sampled on an N×N pupil grid. The grid
// centre is pixel (N/2, N/2) (integer division); a pixel (x, y) has
// ρ = hypot(x−N/2, y−N/2)/Radius and θ = atan2(y−N/2, x−N/2). Modes are zero
// outside ρ ≤ 1. Mode values are in radians per unit coefficient.
//
// A Basis is read-only after New or NewFor and safe for concurrent use.
type Basis struct {
	Kind   Kind
	Count  int     // number of modes, piston excluded (Zernike: Noll j = 2..Count+1)
	N      int     // grid side, pixels
	Radius float64 // pupil radius, pixels

	// Obscuration is the central obscuration ε (inner/outer diameter) of the
	// aperture the basis was built for (0 for New), and OuterScale the
	// von Kármán outer scale L0/D (+Inf for Kolmogorov, as New).
	Obscuration float64
	OuterScale  float64

	// Modes holds Count slices of length N*N, row-major (index y*N+x),
	// zero outside ρ ≤ 1 (inside the central obscuration they continue the
	// polynomials smoothly).
	Modes [][]float64

	// ToNoll is Count×Count: noll[i] = Σ_k ToNoll(i,k)·native[k], with
	// noll index i ↔ Noll j = i+2. Identity for Zernike; for KL from New the
	// orthogonal eigenvector matrix U; for KL from NewFor with an obscured or
	// finite-L0 aperture the generalised eigenvector matrix V (VᵀGV = I, G
	// the annulus Gram matrix of the Zernikes; not orthogonal — invert it
	// rather than transpose it). For an obscured aperture the KL modes are
	// built from Zernikes with their annulus mean removed, so the phase of
	// the Noll coefficients equals the KL phase up to a constant over the
	// annulus (exactly, for Obscuration 0).
	ToNoll *mat.Dense

	// Variance is the turbulence variance of each native mode coefficient
	// in (D/r0)^(5/3) rad²: the diagonal of the coefficient covariance in
	// this basis. New uses the Kolmogorov covariance of Noll 1976 eq. 25;
	// NewFor with an obscured or finite-L0 aperture a quadrature of the
	// structure function over the annulus (see NewFor). For KL the
	// covariance is diagonal (the eigenvalues, decreasing).
	Variance []float64

	// Index lists the pixels with ρ ≤ 1 in increasing order.
	Index []int

	// Support lists the pixels of Index with ρ ≥ Obscuration (the test of
	// optics.NewPupil without spiders): the annulus over which NewFor's KL
	// modes are orthonormal, and the default mask of Project. It is the
	// same slice as Index when Obscuration is 0.
	Support []int

	quad bool // Variance and KL modes from the annulus quadrature
	once sync.Once
	def  *Projector
}

// New returns a basis of count modes of the given kind, sampled on an n×n
// grid with a pupil of the given radius in pixels, for a clear aperture and
// Kolmogorov turbulence (Obscuration 0, OuterScale +Inf). NewFor with the
// zero Aperture returns the same basis.
//
// Zernike: mode k is Noll Z_{k+2}.
//
// KL: the modes are the eigenvectors of the Noll covariance matrix C over
// j = 2..count+1 (Noll 1976 eq. 25), mode_k = Σ_i U(i,k)·Z_{i+2}, ordered by
// decreasing eigenvalue, so that the KL coefficients are uncorrelated with
// variances Variance[k] (UᵀCU diagonal). C is block diagonal in (|m|,
// cos/sin); each block is decomposed separately with mat.EigenSym so that
// every KL mode is a pure cos or pure sin mode of one |m| (the cos/sin
// pairs are degenerate and would otherwise mix arbitrarily). Each eigenvector
// is signed so that its largest-magnitude component is positive (ties: lowest
// index). The result is deterministic.
//
// New returns an error for an unknown kind, count < 1, n < 1, or a radius
// that is not finite, not positive or larger than n/2.
func New(kind Kind, count, n int, radius float64) (*Basis, error) {
	if err := checkArgs(kind, count, n, radius); err != nil {
		return nil, err
	}
	b := &Basis{Kind: kind, Count: count, N: n, Radius: radius, OuterScale: math.Inf(1)}
	zern := b.sample(0)
	cov := NollCovarianceMatrix(count)
	switch kind {
	case KindZernike:
		b.Modes = zern
		b.ToNoll = mat.NewDense(count, count, nil)
		b.Variance = make([]float64, count)
		for i := 0; i < count; i++ {
			b.ToNoll.Set(i, i, 1)
			b.Variance[i] = cov.At(i, i)
		}
	case KindKL:
		u, vals, err := klVectors(cov, nil)
		if err != nil {
			return nil, err
		}
		b.ToNoll = u
		b.Variance = vals
		b.Modes = b.combine(zern, u, nil)
	}
	return b, nil
}

// checkArgs validates the arguments shared by New and NewFor.
func checkArgs(kind Kind, count, n int, radius float64) error {
	switch kind {
	case KindZernike, KindKL:
	default:
		return fmt.Errorf("modes: unknown basis kind %q (want %q or %q)", kind, KindZernike, KindKL)
	}
	if count < 1 {
		return fmt.Errorf("modes: mode count %d < 1", count)
	}
	if n < 1 {
		return fmt.Errorf("modes: grid size %d < 1", n)
	}
	if !(radius > 0) || math.IsInf(radius, 0) || radius > float64(n)/2 {
		return fmt.Errorf("modes: pupil radius %g pixels outside (0, %g] for a %d-pixel grid", radius, float64(n)/2, n)
	}
	return nil
}

// sample fills b.Index (ρ ≤ 1) and b.Support (ρ ≥ eps as well, by the same
// floating-point test as optics.NewPupil) and returns the Zernikes
// j = 2..Count+1 sampled on the grid (zero outside ρ ≤ 1).
func (b *Basis) sample(eps float64) [][]float64 {
	n, radius := b.N, b.Radius
	c := float64(n / 2)
	var rhos, thetas []float64
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			dx, dy := float64(x)-c, float64(y)-c
			rho := math.Hypot(dx, dy) / radius
			if rho <= 1 {
				b.Index = append(b.Index, y*n+x)
				rhos = append(rhos, rho)
				thetas = append(thetas, math.Atan2(dy, dx))
				if eps > 0 && !(rho*radius < eps*radius) {
					b.Support = append(b.Support, y*n+x)
				}
			}
		}
	}
	if eps == 0 {
		b.Support = b.Index
	}
	zern := make([][]float64, b.Count)
	for k := range zern {
		z := make([]float64, n*n)
		j := k + 2
		for p, idx := range b.Index {
			z[idx] = Zernike(j, rhos[p], thetas[p])
		}
		zern[k] = z
	}
	return zern
}

// combine returns the modes Σ_i u(i,k)·(zern_i − mu_i) on b.Index (mu nil:
// no offsets).
func (b *Basis) combine(zern [][]float64, u *mat.Dense, mu []float64) [][]float64 {
	count := b.Count
	out := make([][]float64, count)
	for k := 0; k < count; k++ {
		mk := make([]float64, b.N*b.N)
		var off float64
		for i := 0; i < count; i++ {
			w := u.At(i, k)
			if w == 0 {
				continue
			}
			if mu != nil {
				off += w * mu[i]
			}
			zi := zern[i]
			for _, idx := range b.Index {
				mk[idx] += w * zi[idx]
			}
		}
		if off != 0 {
			for _, idx := range b.Index {
				mk[idx] -= off
			}
		}
		out[k] = mk
	}
	return out
}

// klVectors diagonalises the covariance matrix cov of the Zernike
// coefficients (index i ↔ Noll j = i+2) block by block and returns the
// eigenvectors as columns of U, ordered by decreasing eigenvalue, with the
// eigenvalues. With gram nil it solves cov·u = λu (U orthogonal); otherwise
// the generalised problem cov·v = λ·gram·v (VᵀGV = I) through the Cholesky
// factor of each block of gram. Both matrices must vanish between different
// signed m (see below).
func klVectors(cov, gram *mat.SymDense) (*mat.Dense, []float64, error) {
	count := cov.SymmetricDim()
	groups := mGroups(count)
	type vec struct {
		val float64
		v   []float64 // full length count
	}
	var vecs []vec
	for _, g := range groups {
		k := len(g.idx)
		vals, ev, err := blockEigen(cov, gram, g.idx)
		if err != nil {
			return nil, nil, fmt.Errorf("modes: eigen-decomposition of the turbulence covariance (m=%d): %w", g.m, err)
		}
		for c := 0; c < k; c++ {
			v := make([]float64, count)
			best, bi := -1.0, 0
			for a := 0; a < k; a++ {
				x := ev.At(a, c)
				v[g.idx[a]] = x
				if math.Abs(x) > best {
					best, bi = math.Abs(x), g.idx[a]
				}
			}
			if v[bi] < 0 {
				for i := range v {
					v[i] = -v[i]
				}
			}
			vecs = append(vecs, vec{val: vals[c], v: v})
		}
	}
	sort.SliceStable(vecs, func(a, b int) bool { return vecs[a].val > vecs[b].val })
	u := mat.NewDense(count, count, nil)
	vals := make([]float64, count)
	for k, e := range vecs {
		vals[k] = e.val
		for i := 0; i < count; i++ {
			u.Set(i, k, e.v[i])
		}
	}
	return u, vals, nil
}

// mGroup lists the indices i (Noll j = i+2) of one signed m.
type mGroup struct {
	m   int
	idx []int
}

// mGroups groups the Noll indices j = 2..count+1 by signed m (the sign of m
// encodes cos/sin; the turbulence covariance and the annulus Gram matrix
// vanish between different groups), ordered |m| ascending, cos (m>0) before
// sin (m<0), for a deterministic tie order between degenerate cos/sin pairs.
func mGroups(count int) []*mGroup {
	var groups []*mGroup
	byM := map[int]*mGroup{}
	for i := 0; i < count; i++ {
		_, m := NollToNM(i + 2)
		g := byM[m]
		if g == nil {
			g = &mGroup{m: m}
			byM[m] = g
			groups = append(groups, g)
		}
		g.idx = append(g.idx, i)
	}
	sort.SliceStable(groups, func(a, b int) bool {
		ma, mb := abs(groups[a].m), abs(groups[b].m)
		if ma != mb {
			return ma < mb
		}
		return groups[a].m > groups[b].m
	})
	return groups
}

// blockEigen returns the eigenvalues (ascending) and eigenvectors (columns)
// of the block of cov on the indices idx, generalised with the same block of
// gram unless gram is nil.
func blockEigen(cov, gram *mat.SymDense, idx []int) ([]float64, *mat.Dense, error) {
	k := len(idx)
	blk := mat.NewSymDense(k, nil)
	for a := 0; a < k; a++ {
		for c := a; c < k; c++ {
			blk.SetSym(a, c, cov.At(idx[a], idx[c]))
		}
	}
	var l mat.TriDense
	if gram != nil {
		// C v = λ G v with G = L Lᵀ: (L⁻¹ C L⁻ᵀ) y = λ y, v = L⁻ᵀ y.
		gb := mat.NewSymDense(k, nil)
		for a := 0; a < k; a++ {
			for c := a; c < k; c++ {
				gb.SetSym(a, c, gram.At(idx[a], idx[c]))
			}
		}
		var ch mat.Cholesky
		if !ch.Factorize(gb) {
			return nil, nil, fmt.Errorf("gram block of %d modes not positive definite", k)
		}
		ch.LTo(&l)
		var t mat.Dense
		if err := t.Solve(&l, blk); err != nil { // L⁻¹C
			return nil, nil, err
		}
		var s mat.Dense
		if err := s.Solve(&l, t.T()); err != nil { // L⁻¹(L⁻¹C)ᵀ = L⁻¹CL⁻ᵀ
			return nil, nil, err
		}
		for a := 0; a < k; a++ {
			for c := a; c < k; c++ {
				blk.SetSym(a, c, 0.5*(s.At(a, c)+s.At(c, a)))
			}
		}
	}
	var es mat.EigenSym
	if !es.Factorize(blk, true) {
		return nil, nil, fmt.Errorf("symmetric eigen-decomposition failed")
	}
	vals := es.Values(nil)
	ev := new(mat.Dense)
	es.VectorsTo(ev)
	if gram != nil {
		var v mat.Dense
		if err := v.Solve(l.T(), ev); err != nil { // v = L⁻ᵀ y
			return nil, nil, err
		}
		ev = &v
	}
	return vals, ev, nil
}

func abs(x int) int {
	if x < 0 {
		return -x
	}
	return x
}

// Phase sets dst = Σ_k coeffs[k]·Modes[k] (radians). dst has length N*N and
// is overwritten; coeffs has length Count. dst must not alias coeffs.
// Phase panics on wrong lengths. It does not allocate.
func (b *Basis) Phase(dst, coeffs []float64) {
	if len(dst) != b.N*b.N {
		panic(fmt.Sprintf("modes: Phase dst length %d, want %d", len(dst), b.N*b.N))
	}
	if len(coeffs) != b.Count {
		panic(fmt.Sprintf("modes: Phase coeffs length %d, want %d", len(coeffs), b.Count))
	}
	for i := range dst {
		dst[i] = 0
	}
	for k, a := range coeffs {
		if a == 0 {
			continue
		}
		mk := b.Modes[k]
		for _, idx := range b.Index {
			dst[idx] += a * mk[idx]
		}
	}
}

// NollEquivalent sets dst[i] = Σ_k ToNoll(i,k)·native[k]: the Noll Zernike
// coefficients (j = i+2, radians) of the wavefront with native coefficients
// native. Both have length Count; dst must not alias native. It panics on
// wrong lengths and does not allocate.
func (b *Basis) NollEquivalent(dst, native []float64) {
	if len(dst) != b.Count || len(native) != b.Count {
		panic(fmt.Sprintf("modes: NollEquivalent lengths %d, %d, want %d", len(dst), len(native), b.Count))
	}
	if b.Kind == KindZernike {
		copy(dst, native)
		return
	}
	for i := range dst {
		var s float64
		for k, a := range native {
			s += b.ToNoll.At(i, k) * a
		}
		dst[i] = s
	}
}

// Project sets dst (length Count) to the weighted least-squares coefficients
// of phase (length N*N, radians): it minimises Σ_x w(x)·(phase(x) −
// Σ_k dst[k]·Modes[k](x))² over the pixels with w(x) > 0. It assumes no
// orthogonality of the modes. A nil weight means w = 1 on Support (ρ ≤ 1,
// and ρ ≥ Obscuration); its solver is built once on first use and cached (safe for
// concurrent use). A non-nil weight builds a fresh solver on every call; use
// NewProjector for repeated projections with one mask.
//
// Project panics on wrong lengths. With a nil weight it does not allocate
// after the first call.
func (b *Basis) Project(dst, phase, weight []float64) {
	if weight == nil {
		b.once.Do(func() { b.def = b.newProjector(nil) })
		b.def.Project(dst, phase)
		return
	}
	p, err := b.NewProjector(weight)
	if err != nil {
		panic(err)
	}
	p.Project(dst, phase)
}

// Projector solves the weighted least-squares projection of phases onto a
// Basis for one fixed weight mask (normal equations, Cholesky factor
// precomputed). It is read-only after construction and safe for concurrent use.
type Projector struct {
	b   *Basis
	idx []int     // pixels with weight > 0 and some mode non-zero
	w   []float64 // weights at idx
	l   []float64 // Count×Count lower Cholesky factor of the Gram matrix, row-major
	// Ridge is the Tikhonov term added to the Gram diagonal when it was not
	// numerically positive definite (too few weighted pixels for the modes);
	// 0 normally.
	Ridge float64
}

// NewProjector returns a projector for the given weight mask (length N*N,
// weights ≥ 0; nil means 1 on Support). If the Gram matrix Σ_x w ψ_k ψ_l is not
// numerically positive definite, a small ridge (relative 1e-10 of its mean
// diagonal, raised by ×100 until the factorisation succeeds) is added and
// recorded in Ridge. It returns an error if weight has the wrong length or
// holds a negative or non-finite value.
func (b *Basis) NewProjector(weight []float64) (*Projector, error) {
	if weight != nil {
		if len(weight) != b.N*b.N {
			return nil, fmt.Errorf("modes: weight length %d, want %d", len(weight), b.N*b.N)
		}
		for i, w := range weight {
			if !(w >= 0) || math.IsInf(w, 0) {
				return nil, fmt.Errorf("modes: weight[%d] = %g is not a finite non-negative number", i, w)
			}
		}
	}
	return b.newProjector(weight), nil
}

func (b *Basis) newProjector(weight []float64) *Projector {
	p := &Projector{b: b}
	pix := b.Index // modes vanish outside ρ ≤ 1
	if weight == nil && b.Support != nil {
		pix = b.Support
	}
	for _, idx := range pix {
		w := 1.0
		if weight != nil {
			w = weight[idx]
		}
		if w > 0 {
			p.idx = append(p.idx, idx)
			p.w = append(p.w, w)
		}
	}
	nc := b.Count
	// Gram matrix G = Aᵀ A with A(x,k) = sqrt(w_x) ψ_k(x).
	a := mat.NewDense(max(len(p.idx), 1), nc, nil)
	for r, idx := range p.idx {
		sw := math.Sqrt(p.w[r])
		for k := 0; k < nc; k++ {
			a.Set(r, k, sw*b.Modes[k][idx])
		}
	}
	g := mat.NewSymDense(nc, nil)
	g.SymOuterK(1, a.T())
	var trace float64
	for k := 0; k < nc; k++ {
		trace += g.At(k, k)
	}
	if trace == 0 {
		trace = 1
	}
	var ch mat.Cholesky
	ridge := 0.0
	for !ch.Factorize(g) {
		next := 1e-10 * trace / float64(nc)
		if ridge > 0 {
			next = ridge * 100
		}
		for k := 0; k < nc; k++ {
			g.SetSym(k, k, g.At(k, k)-ridge+next)
		}
		ridge = next
	}
	p.Ridge = ridge
	var l mat.TriDense
	ch.LTo(&l)
	p.l = make([]float64, nc*nc)
	for i := 0; i < nc; i++ {
		for k := 0; k <= i; k++ {
			p.l[i*nc+k] = l.At(i, k)
		}
	}
	return p
}

// Project sets dst (length Count) to the weighted least-squares coefficients
// of phase (length N*N) for the projector's mask; see Basis.Project. It panics
// on wrong lengths and does not allocate.
func (p *Projector) Project(dst, phase []float64) {
	b := p.b
	nc := b.Count
	if len(dst) != nc {
		panic(fmt.Sprintf("modes: Project dst length %d, want %d", len(dst), nc))
	}
	if len(phase) != b.N*b.N {
		panic(fmt.Sprintf("modes: Project phase length %d, want %d", len(phase), b.N*b.N))
	}
	// Right-hand side r_k = Σ_x w ψ_k φ.
	for k := 0; k < nc; k++ {
		mk := b.Modes[k]
		var s float64
		for r, idx := range p.idx {
			s += p.w[r] * mk[idx] * phase[idx]
		}
		dst[k] = s
	}
	// Solve L y = r, then Lᵀ x = y, in place.
	l := p.l
	for i := 0; i < nc; i++ {
		s := dst[i]
		for k := 0; k < i; k++ {
			s -= l[i*nc+k] * dst[k]
		}
		dst[i] = s / l[i*nc+i]
	}
	for i := nc - 1; i >= 0; i-- {
		s := dst[i]
		for k := i + 1; k < nc; k++ {
			s -= l[k*nc+i] * dst[k]
		}
		dst[i] = s / l[i*nc+i]
	}
}
