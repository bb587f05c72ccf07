package modes

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/integrate/quad"
	"gonum.org/v1/gonum/mat"
)

// Noll 1976, Table I: (n, m) of Z_1..Z_22, m > 0 for cos (even j), m < 0 for sin (odd j).
var nollTableI = [][2]int{
	{0, 0}, {1, 1}, {1, -1}, {2, 0}, {2, -2}, {2, 2}, {3, -1}, {3, 1}, {3, -3}, {3, 3},
	{4, 0}, {4, 2}, {4, -2}, {4, 4}, {4, -4}, {5, 1}, {5, -1}, {5, 3}, {5, -3}, {5, 5},
	{5, -5}, {6, 0},
}

func TestNollToNMTableI(t *testing.T) {
	for i, want := range nollTableI {
		n, m := NollToNM(i + 1)
		if n != want[0] || m != want[1] {
			t.Errorf("NollToNM(%d) = (%d,%d), want (%d,%d) (Noll 1976 Table I)", i+1, n, m, want[0], want[1])
		}
	}
}

// Structural properties of Noll's ordering up to n = 30: every (n, m) with
// n−|m| even appears exactly once, orders are contiguous, m=0 terms carry no
// sign, and the parity rule holds (Noll 1976, Table I caption).
func TestNollToNMStructure(t *testing.T) {
	seen := map[[2]int]int{}
	prevN := 0
	jmax := 31 * 32 / 2 // all modes with n ≤ 30
	for j := 1; j <= jmax; j++ {
		n, m := NollToNM(j)
		if n < prevN {
			t.Fatalf("j=%d: order %d decreases from %d", j, n, prevN)
		}
		prevN = n
		am := m
		if am < 0 {
			am = -am
		}
		if am > n || (n-am)%2 != 0 {
			t.Fatalf("j=%d: invalid (n,m)=(%d,%d)", j, n, m)
		}
		if m != 0 && (j%2 == 0) != (m > 0) {
			t.Fatalf("j=%d: parity rule broken, m=%d", j, m)
		}
		if k, ok := seen[[2]int{n, m}]; ok {
			t.Fatalf("j=%d and j=%d both give (%d,%d)", k, j, n, m)
		}
		seen[[2]int{n, m}] = j
		if want := (n + 1) * (n + 2) / 2; j == want && n != prevN {
			t.Fatalf("order %d should end at j=%d", n, want)
		}
	}
	if len(seen) != jmax || prevN != 30 {
		t.Fatalf("got %d distinct modes up to order %d", len(seen), prevN)
	}
}

func TestNollToNMPanics(t *testing.T) {
	defer func() {
		if recover() == nil {
			t.Error("NollToNM(0) did not panic")
		}
	}()
	NollToNM(0)
}

// Explicit polynomials from Noll 1976, Table I.
func TestZernikeExplicit(t *testing.T) {
	s3, s6, s8, s10, s12 := math.Sqrt(3), math.Sqrt(6), math.Sqrt(8), math.Sqrt(10), math.Sqrt(12)
	want := map[int]func(r, a float64) float64{
		1:  func(r, a float64) float64 { return 1 },
		2:  func(r, a float64) float64 { return 2 * r * math.Cos(a) },
		3:  func(r, a float64) float64 { return 2 * r * math.Sin(a) },
		4:  func(r, a float64) float64 { return s3 * (2*r*r - 1) },
		5:  func(r, a float64) float64 { return s6 * r * r * math.Sin(2*a) },
		6:  func(r, a float64) float64 { return s6 * r * r * math.Cos(2*a) },
		7:  func(r, a float64) float64 { return s8 * (3*r*r*r - 2*r) * math.Sin(a) },
		8:  func(r, a float64) float64 { return s8 * (3*r*r*r - 2*r) * math.Cos(a) },
		10: func(r, a float64) float64 { return s8 * r * r * r * math.Cos(3*a) },
		11: func(r, a float64) float64 { return math.Sqrt(5) * (6*math.Pow(r, 4) - 6*r*r + 1) },
		12: func(r, a float64) float64 { return s10 * (4*math.Pow(r, 4) - 3*r*r) * math.Cos(2*a) },
		15: func(r, a float64) float64 { return s10 * math.Pow(r, 4) * math.Sin(4*a) },
		16: func(r, a float64) float64 { return s12 * (10*math.Pow(r, 5) - 12*math.Pow(r, 3) + 3*r) * math.Cos(a) },
		22: func(r, a float64) float64 {
			return math.Sqrt(7) * (20*math.Pow(r, 6) - 30*math.Pow(r, 4) + 12*r*r - 1)
		},
	}
	rng := rand.New(rand.NewPCG(1, 2))
	for j, f := range want {
		for i := 0; i < 50; i++ {
			r, a := rng.Float64(), 2*math.Pi*rng.Float64()
			if got, w := Zernike(j, r, a), f(r, a); math.Abs(got-w) > 1e-12 {
				t.Errorf("Z%d(%g,%g) = %g, want %g", j, r, a, got, w)
			}
		}
	}
	if Zernike(4, 1.0001, 0) != 0 {
		t.Error("Zernike must vanish outside the unit disc")
	}
}

