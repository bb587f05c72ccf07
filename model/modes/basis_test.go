package modes

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

func TestNewErrors(t *testing.T) {
	cases := []struct {
		kind   Kind
		count  int
		n      int
		radius float64
	}{
		{"pyramid", 10, 64, 16}, {KindKL, 0, 64, 16}, {KindZernike, 5, 0, 16},
		{KindZernike, 5, 64, 0}, {KindZernike, 5, 64, -3}, {KindZernike, 5, 64, 33},
		{KindZernike, 5, 64, math.NaN()}, {KindZernike, 5, 64, math.Inf(1)},
	}
	for _, c := range cases {
		if _, err := New(c.kind, c.count, c.n, c.radius); err == nil {
			t.Errorf("New(%q, %d, %d, %g) succeeded, want error", c.kind, c.count, c.n, c.radius)
		}
	}
	if _, err := ParseKind("kl"); err != nil {
		t.Error(err)
	}
	if _, err := ParseKind("KL "); err == nil {
		t.Error("ParseKind accepted a bad name")
	}
}

// Discrete orthonormality on a fine grid: the pixel mean over ρ ≤ 1 of
// Z_i Z_j approximates Noll 1976 eq. 4 (δ_ij). Radius 150 px; tolerance 1e-2
// (edge pixels make an O(1/R) error: measured 0.00996 at R = 100, 0.0057 at R = 150).
func TestZernikeDiscreteOrthonormality(t *testing.T) {
	const count = 35 // j = 2..36
	b, err := New(KindZernike, count, 302, 150)
	if err != nil {
		t.Fatal(err)
	}
	np := float64(len(b.Index))
	if rel := np/(math.Pi*150*150) - 1; math.Abs(rel) > 1e-3 {
		t.Errorf("disc holds %v pixels, π R² = %v", np, math.Pi*150*150)
	}
	worst := 0.0
	for i := 0; i < count; i++ {
		for j := i; j < count; j++ {
			var s float64
			for _, idx := range b.Index {
				s += b.Modes[i][idx] * b.Modes[j][idx]
			}
			s /= np
			want := 0.0
			if i == j {
				want = 1
			}
			worst = math.Max(worst, math.Abs(s-want))
		}
	}
	if worst > 1e-2 {
		t.Errorf("discrete orthonormality error %g, want ≤ 1e-2", worst)
	}
	t.Logf("discrete orthonormality error on R = 150 px: %.4g", worst)
}

func TestZernikeBasisSampling(t *testing.T) {
	b, err := New(KindZernike, 10, 32, 12)
	if err != nil {
		t.Fatal(err)
	}
	c := 16.0
	for y := 0; y < 32; y++ {
		for x := 0; x < 32; x++ {
			dx, dy := float64(x)-c, float64(y)-c
			rho := math.Hypot(dx, dy) / 12
			for k := 0; k < 10; k++ {
				want := Zernike(k+2, rho, math.Atan2(dy, dx))
				if got := b.Modes[k][y*32+x]; got != want {
					t.Fatalf("mode %d at (%d,%d) = %g, want %g", k, x, y, got, want)
				}
			}
		}
	}
	for k := 0; k < 10; k++ {
		if b.Variance[k] != NollCovariance(k+2, k+2) || b.ToNoll.At(k, k) != 1 {
			t.Fatalf("Zernike variance/ToNoll wrong at %d", k)
		}
	}
}

