package modes

import (
	"fmt"
	"math"
	"strconv"

	"gonum.org/v1/gonum/mat"
)

// Aperture describes the pupil and the turbulence a basis is built for. The
// zero value is a clear aperture in Kolmogorov turbulence, the case of New.
type Aperture struct {
	// Obscuration is the central obscuration ε, inner over outer diameter,
	// in [0, 0.9). Spider vanes are not modelled.
	Obscuration float64
	// OuterScale is the von Kármán outer scale relative to the aperture,
	// L0/D: at least MinOuterScale, or 0 or +Inf for Kolmogorov turbulence.
	OuterScale float64
}

// MinOuterScale is the smallest finite Aperture.OuterScale (L0/D) accepted.
// Below it the structure function saturates within a few quadrature nodes
// and the covariance would need a finer quadrature (at 0.25 it is converged
// to 1e-4; outer scales of the atmosphere are metres to tens of metres, many
// times the aperture).
const MinOuterScale = 0.25

// MaxObscuration bounds Aperture.Obscuration (exclusive): above it the
// annulus Gram matrix of all but the lowest Zernikes is too ill-conditioned.
const MaxObscuration = 0.9

// MaxApertureModes is the largest mode count NewFor accepts for an obscured
// or finite-L0 aperture (Zernike radial orders ≤ 30; the quadrature is
// checked for convergence up to there).
const MaxApertureModes = 495

// Validate returns an error unless a.Obscuration is in [0, MaxObscuration)
// and a.OuterScale is at least MinOuterScale, 0 or +Inf.
func (a Aperture) Validate() error {
	if !(a.Obscuration >= 0 && a.Obscuration < MaxObscuration) {
		return fmt.Errorf("modes: obscuration %g outside [0, %g) (inner/outer diameter)", a.Obscuration, MaxObscuration)
	}
	if !(a.OuterScale >= MinOuterScale || a.OuterScale == 0) {
		return fmt.Errorf("modes: outer scale L0/D = %g must be at least %g (0 or +Inf: Kolmogorov)", a.OuterScale, MinOuterScale)
	}
	return nil
}

// Kolmogorov reports whether a has no finite outer scale.
func (a Aperture) Kolmogorov() bool {
	return a.OuterScale == 0 || math.IsInf(a.OuterScale, 1)
}

// l0 returns L0/D with +Inf for Kolmogorov.
func (a Aperture) l0() float64 {
	if a.Kolmogorov() {
		return math.Inf(1)
	}
	return a.OuterScale
}

// NewFor returns a basis of count modes of the given kind on an n×n grid
// with a pupil of the given radius in pixels, for the aperture ap.
//
// For a clear aperture in Kolmogorov turbulence (ap.Obscuration = 0 and
// ap.Kolmogorov()) it returns exactly New's basis (Noll 1976 eq. 25), so that
// bases recorded with trained networks are reproduced bit for bit.
//
// Otherwise the turbulence statistics come from a quadrature of the phase
// structure function D (PhaseStructure with L0 = ap.OuterScale·D) over the
// annulus A: ε ≤ ρ ≤ 1 (ε = ap.Obscuration). With the Zernikes Z_2..Z_{count+1}
// taken with their annulus mean removed (Z̃_j), the piston-removed covariance
// C_ij = ⟨Z̃_i, C Z̃_j⟩_A and the Gram matrix G_ij = ⟨Z̃_i, Z̃_j⟩_A use the area
// mean ⟨f, g⟩_A = (1/|A|)∫_A f g, so a mode of unit norm has unit mean
// square over the annulus.
//
// KL: the solutions of C v = λ G v (Cholesky of G, then mat.EigenSym, block
// by block in signed m as New does, each v signed so that its
// largest-magnitude component is positive), ordered by decreasing λ. Mode k
// is Σ_i V(i,k)·Z̃_{i+2}; the modes are orthonormal over the annulus
// (VᵀGV = I) and their coefficients uncorrelated with Variance[k] = λ_k.
// ToNoll = V.
//
// Zernike: the modes and ToNoll are New's (raw Noll Z_j, which for ε > 0
// carry the annulus piston in their m = 0 terms; remove the annulus mean of
// a phase before projecting it); Variance is the diagonal of G⁻¹CG⁻¹, the
// variances of the least-squares Zernike coefficients over the annulus.
//
// Variances are in (D/r0)^(5/3) rad². For the clear aperture the quadrature
// gives tilt 0.4486 against eq. 25's 0.4536 (all variances 1.1 % lower;
// Noll 1976 Table IV implies 0.448). The quadrature is cached per (count, ε, L0/D).
//
// NewFor returns New's errors, an error from Aperture.Validate, and an error
// for count > MaxApertureModes (obscured or finite-L0 apertures only) or when
// the annulus Gram matrix is not positive definite.
func NewFor(kind Kind, count, n int, radius float64, ap Aperture) (*Basis, error) {
	if err := checkArgs(kind, count, n, radius); err != nil {
		return nil, err
	}
	if err := ap.Validate(); err != nil {
		return nil, err
	}
	if ap.Obscuration == 0 && ap.Kolmogorov() {
		return New(kind, count, n, radius)
	}
	return newQuadrature(kind, count, n, radius, ap)
}

