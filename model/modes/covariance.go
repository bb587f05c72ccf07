package modes

import (
	"fmt"
	"math"
	"sync"

	"gonum.org/v1/gonum/mat"
)

// kolmogorovConst is the prefactor of Noll 1976 eq. 25 in closed form as
// given by Roddier 1990 (Opt. Eng. 29, 1174), 2.2698. (Noll writes the
// prefactor as 0.0072·π^(8/3)·Γ(14/3) ≈ 2.242 with a rounded spectrum
// constant; 2.2698 reproduces his tilt value 0.4536 — checked in the tests.)
const kolmogorovConst = 2.2698

// NollCovariance returns the Kolmogorov covariance <a_i a_j> of the Noll
// Zernike coefficients a_i, a_j, in units of (D/r0)^(5/3) rad², from Noll 1976
// eq. 25 in the closed form of Wang & Markey 1978 and Roddier 1990:
//
//	<a_i a_j> = 2.2698 (−1)^((n+n'−2m)/2) sqrt((n+1)(n'+1)) Γ((n+n'−5/3)/2)
//	            / [Γ((n−n'+17/3)/2) Γ((n'−n+17/3)/2) Γ((n+n'+23/3)/2)]
//
// when m_i = m_j = m and either m = 0 or i and j have the same parity (both
// cosine or both sine terms); 0 otherwise. Piston (i or j == 1) is excluded
// and gives 0. Check values: tilt 0.4536, defocus 0.02346 (Noll 1976).
//
// NollCovariance panics if i < 1 or j < 1.
func NollCovariance(i, j int) float64 {
	if i > j {
		i, j = j, i // evaluate in one order so the result is exactly symmetric
	}
	ni, mi := NollToNM(i)
	nj, mj := NollToNM(j)
	if i == 1 || j == 1 {
		return 0
	}
	if mi != mj {
		// Different |m|, or same |m| with cos against sin (sign of m encodes parity).
		return 0
	}
	m := mi
	if m < 0 {
		m = -m
	}
	n, np := float64(ni), float64(nj)
	lg1, s1 := math.Lgamma((n + np - 5.0/3) / 2)
	lg2, s2 := math.Lgamma((n - np + 17.0/3) / 2)
	lg3, s3 := math.Lgamma((np - n + 17.0/3) / 2)
	lg4, s4 := math.Lgamma((n + np + 23.0/3) / 2)
	sign := float64(s1 * s2 * s3 * s4)
	if ((ni+nj-2*m)/2)%2 == 1 {
		sign = -sign
	}
	return sign * kolmogorovConst * math.Sqrt((n+1)*(np+1)) * math.Exp(lg1-lg2-lg3-lg4)
}

// NollResidual returns Δ_J, the Kolmogorov phase variance left after removing
// the first J Noll Zernike modes (piston included in the count), in units of
// (D/r0)^(5/3) rad²: the tail sum of the diagonal of Noll 1976 eq. 25,
//
//	Δ_J = Σ_{j>J} <a_j²>.
//
// With the prefactor 2.2698 this reproduces Noll 1976 Table IV (Δ1 = 1.0299,
// Δ2 = 0.582, Δ3 = 0.134, …, Δ21 = 0.0208) to within 2 % (all about 1.3 %
// high: Δ_1 = 1.0433), and approaches Noll's large-J law 0.2944·J^(−√3/2)
// (2.6 % high at J = 100). The tail beyond radial order 20000 is added from
// the n^(−8/3) asymptote of the per-order sums. NollResidual panics if J < 1.
func NollResidual(J int) float64 {
	if J < 1 {
		panic(fmt.Sprintf("modes: NollResidual(%d): J < 1", J))
	}
	totalOnce.Do(computeTotal)
	// Subtract the diagonal for j = 2..J order by order: all n+1 modes of
	// radial order n share the variance orderVariance(n).
	s := totalVariance
	j := 1 // modes removed so far
	for n := 1; j < J; n++ {
		k := min(n+1, J-j)
		s -= float64(k) * orderVariance(n)
		j += k
	}
	return s
}

// orderVariance is <a_j²> for any mode of radial order n ≥ 1 (Noll 1976
// eq. 25 with n = n', i = j).
func orderVariance(n int) float64 {
	f := float64(n)
	lg1, _ := math.Lgamma(f - 5.0/6)
	lg2, _ := math.Lgamma(17.0 / 6)
	lg4, _ := math.Lgamma(f + 23.0/6)
	return kolmogorovConst * (f + 1) * math.Exp(lg1-2*lg2-lg4)
}

const tailOrders = 20000

var (
	totalOnce     sync.Once
	totalVariance float64 // Σ_{j≥2} <a_j²>
)

func computeTotal() {
	// Sum from the smallest terms up for accuracy.
	var s float64
	for n := tailOrders; n >= 1; n-- {
		s += float64(n+1) * orderVariance(n)
	}
	// Per-order sums behave as K·n^(−8/3); the remainder beyond tailOrders
	// is ∫_{M+1/2}^∞ K n^(−8/3) dn = (3/5) K (M+1/2)^(−5/3).
	m := float64(tailOrders)
	k := float64(tailOrders+1) * orderVariance(tailOrders) * math.Pow(m, 8.0/3)
	s += 0.6 * k * math.Pow(m+0.5, -5.0/3)
	totalVariance = s
}

// NollCovarianceMatrix returns the count×count Kolmogorov covariance matrix of
// the Noll Zernike coefficients j = 2..count+1 (row/column i ↔ Noll j = i+2),
// in units of (D/r0)^(5/3) rad² (Noll 1976 eq. 25). It panics if count < 1.
func NollCovarianceMatrix(count int) *mat.SymDense {
	if count < 1 {
		panic(fmt.Sprintf("modes: covariance of %d modes", count))
	}
	c := mat.NewSymDense(count, nil)
	for i := 0; i < count; i++ {
		for k := i; k < count; k++ {
			c.SetSym(i, k, NollCovariance(i+2, k+2))
		}
	}
	return c
}
