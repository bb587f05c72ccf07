package modes

import (
	"fmt"
	"math"
	"sync"

	"gonum.org/v1/gonum/integrate/quad"
	"gonum.org/v1/gonum/mat"
)

// Quadrature of the phase covariance over an annular pupil.
//
// Coordinates are in units of the pupil radius (ρ ≤ 1, the hole ρ < ε), the
// inner product is the area mean ⟨f, g⟩_A = (1/|A|)∫_A f g d²x with
// |A| = π(1 − ε²), and the Zernikes Z_2..Z_{count+1} are taken with their
// annulus mean removed (Z̃_j = Z_j − ⟨Z_j⟩_A; only m = 0 terms change).
// The piston-removed phase covariance (Noll 1976; Wang & Markey 1978)
//
//	C(x,y) = −½[D(x−y) − ⟨D(x−·)⟩_A − ⟨D(·−y)⟩_A + ⟨⟨D⟩⟩_A]
//
// then gives C_ij = ⟨Z̃_i, C Z̃_j⟩_A = −½⟨⟨Z̃_i(x) D(x−y) Z̃_j(y)⟩⟩_A: the three
// mean terms integrate to zero against zero-mean functions. With
// Z̃ = N R̃(ρ)·{cos mθ, sin mθ, 1} and D depending on |x − y| only, the two
// angles reduce to one,
//
//	C_ij = −½ a_m N_i N_j/|A|² ∫∫ ρ1 ρ2 R̃_i(ρ1) R̃_j(ρ2) K_m(ρ1, ρ2) dρ1 dρ2,
//	K_m(ρ1, ρ2) = ∫_0^{2π} cos(mφ) D(√(ρ1² + ρ2² − 2ρ1ρ2 cos φ)) dφ,
//
// a_m = π for m ≠ 0 (cos·cos and sin·sin alike; cos·sin vanishes), 2π for
// m = 0; likewise G_ij = a_m N_i N_j/|A| ∫ ρ R̃_i R̃_j dρ. The radial integrals
// use Gauss–Legendre nodes on [ε, 1] (exact for G), the angle the
// trapezoidal rule on [0, π] (the integrand is even and 2π-periodic; its only
// non-smooth point is φ = 0 on the diagonal ρ1 = ρ2, where D ∝ |φ|^(5/3)).

// structFn returns the phase structure function at separation d (units of
// the pupil radius) in (D/r0)^(5/3) rad².
type structFn func(d float64) float64

// structureFor returns D for an outer scale l0 = L0/D (+Inf: Kolmogorov):
// 6.88 (d/2)^(5/3) (Fried 1965; separation d·D/2 in metres), or the von Kármán
// form of PhaseStructure with r/L0 = d/(2 l0), interpolated from a table
// (vkTable) for speed.
func structureFor(l0 float64) structFn {
	if math.IsInf(l0, 1) {
		return func(d float64) float64 { return kolmogorovD * math.Pow(d/2, 5.0/3) }
	}
	amp := vkTwoSigma2 * math.Pow(l0, 5.0/3)
	return newVKTable(func(d float64) float64 { return amp * vkShape(math.Pi*d/l0) }, 2, 1024).eval
}

// vkTable interpolates a von Kármán structure function (units of the pupil
// radius) on [0, dmax] in the variable u = d^(1/3): by the series of vkShape,
// D = u⁵·g(u) with g = Σ a_k u^(6k) − Σ b_k u^(6k−5) analytic in u and
// g(0) = 6.88·2^(−5/3) (the Kolmogorov limit), so four-point Lagrange
// interpolation of g on a uniform u grid converges as h⁴ with a uniform
// relative error (TestVKTable). Beyond dmax it extrapolates.
type vkTable struct {
	h float64   // u step
	g []float64 // g[i] = D(u³)/u⁵ at u = i·h, i = 0..n+2
}

func newVKTable(fn func(d float64) float64, dmax float64, n int) *vkTable {
	t := &vkTable{h: math.Cbrt(dmax) / float64(n), g: make([]float64, n+3)}
	t.g[0] = kolmogorovD * math.Pow(2, -5.0/3)
	for i := 1; i < len(t.g); i++ {
		u := float64(i) * t.h
		u2 := u * u
		t.g[i] = fn(u*u2) / (u2 * u2 * u)
	}
	return t
}

func (t *vkTable) eval(d float64) float64 {
	u := math.Cbrt(d)
	x := u / t.h
	i := int(x) - 1 // stencil i..i+3 around [i+1, i+2]
	i = max(0, min(i, len(t.g)-4))
	s := x - float64(i) // position in stencil units, nodes at 0, 1, 2, 3
	g := t.g[i : i+4]
	s0, s1, s2, s3 := s, s-1, s-2, s-3
	v := -g[0]*s1*s2*s3/6 + g[1]*s0*s2*s3/2 - g[2]*s0*s1*s3/2 + g[3]*s0*s1*s2/6
	u2 := u * u
	return u2 * u2 * u * v
}