// newQuadrature is NewFor without the clear-Kolmogorov shortcut; arguments
// must be valid apart from the count limit.
func newQuadrature(kind Kind, count, n int, radius float64, ap Aperture) (*Basis, error) {
	if count > MaxApertureModes {
		return nil, fmt.Errorf("modes: %d modes for an obscured or finite-L0 aperture exceed the limit %d", count, MaxApertureModes)
	}
	pc, err := pupilCovFor(count, ap.Obscuration, ap.l0())
	if err != nil {
		return nil, err
	}
	b := &Basis{Kind: kind, Count: count, N: n, Radius: radius,
		Obscuration: ap.Obscuration, OuterScale: ap.l0(), quad: true}
	zern := b.sample(ap.Obscuration)
	switch kind {
	case KindZernike:
		b.Modes = zern
		b.ToNoll = mat.NewDense(count, count, nil)
		for i := 0; i < count; i++ {
			b.ToNoll.Set(i, i, 1)
		}
		b.Variance = append([]float64(nil), pc.zvar...)
	case KindKL:
		b.ToNoll = mat.DenseCopyOf(pc.v)
		b.Variance = append([]float64(nil), pc.vals...)
		b.Modes = b.combine(zern, pc.v, pc.mu)
	}
	return b, nil
}

// Aperture returns the aperture the basis was built for (OuterScale +Inf for
// Kolmogorov).
func (b *Basis) Aperture() Aperture {
	return Aperture{Obscuration: b.Obscuration, OuterScale: b.OuterScale}
}

// Describe returns a one-line provenance of the basis, e.g.
// "kl 36 modes, obscuration 0.15, L0/D 60" or "zernike 20 modes,
// obscuration 0, Kolmogorov (Noll 1976 eq. 25)".
func (b *Basis) Describe() string {
	s := fmt.Sprintf("%s %d modes, obscuration %s, ", b.Kind, b.Count, strconv.FormatFloat(b.Obscuration, 'g', -1, 64))
	switch {
	case !b.quad:
		s += "Kolmogorov (Noll 1976 eq. 25)"
	case math.IsInf(b.OuterScale, 1) || b.OuterScale == 0:
		s += "Kolmogorov"
	default:
		s += "L0/D " + strconv.FormatFloat(b.OuterScale, 'g', -1, 64)
	}
	return s
}

// ZernikeCovariance returns the count×count covariance of the Noll Zernike
// coefficients j = 2..count+1 (row/column i ↔ j = i+2) of turbulent phase
// over the aperture ap, in (D/r0)^(5/3) rad²: for a clear aperture in
// Kolmogorov turbulence NollCovarianceMatrix(count) (Noll 1976 eq. 25, as
// New); otherwise G⁻¹CG⁻¹ from NewFor's annulus quadrature, the covariance of
// the least-squares Zernike coefficients over the annulus (its diagonal is
// the Variance of NewFor's Zernike basis). The result is a fresh copy. It
// returns an error for count < 1 and NewFor's aperture errors.
func ZernikeCovariance(count int, ap Aperture) (*mat.SymDense, error) {
	if count < 1 {
		return nil, fmt.Errorf("modes: mode count %d < 1", count)
	}
	if err := ap.Validate(); err != nil {
		return nil, err
	}
	if ap.Obscuration == 0 && ap.Kolmogorov() {
		return NollCovarianceMatrix(count), nil
	}
	if count > MaxApertureModes {
		return nil, fmt.Errorf("modes: %d modes for an obscured or finite-L0 aperture exceed the limit %d", count, MaxApertureModes)
	}
	pc, err := pupilCovFor(count, ap.Obscuration, ap.l0())
	if err != nil {
		return nil, err
	}
	out := mat.NewSymDense(count, nil)
	out.CopySym(pc.zcov)
	return out, nil
}