// The tabulated and the log-gamma evaluation of the radial polynomial agree
// at the boundary order, and R_n^m(1) = 1 (Noll 1976 eq. 2).
func TestRadial(t *testing.T) {
	for n := 0; n <= 60; n++ {
		for m := n % 2; m <= n; m += 2 {
			if v := Radial(n, m, 1); math.Abs(v-1) > 1e-6 {
				t.Errorf("R_%d^%d(1) = %g, want 1", n, m, v)
			}
		}
	}
	if Radial(4, 1, 0.5) != 0 || Radial(2, 4, 0.5) != 0 {
		t.Error("Radial must vanish for n-|m| odd or |m|>n")
	}
}

// Noll 1976 eq. 4: (1/π)∫ Z_i Z_j ρ dρ dθ = δ_ij, checked by Gauss–Legendre
// quadrature in ρ (exact for these polynomial degrees) and the trapezoidal
// rule in θ (exact for trigonometric polynomials of this order), j ≤ 120.
func TestZernikeOrthonormalQuadrature(t *testing.T) {
	const jmax = 120
	nmax, _ := NollToNM(jmax)
	nr := nmax + 4
	xr := make([]float64, nr)
	wr := make([]float64, nr)
	quad.Legendre{}.FixedLocations(xr, wr, 0, 1)
	nt := 4*nmax + 8
	vals := make([][]float64, jmax)
	for j := 1; j <= jmax; j++ {
		v := make([]float64, 0, nr*nt)
		for _, r := range xr {
			for k := 0; k < nt; k++ {
				v = append(v, Zernike(j, r, 2*math.Pi*float64(k)/float64(nt)))
			}
		}
		vals[j-1] = v
	}
	worst := 0.0
	for i := 0; i < jmax; i++ {
		for j := i; j < jmax; j++ {
			var s float64
			for a := range xr {
				for k := 0; k < nt; k++ {
					p := a*nt + k
					s += wr[a] * xr[a] * vals[i][p] * vals[j][p]
				}
			}
			s *= 2 * math.Pi / float64(nt) / math.Pi
			want := 0.0
			if i == j {
				want = 1
			}
			worst = math.Max(worst, math.Abs(s-want))
		}
	}
	if worst > 1e-9 {
		t.Errorf("orthonormality error %g over j ≤ %d, want ≤ 1e-9", worst, jmax)
	}
}

func TestNollCovarianceValues(t *testing.T) {
	cases := []struct {
		i, j int
		want float64
		tol  float64
		src  string
	}{
		{2, 2, 0.4536, 2e-4, "Noll 1976 eq. 25 with 2.2698 (Roddier 1990), tilt"},
		{3, 3, 0.4536, 2e-4, "Noll 1976 eq. 25 with 2.2698 (Roddier 1990), tilt"},
		{4, 4, 0.02346, 2e-4, "Noll 1976 eq. 25 with 2.2698 (Roddier 1990), defocus"},
		{6, 6, 0.02346, 2e-4, "same radial order as defocus, same variance (eq. 25 depends on n only)"},
		// From memory: the tilt–coma correlation quoted with Noll's
		// constant is about −0.0141; eq. 25 with 2.2698 is 1.2 % larger in magnitude.
		{2, 8, -0.0143, 0.01, "Noll 1976 eq. 25, tilt–coma (from memory, ≈ −0.0141 with Noll's constant)"},
		{3, 7, -0.0143, 0.01, "Noll 1976 eq. 25, tilt–coma (sin pair)"},
	}
	for _, c := range cases {
		got := NollCovariance(c.i, c.j)
		if math.Abs(got-c.want) > c.tol*math.Abs(c.want) {
			t.Errorf("<a%d a%d> = %.6f, want %.6f ± %.2g rel (%s)", c.i, c.j, got, c.want, c.tol, c.src)
		}
	}
	// Selection rules of eq. 25: zero for different m, or for cos/sin pairs.
	zeros := [][2]int{{1, 1}, {1, 4}, {2, 3}, {2, 7}, {3, 8}, {4, 5}, {4, 6}, {5, 6}, {2, 4}, {11, 12}}
	for _, z := range zeros {
		if v := NollCovariance(z[0], z[1]); v != 0 {
			t.Errorf("<a%d a%d> = %g, want 0 (Noll 1976 eq. 25 selection rule)", z[0], z[1], v)
		}
	}
	// Sign (−1)^((n+n'−2m)/2): defocus–spherical (n=2, n'=4, m=0) is negative.
	if v := NollCovariance(4, 11); !(v < 0) {
		t.Errorf("<a4 a11> = %g, want negative (eq. 25 sign factor)", v)
	}
	for i := 2; i < 40; i++ {
		for j := 2; j < 40; j++ {
			if NollCovariance(i, j) != NollCovariance(j, i) {
				t.Fatalf("covariance not symmetric at (%d,%d)", i, j)
			}
		}
	}
}