// pupilCov holds the quadrature results for one (count, ε, L0/D). Read-only
// once built.
type pupilCov struct {
	g, c  *mat.SymDense // Gram and covariance of Z̃_2..Z̃_{count+1} over the annulus
	mu    []float64     // ⟨Z_{i+2}⟩_A (0 for m ≠ 0)
	total float64       // piston-removed phase variance over the annulus, ½⟨⟨D⟩⟩_A
	zcov  *mat.SymDense // G⁻¹CG⁻¹: covariance of least-squares Zernike coefficients
	zvar  []float64     // its diagonal
	v     *mat.Dense    // generalised KL eigenvectors (columns), VᵀGV = I
	vals  []float64     // KL eigenvalues, decreasing
}

// quadSizes returns the radial node count and the number of angular
// intervals on [0, π] for Zernikes up to radial order nmax and |m| ≤ mmax
// (chosen by the convergence test TestQuadratureConverged).
func quadSizes(nmax, mmax int) (nr, nphi int) {
	return 32 + 2*nmax, 128 + 8*mmax
}

// quadSizesFor returns quadSizes for the Zernikes Noll j = 2…count+1: their
// highest radial order and highest |azimuthal frequency|.
func quadSizesFor(count int) (nr, nphi int) {
	nmax, _ := NollToNM(count + 1)
	mmax := 0
	for j := 2; j <= count+1; j++ {
		_, m := NollToNM(j)
		mmax = max(mmax, abs(m))
	}
	return quadSizes(nmax, mmax)
}

// quadCov computes G, C, the annulus means and the total variance for the
// Zernikes j = 2..count+1 over the annulus ε ≤ ρ ≤ 1 with structure function sf.
func quadCov(count int, eps float64, sf structFn, nr, nphi int) *pupilCov {
	mmax := 0
	for j := 2; j <= count+1; j++ {
		_, m := NollToNM(j)
		mmax = max(mmax, abs(m))
	}
	x := make([]float64, nr)
	w := make([]float64, nr)
	quad.Legendre{}.FixedLocations(x, w, eps, 1)
	km := angularKernels(x, mmax, nphi, sf)
	area := math.Pi * (1 - eps*eps)

	pc := &pupilCov{}
	f, y, ms := radialProfiles(count, x, w, area, &pc.mu)
	pc.g = mat.NewSymDense(count, nil)
	pc.c = mat.NewSymDense(count, nil)
	t := make([]float64, nr)
	for j := 0; j < count; j++ {
		k := km[abs(ms[j])]
		for a := range t { // t = K_m y_j
			var s float64
			row := k[a*nr : (a+1)*nr]
			for b, v := range y[j] {
				s += row[b] * v
			}
			t[a] = s
		}
		ang := math.Pi
		if ms[j] == 0 {
			ang = 2 * math.Pi
		}
		for i := 0; i <= j; i++ {
			if ms[i] != ms[j] {
				continue
			}
			var sg, sc float64
			for a := range t {
				sg += y[i][a] * f[j][a]
				sc += y[i][a] * t[a]
			}
			pc.g.SetSym(i, j, ang*sg/area)
			pc.c.SetSym(i, j, -0.5*ang*sc/(area*area))
		}
	}
	pc.total = totalVarianceQuad(x, w, km[0], area)
	return pc
}

// radialProfiles returns, at the radial nodes x (weights w), the profiles
// f_i = N_i R_i − μ_i of the Zernikes j = i+2 with their annulus means μ_i
// (stored in *mu; m = 0 only), y_i = w ρ f_i, and the signed m of each.
func radialProfiles(count int, x, w []float64, area float64, mu *[]float64) (f, y [][]float64, ms []int) {
	nr := len(x)
	*mu = make([]float64, count)
	f = make([][]float64, count)
	y = make([][]float64, count)
	ms = make([]int, count)
	for i := range f {
		n, m := NollToNM(i + 2)
		ms[i] = m
		norm := math.Sqrt(2 * float64(n+1))
		if m == 0 {
			norm = math.Sqrt(float64(n + 1))
		}
		f[i], y[i] = make([]float64, nr), make([]float64, nr)
		var mean float64
		for a, r := range x {
			f[i][a] = norm * Radial(n, m, r)
			mean += w[a] * r * f[i][a]
		}
		if m == 0 {
			(*mu)[i] = 2 * math.Pi * mean / area
			for a := range f[i] {
				f[i][a] -= (*mu)[i]
			}
		}
		for a, r := range x {
			y[i][a] = w[a] * r * f[i][a]
		}
	}
	return f, y, ms
}