// KL modes diagonalise the Kolmogorov covariance (Wang & Markey 1978): UᵀCU =
// diag(Variance), U orthogonal, variances decreasing, and by Ky Fan's
// maximum principle the first k KL modes hold at least as much variance as
// any k Zernike modes, in particular the first k in Noll order.
func TestKLDiagonalisesCovariance(t *testing.T) {
	for _, count := range []int{20, 35, 65} {
		b, err := New(KindKL, count, 64, 30)
		if err != nil {
			t.Fatal(err)
		}
		c := NollCovarianceMatrix(count)
		var d, ut mat.Dense
		d.Mul(b.ToNoll.T(), c)
		d.Mul(&d, b.ToNoll)
		ut.Mul(b.ToNoll.T(), b.ToNoll)
		for i := 0; i < count; i++ {
			for k := 0; k < count; k++ {
				wantD, wantI := 0.0, 0.0
				if i == k {
					wantD, wantI = b.Variance[i], 1
				}
				if math.Abs(d.At(i, k)-wantD) > 1e-12 {
					t.Fatalf("count %d: (UᵀCU)(%d,%d) = %g, want %g", count, i, k, d.At(i, k), wantD)
				}
				if math.Abs(ut.At(i, k)-wantI) > 1e-12 {
					t.Fatalf("count %d: U not orthogonal at (%d,%d)", count, i, k)
				}
			}
		}
		var kl, zern float64
		for k := 0; k < count; k++ {
			if k > 0 && b.Variance[k] > b.Variance[k-1] {
				t.Fatalf("count %d: variances not decreasing at %d", count, k)
			}
			kl += b.Variance[k]
			zern += c.At(k, k)
			if kl < zern-1e-12 {
				t.Errorf("count %d: first %d KL modes hold %g < Zernike %g", count, k+1, kl, zern)
			}
		}
		if math.Abs(kl-zern) > 1e-12 {
			t.Errorf("count %d: trace not preserved: %g vs %g", count, kl, zern)
		}
		// Deterministic sign: largest-magnitude component positive.
		for k := 0; k < count; k++ {
			best, bi := -1.0, 0
			for i := 0; i < count; i++ {
				if a := math.Abs(b.ToNoll.At(i, k)); a > best+1e-12 {
					best, bi = a, i
				}
			}
			if b.ToNoll.At(bi, k) < 0 {
				t.Fatalf("count %d: KL mode %d has a negative dominant component", count, k)
			}
		}
	}
}

// The first KL modes are the tilts (largest variance, pure Z2/Z3); KL and
// Zernike variances differ only where modes of equal m and parity mix.
func TestKLLeadingModes(t *testing.T) {
	b, err := New(KindKL, 20, 32, 15)
	if err != nil {
		t.Fatal(err)
	}
	// Tilt mixes slightly with coma (n=3) and n=5; dominant component is Z2 or Z3.
	for k := 0; k < 2; k++ {
		if a := math.Max(b.ToNoll.At(0, k), b.ToNoll.At(1, k)); a < 0.99 {
			t.Errorf("KL mode %d: tilt component %g, want > 0.99", k, a)
		}
	}
	// The tilt KL variance exceeds the Zernike tilt variance 0.4536 (mixing with coma adds variance).
	if b.Variance[0] < NollCovariance(2, 2) {
		t.Errorf("KL tilt variance %g below Zernike tilt %g", b.Variance[0], NollCovariance(2, 2))
	}
	b2, _ := New(KindKL, 20, 32, 15)
	for k := range b.Modes {
		for i, v := range b.Modes[k] {
			if b2.Modes[k][i] != v {
				t.Fatal("KL basis not deterministic")
			}
		}
	}
}

// Phase and NollEquivalent agree: the KL phase equals the Zernike phase of
// the Noll-equivalent coefficients.
func TestNollEquivalent(t *testing.T) {
	kl, _ := New(KindKL, 27, 48, 20)
	z, _ := New(KindZernike, 27, 48, 20)
	rng := rand.New(rand.NewPCG(3, 4))
	native := make([]float64, 27)
	for i := range native {
		native[i] = rng.NormFloat64()
	}
	noll := make([]float64, 27)
	kl.NollEquivalent(noll, native)
	p1 := make([]float64, 48*48)
	p2 := make([]float64, 48*48)
	kl.Phase(p1, native)
	z.Phase(p2, noll)
	for i := range p1 {
		if math.Abs(p1[i]-p2[i]) > 1e-12 {
			t.Fatalf("pixel %d: KL phase %g, Zernike phase of Noll equivalent %g", i, p1[i], p2[i])
		}
	}
	back := make([]float64, 27)
	z.NollEquivalent(back, noll)
	for i := range back {
		if back[i] != noll[i] {
			t.Fatal("Zernike NollEquivalent is not the identity")
		}
	}
}