// A covariance matrix must be positive definite.
func TestNollCovarianceMatrixPD(t *testing.T) {
	c := NollCovarianceMatrix(120)
	var es mat.EigenSym
	if !es.Factorize(c, false) {
		t.Fatal("eigen-decomposition failed")
	}
	for k, v := range es.Values(nil) {
		if !(v > 0) {
			t.Fatalf("eigenvalue %d = %g, want > 0", k, v)
		}
	}
}

func TestNollResidualTableIV(t *testing.T) {
	// Noll 1976, Table IV, units (D/r0)^(5/3) rad². Tolerance 3 %
	// (the tail sums of eq. 25 with Roddier's 1990 constant 2.2698 are about
	// 1.3 % high against Table IV; measured).
	table := []struct {
		J    int
		want float64
	}{
		{1, 1.0299}, {2, 0.582}, {3, 0.134}, {4, 0.111}, {5, 0.0880},
		{6, 0.0648}, {10, 0.0401}, {21, 0.0208},
	}
	for _, c := range table {
		got := NollResidual(c.J)
		if rel := math.Abs(got-c.want) / c.want; rel > 0.03 {
			t.Errorf("Δ%d = %.5f, want %.4f within 3 %% (Noll 1976 Table IV); off by %.1f %%", c.J, got, c.want, 100*rel)
		}
	}
	// Noll 1976 (large-J law, eq. 31 from memory): Δ_J ≈ 0.2944 J^(−√3/2). Checked at
	// J = 100 and 200 within 5 % (the law is asymptotic; measured 2.6 % and 4.4 % high).
	for _, J := range []int{100, 200} {
		want := 0.2944 * math.Pow(float64(J), -math.Sqrt(3)/2)
		got := NollResidual(J)
		if rel := math.Abs(got-want) / want; rel > 0.05 {
			t.Errorf("Δ%d = %.6f, large-J law %.6f, off by %.1f %% (> 5 %%)", J, got, want, 100*rel)
		}
	}
	// Consistency: Δ_{J−1} − Δ_J = <a_J²>.
	for J := 2; J < 60; J++ {
		if d := NollResidual(J-1) - NollResidual(J); math.Abs(d-NollCovariance(J, J)) > 1e-12 {
			t.Fatalf("Δ%d − Δ%d = %g, want <a%d²> = %g", J-1, J, d, J, NollCovariance(J, J))
		}
	}
	// Monotone and positive far out.
	if v := NollResidual(100000); !(v > 0 && v < NollResidual(1000)) {
		t.Errorf("Δ100000 = %g should be positive and below Δ1000", v)
	}
}

// The factorial-sum table (n ≤ nmTable) and the Jacobi recurrence used above
// it must agree where both are accurate.
func TestRadialTableMatchesRecurrence(t *testing.T) {
	for n := 10; n <= nmTable; n++ {
		for m := n % 2; m <= n; m += 2 {
			for _, r := range []float64{0, 0.1, 0.37, 0.5, 0.81, 0.99, 1} {
				tab := Radial(n, m, r)
				rec := radialJacobi(n, m, r)
				if math.Abs(tab-rec) > 1e-9 {
					t.Errorf("R_%d^%d(%g): table %g, recurrence %g", n, m, r, tab, rec)
				}
			}
		}
	}
}
