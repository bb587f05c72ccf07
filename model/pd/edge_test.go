package pd

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/floats"

	"pdwave/model/modes"
	"pdwave/model/optics"
)

// TestExactEdgesGradient: the exact-edge objective's analytic gradient
// against central finite differences (step 1e-5, the object solve
// converged to 1e-9) at every parameter, channel offsets included;
// tolerance 1e-5 relative (common practice for central differences).
// A planted missing factor N² on the PSF gradient, or a dropped
// conjugation of Ô in it, fails it.
func TestExactEdgesGradient(t *testing.T) {
	s, data, truth := edgeTruthCase(t, true)
	if err := s.SetExactEdges(data); err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(2, 2))
	alpha := make([]float64, s.NumParams())
	for i := range alpha {
		alpha[i] = 0.8*truth[i%len(truth)] + 0.05*rng.NormFloat64()
	}
	s.edge.tol = 1e-9 // differences of converged solves
	g := make([]float64, s.NumParams())
	converged(t, s, g, alpha)
	h := 1e-5
	a := append([]float64(nil), alpha...)
	worst := 0.0
	for i := range a {
		a[i] = alpha[i] + h
		fp := converged(t, s, nil, a)
		a[i] = alpha[i] - h
		fm := converged(t, s, nil, a)
		a[i] = alpha[i]
		fd := (fp - fm) / (2 * h)
		rel := math.Abs(fd-g[i]) / math.Max(math.Abs(fd), 1e-3*math.Abs(s.ValueGrad(nil, alpha)))
		worst = math.Max(worst, rel)
	}
	t.Logf("largest relative difference %.3g over %d parameters", worst, len(a))
	if worst > 1e-5 {
		t.Errorf("gradient off by %.3g (relative)", worst)
	}
}

// converged evaluates s at alpha until its object solve has met the
// tolerance (each evaluation continues the warm-started solve).
func converged(t *testing.T, s *Objective, grad, alpha []float64) float64 {
	t.Helper()
	for range 50 {
		v := s.ValueGrad(grad, alpha)
		if _, res := s.ExactEdges(); res <= s.edge.tol {
			return v
		}
	}
	_, res := s.ExactEdges()
	t.Fatalf("object solve did not converge: residual %.3g", res)
	return 0
}

// benchData returns benchSolverWith's data: 2 channels of a sinusoidal
// pattern plus 1 % noise (seed fixed).
func benchData(s *Objective) [][][]float64 {
	n, frames, _, _ := s.Size()
	rng := rand.New(rand.NewPCG(1, 2))
	data := make([][][]float64, 2)
	for k := range data {
		data[k] = make([][]float64, frames)
		for j := range data[k] {
			img := make([]float64, n*n)
			for i := range img {
				y, x := i/n, i%n
				img[i] = 1 + 0.1*math.Sin(float64(x)*0.7+float64(y)*0.3+float64(j)) + 0.01*rng.NormFloat64()
			}
			data[k][j] = img
		}
	}
	return data
}

// BenchmarkExactValueGrad: one evaluation of the exact-edge objective and
// its gradient for 64×64, 16 frames, 2 channels, 36 modes, the
// coefficients moved a little each time (as between L-BFGS steps, so the
// warm-started object solve has work to do).
func BenchmarkExactValueGrad(b *testing.B) {
	s, alpha, grad := benchSolver(b)
	if err := s.SetExactEdges(benchData(s)); err != nil {
		b.Fatal(err)
	}
	s.ValueGrad(grad, alpha)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		alpha[i%len(alpha)] += 1e-3
		s.ValueGrad(grad, alpha)
	}
}