// Project inverts Phase: least squares recovers known coefficients exactly
// (to rounding) for the default mask and for a weighted annulus.
func TestProjectRecovers(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	for _, kind := range []Kind{KindZernike, KindKL} {
		b, err := New(kind, 36, 64, 16)
		if err != nil {
			t.Fatal(err)
		}
		coef := make([]float64, b.Count)
		for i := range coef {
			coef[i] = rng.NormFloat64() * math.Sqrt(b.Variance[i]*10)
		}
		phase := make([]float64, b.N*b.N)
		b.Phase(phase, coef)
		got := make([]float64, b.Count)
		b.Project(got, phase, nil)
		for i := range coef {
			if math.Abs(got[i]-coef[i]) > 1e-9 {
				t.Fatalf("%s default mask: coef %d = %g, want %g", kind, i, got[i], coef[i])
			}
		}
		// Annulus with smooth weights (central obscuration 0.3).
		w := make([]float64, b.N*b.N)
		for y := 0; y < b.N; y++ {
			for x := 0; x < b.N; x++ {
				r := math.Hypot(float64(x-32), float64(y-32)) / 16
				if r >= 0.3 && r <= 1 {
					w[y*b.N+x] = 0.5 + r
				}
			}
		}
		b.Project(got, phase, w)
		for i := range coef {
			if math.Abs(got[i]-coef[i]) > 1e-8 {
				t.Fatalf("%s annulus: coef %d = %g, want %g", kind, i, got[i], coef[i])
			}
		}
		// A phase outside the span: the residual is orthogonal to every mode.
		for i := range phase {
			phase[i] += 0.3 * rng.NormFloat64()
		}
		p, err := b.NewProjector(w)
		if err != nil {
			t.Fatal(err)
		}
		p.Project(got, phase)
		fit := make([]float64, b.N*b.N)
		b.Phase(fit, got)
		for k := 0; k < b.Count; k++ {
			var s, norm float64
			for i := range phase {
				s += w[i] * (phase[i] - fit[i]) * b.Modes[k][i]
				norm += w[i] * b.Modes[k][i] * b.Modes[k][i]
			}
			if math.Abs(s) > 1e-9*norm {
				t.Fatalf("%s: residual not orthogonal to mode %d (%g)", kind, k, s)
			}
		}
	}
}

func TestProjectorErrorsAndRidge(t *testing.T) {
	b, _ := New(KindZernike, 10, 32, 10)
	if _, err := b.NewProjector(make([]float64, 5)); err == nil {
		t.Error("wrong weight length accepted")
	}
	w := make([]float64, 32*32)
	w[3] = -1
	if _, err := b.NewProjector(w); err == nil {
		t.Error("negative weight accepted")
	}
	// No weighted pixel: the ridge keeps the solve finite and the answer is 0.
	p, err := b.NewProjector(make([]float64, 32*32))
	if err != nil {
		t.Fatal(err)
	}
	if p.Ridge == 0 {
		t.Error("empty mask should need a ridge")
	}
	dst := make([]float64, 10)
	p.Project(dst, make([]float64, 32*32))
	for _, v := range dst {
		if v != 0 {
			t.Fatal("empty mask should project to zero")
		}
	}
}

func TestPhaseProjectNoAllocs(t *testing.T) {
	b, _ := New(KindKL, 36, 64, 16)
	coef := make([]float64, 36)
	phase := make([]float64, 64*64)
	noll := make([]float64, 36)
	b.Project(coef, phase, nil) // build the cached solver
	if a := testing.AllocsPerRun(10, func() {
		b.Phase(phase, coef)
		b.Project(coef, phase, nil)
		b.NollEquivalent(noll, coef)
	}); a != 0 {
		t.Errorf("allocations per Phase+Project: %v", a)
	}
}

func BenchmarkProject36(b *testing.B) {
	bs, _ := New(KindKL, 36, 64, 16)
	coef := make([]float64, 36)
	phase := make([]float64, 64*64)
	bs.Project(coef, phase, nil)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		bs.Project(coef, phase, nil)
	}
}

// The block-wise decomposition gives the same spectrum as mat.EigenSym of
// the full covariance matrix (C is block diagonal in m and cos/sin).
func TestKLMatchesFullEigen(t *testing.T) {
	const count = 54
	b, err := New(KindKL, count, 32, 15)
	if err != nil {
		t.Fatal(err)
	}
	var es mat.EigenSym
	if !es.Factorize(NollCovarianceMatrix(count), false) {
		t.Fatal("factorisation failed")
	}
	vals := es.Values(nil) // ascending
	for k := 0; k < count; k++ {
		if want := vals[count-1-k]; math.Abs(b.Variance[k]-want) > 1e-12 {
			t.Errorf("KL variance %d = %g, full eigenvalue %g", k, b.Variance[k], want)
		}
	}
}

func BenchmarkNewKL36(b *testing.B) {
	for i := 0; i < b.N; i++ {
		if _, err := New(KindKL, 36, 64, 15.5); err != nil {
			b.Fatal(err)
		}
	}
}
