// Package modes provides wavefront bases on a sampled circular pupil:
// Zernike polynomials in Noll's ordering and normalisation (Noll 1976,
// JOSA 66, 207) and Karhunen–Loève (KL) modes for Kolmogorov turbulence, the
// eigenvectors of Noll's Zernike covariance matrix (Noll 1976 eq. 25; Wang &
// Markey 1978) — New. NewFor builds the same bases for a centrally obscured
// pupil and a von Kármán outer scale, from a quadrature of the phase
// structure function (PhaseStructure) over the annulus, with KL modes from
// the generalised eigenproblem C v = λ G v in the span of the Zernikes.
//
// Phases and coefficients are in radians. Kolmogorov variances are in units of
// (D/r0)^(5/3) rad², D the aperture diameter and r0 the Fried parameter at the
// wavelength of interest.
//
// Equation numbers of Noll 1976 other than eq. 25 (the covariance) and
// Table IV (the residuals) are quoted from memory.
package modes

import (
	"fmt"
	"math"
)

// NollToNM returns the radial order n and the signed azimuthal frequency m of
// the Noll-ordered Zernike polynomial Z_j (Noll 1976, Table I). For m != 0 the
// sign follows Noll's rule: even j carries cos(|m|θ) and is returned with
// m > 0, odd j carries sin(|m|θ) and is returned with m < 0.
//
// NollToNM panics if j < 1.
func NollToNM(j int) (n, m int) {
	if j < 1 {
		panic(fmt.Sprintf("modes: Noll index %d < 1", j))
	}
	// Walk the radial orders: order n holds n+1 polynomials.
	r := j - 1
	for r > n {
		n++
		r -= n
	}
	// Within order n, |m| takes the values n%2, n%2+2, ... in pairs (one
	// value for m = 0); r is the position within the order.
	am := n%2 + 2*((r+(n+1)%2)/2)
	if j%2 == 1 {
		return n, -am
	}
	return n, am
}

// nmTable is the largest radial order whose radial coefficients are tabulated
// at start-up (factorial sum, j ≤ 231). The sum cancels at high order (error
// ~3e-10 at n = 20 near ρ = 1, O(1) by n = 60), so higher orders use the
// Jacobi recurrence.
const nmTable = 20

// radialCoef[n][|m|] holds the coefficients d_k of R_n^|m|(ρ) = ρ^|m| Σ_k d_k (ρ²)^k,
// k = 0..(n-|m|)/2, from the factorial sum (Noll 1976 eq. 2)
//
//	R_n^m(ρ) = Σ_{s=0}^{(n-m)/2} (-1)^s (n-s)! / (s! ((n+m)/2-s)! ((n-m)/2-s)!) ρ^(n-2s).
var radialCoef [][][]float64

func init() {
	var fact [2*nmTable + 2]float64
	fact[0] = 1
	for i := 1; i < len(fact); i++ {
		fact[i] = fact[i-1] * float64(i)
	}
	radialCoef = make([][][]float64, nmTable+1)
	for n := 0; n <= nmTable; n++ {
		radialCoef[n] = make([][]float64, n+1)
		for m := n % 2; m <= n; m += 2 {
			h := (n - m) / 2
			d := make([]float64, h+1)
			for s := 0; s <= h; s++ {
				c := fact[n-s] / (fact[s] * fact[(n+m)/2-s] * fact[h-s])
				if s%2 == 1 {
					c = -c
				}
				// ρ^(n-2s) = ρ^m (ρ²)^(h-s)
				d[h-s] = c
			}
			radialCoef[n][m] = d
		}
	}
}

// Radial returns the Zernike radial polynomial R_n^|m|(ρ) (Noll 1976 eq. 2),
// normalised so that R_n^m(1) = 1. It returns 0 when n-|m| is odd or |m| > n.
// Radial panics if n < 0.
func Radial(n, m int, rho float64) float64 {
	if n < 0 {
		panic(fmt.Sprintf("modes: radial order %d < 0", n))
	}
	if m < 0 {
		m = -m
	}
	if m > n || (n-m)%2 != 0 {
		return 0
	}
	if n > nmTable {
		return radialJacobi(n, m, rho)
	}
	pm := 1.0
	for i := 0; i < m; i++ {
		pm *= rho
	}
	r2 := rho * rho
	{
		d := radialCoef[n][m]
		p := d[len(d)-1]
		for k := len(d) - 2; k >= 0; k-- {
			p = p*r2 + d[k]
		}
		return pm * p
	}
}

// radialJacobi evaluates R_n^m (n ≥ m ≥ 0, n−m even) by recurrence:
// R_n^m(ρ) = (−1)^k ρ^m P_k^(m,0)(1−2ρ²), k = (n−m)/2, with the three-term
// recurrence of the Jacobi polynomials (Abramowitz & Stegun 22.7.1 with β = 0),
// which is stable where the factorial sum is not.
func radialJacobi(n, m int, rho float64) float64 {
	pm := 1.0
	for i := 0; i < m; i++ {
		pm *= rho
	}
	k := (n - m) / 2
	x := 1 - 2*rho*rho
	a := float64(m)
	p0, p1 := 1.0, (a+1)+(a+2)*(x-1)/2
	if k == 0 {
		p1 = p0
	}
	for i := 2; i <= k; i++ {
		f := float64(i)
		c1 := 2 * f * (f + a) * (2*f + a - 2)
		c2 := (2*f + a - 1) * ((2*f+a)*(2*f+a-2)*x + a*a)
		c3 := 2 * (f + a - 1) * (f - 1) * (2*f + a)
		p0, p1 = p1, (c2*p1-c3*p0)/c1
	}
	if k%2 == 1 {
		p1 = -p1
	}
	return pm * p1
}

// Zernike returns the Noll-normalised Zernike polynomial Z_j at polar
// coordinates (ρ, θ) on the unit disc (Noll 1976 eq. 3):
//
//	Z_j = sqrt(n+1) R_n^0(ρ)                       m = 0
//	Z_j = sqrt(2(n+1)) R_n^|m|(ρ) cos(|m|θ)        m != 0, j even
//	Z_j = sqrt(2(n+1)) R_n^|m|(ρ) sin(|m|θ)        m != 0, j odd
//
// so that the mean of Z_j² over the unit disc is 1 and distinct Z_j are
// orthogonal (Noll 1976 eq. 4). θ is in radians, measured from the x axis
// towards y. Zernike returns 0 for ρ > 1 and panics if j < 1.
func Zernike(j int, rho, theta float64) float64 {
	n, m := NollToNM(j)
	if rho > 1 {
		return 0
	}
	r := Radial(n, m, rho)
	switch {
	case m == 0:
		return math.Sqrt(float64(n+1)) * r
	case m > 0:
		return math.Sqrt(2*float64(n+1)) * r * math.Cos(float64(m)*theta)
	default:
		return math.Sqrt(2*float64(n+1)) * r * math.Sin(float64(-m)*theta)
	}
}