// totalVarianceQuad returns ½⟨⟨D⟩⟩_A = (π/|A|²) ∫∫ ρ1 ρ2 K_0 dρ1 dρ2, the
// piston-removed phase variance averaged over the annulus (Noll 1976 Δ1 for
// the clear aperture).
func totalVarianceQuad(x, w, k0 []float64, area float64) float64 {
	nr := len(x)
	var s float64
	for a := 0; a < nr; a++ {
		for b := 0; b < nr; b++ {
			s += w[a] * x[a] * w[b] * x[b] * k0[a*nr+b]
		}
	}
	return math.Pi * s / (area * area)
}

// angularKernels returns K_m(x_a, x_b) for m = 0..mmax as row-major nr×nr
// matrices, by the trapezoidal rule with nphi intervals on [0, π] (doubled
// for [0, 2π] by the evenness of the integrand).
func angularKernels(x []float64, mmax, nphi int, sf structFn) [][]float64 {
	nr := len(x)
	h := math.Pi / float64(nphi)
	cs := make([][]float64, mmax+1) // cs[m][p] = 2·trapezoid weight·cos(mφ_p)
	for m := range cs {
		cs[m] = make([]float64, nphi+1)
		for p := range cs[m] {
			wt := 2 * h
			if p == 0 || p == nphi {
				wt = h
			}
			cs[m][p] = wt * math.Cos(float64(m)*float64(p)*h)
		}
	}
	cosPhi := make([]float64, nphi+1)
	for p := range cosPhi {
		cosPhi[p] = math.Cos(float64(p) * h)
	}
	km := make([][]float64, mmax+1)
	for m := range km {
		km[m] = make([]float64, nr*nr)
	}
	d := make([]float64, nphi+1)
	for a := 0; a < nr; a++ {
		for b := a; b < nr; b++ {
			s0 := x[a]*x[a] + x[b]*x[b]
			p2 := 2 * x[a] * x[b]
			for p, c := range cosPhi {
				d[p] = sf(math.Sqrt(max(s0-p2*c, 0)))
			}
			for m := range km {
				var s float64
				for p, c := range cs[m] {
					s += c * d[p]
				}
				km[m][a*nr+b] = s
				km[m][b*nr+a] = s
			}
		}
	}
	return km
}

// finish computes the Zernike coefficient variances diag(G⁻¹CG⁻¹) and the
// generalised KL decomposition of pc.
func (pc *pupilCov) finish() error {
	count := pc.g.SymmetricDim()
	var ch mat.Cholesky
	if !ch.Factorize(pc.g) || ch.Cond() > maxGramCond {
		return fmt.Errorf("modes: the Gram matrix of %d Zernike modes over the annulus is singular or ill-conditioned (condition number above %g); use fewer modes or a smaller obscuration", count, maxGramCond)
	}
	var gc, gcg mat.Dense
	if err := ch.SolveTo(&gc, pc.c); err != nil { // G⁻¹C
		return fmt.Errorf("modes: annulus Gram solve: %w", err)
	}
	if err := ch.SolveTo(&gcg, gc.T()); err != nil { // G⁻¹(G⁻¹C)ᵀ = G⁻¹CG⁻¹
		return fmt.Errorf("modes: annulus Gram solve: %w", err)
	}
	pc.zvar = make([]float64, count)
	pc.zcov = mat.NewSymDense(count, nil)
	for i := range pc.zvar {
		pc.zvar[i] = gcg.At(i, i)
		for j := i; j < count; j++ {
			pc.zcov.SetSym(i, j, 0.5*(gcg.At(i, j)+gcg.At(j, i)))
		}
	}
	v, vals, err := klVectors(pc.c, pc.g)
	if err != nil {
		return err
	}
	pc.v, pc.vals = v, vals
	return nil
}

// maxGramCond is the largest condition number of the annulus Gram matrix
// accepted: beyond it the Zernikes are numerically dependent over the
// annulus and the generalised eigenvectors lose most of their digits.
const maxGramCond = 1e10

type covKey struct {
	count   int
	eps, l0 float64
}

// maxCovCache bounds the number of cached quadratures (each a few count²
// floats); the cache is emptied when it is full.
const maxCovCache = 64

var (
	covMu    sync.Mutex
	covCache = map[covKey]*pupilCov{}
)

// pupilCovFor returns the (cached) quadrature for count modes over an annulus
// of obscuration eps with outer scale l0 = L0/D (+Inf: Kolmogorov). Safe for
// concurrent use; two goroutines missing the cache at once both compute the
// (deterministic) result.
func pupilCovFor(count int, eps, l0 float64) (*pupilCov, error) {
	key := covKey{count, eps, l0}
	covMu.Lock()
	pc := covCache[key]
	covMu.Unlock()
	if pc != nil {
		return pc, nil
	}
	nr, nphi := quadSizesFor(count)
	pc = quadCov(count, eps, structureFor(l0), nr, nphi)
	if err := pc.finish(); err != nil {
		return nil, err
	}
	covMu.Lock()
	if len(covCache) >= maxCovCache {
		clear(covCache)
	}
	covCache[key] = pc
	covMu.Unlock()
	return pc, nil
}