// edgeTruthCase returns an objective for 32 px, 3 frames × 2 channels and
// 10 Zernike modes, the data of an object larger than the patch imaged by
// a direct-sum linear convolution (no FFT, no wrap-around: every pixel
// sums the light of every object point within the PSF's N×N support),
// and the true coefficients. The object is smoothed noise on a level with
// a bright bar across the patch edge, so the window's taper matters.
func edgeTruthCase(t *testing.T, offsets bool) (*Objective, [][][]float64, []float64) {
	t.Helper()
	const n, frames, count = 32, 3, 10
	pr := makeProblem(t, n, frames, []float64{0, 1}, modes.KindZernike, count, 0.3, false, 5)
	rng := rand.New(rand.NewPCG(5, 9))
	const big = 2 * n // object on [−n/2, 3n/2)²
	obj := make([]float64, big*big)
	for i := range obj {
		obj[i] = 1 + 0.3*rng.Float64()
		if y, x := i/big, i%big; x > 3*n/2-4 && x < 3*n/2+2 && y > n/2 {
			obj[i] += 3
		}
	}
	im := optics.NewImager(pr.pupil)
	phase := make([]float64, n*n)
	psf := make([]float64, n*n)
	data := make([][][]float64, 2)
	for k := range data {
		data[k] = make([][]float64, frames)
		for j := range data[k] {
			pr.basis.Phase(phase, pr.truth[j*count:(j+1)*count])
			floats.Add(phase, pr.div[k])
			im.PSF(psf, phase)
			data[k][j] = directConvolve(psf, obj, n, big)
		}
	}
	s := NewObjective(pr.pupil, pr.basis, pr.div, frames, Settings{Gamma: 1e-10, Window: 0.25, TiltConstrain: true, FitChannelOffset: offsets})
	if err := s.SetData(data); err != nil {
		t.Fatal(err)
	}
	return s, data, pr.truth
}

// directConvolve returns the N×N image d(x) = Σ_r psf(r)·obj(x − r + N/2)
// over the PSF's offsets r ∈ [−N/2, N/2)² (psf origin-centred with
// wrap-around), obj big×big with the patch at offset N/2.
func directConvolve(psf, obj []float64, n, big int) []float64 {
	out := make([]float64, n*n)
	for ry := -n / 2; ry < n/2; ry++ {
		for rx := -n / 2; rx < n/2; rx++ {
			w := psf[((ry+n)%n)*n+(rx+n)%n]
			for y := 0; y < n; y++ {
				row := obj[(y-ry+n/2)*big:]
				for x := 0; x < n; x++ {
					out[y*n+x] += w * row[x-rx+n/2]
				}
			}
		}
	}
	return out
}

// TestExactEdgesAtTruth: on images of an object larger than the patch,
// formed by an independent direct-sum convolution, the exact-edge
// objective at the true wavefronts is far below the periodic metric there
// (whose excess is the window's model error) and far below its own value
// at a wrong wavefront. The remaining exact-edge value is the PSF light
// from beyond the M-grid margin and the ridge μ. Planting a one-pixel
// misplacement of the data on the M grid, or dropping the crop (the
// periodic model on the larger grid), fails it.
func TestExactEdgesAtTruth(t *testing.T) {
	s, data, truth := edgeTruthCase(t, false)
	periodic := s.ValueGrad(nil, truth)
	if err := s.SetExactEdges(data); err != nil {
		t.Fatal(err)
	}
	s.edge.tol = 1e-8
	exact := converged(t, s, nil, truth)
	wrong := append([]float64(nil), truth...)
	for i := range wrong {
		wrong[i] *= 0.7
	}
	off := converged(t, s, nil, wrong)
	t.Logf("at the truth: periodic %.4g, exact %.4g; exact at 0.7× the truth %.4g", periodic, exact, off)
	// Measured: periodic 1.82, exact 0.039, exact at 0.7× the truth 0.19.
	if !(exact < 0.05*periodic) {
		t.Errorf("exact-edge objective %.4g at the truth, want < 0.05 × the periodic %.4g", exact, periodic)
	}
	if !(exact < 0.4*off) {
		t.Errorf("exact-edge objective %.4g at the truth, want < 0.4 × its value %.4g at a wrong wavefront", exact, off)
	}
}
