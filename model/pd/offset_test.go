package pd

import (
	"math"
	"math/cmplx"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/optimize"

	"pdwave/model/fft"
	"pdwave/model/modes"
	"pdwave/model/optics"
)

// signedFreq maps DFT index k on an n grid to the signed frequency.
func signedFreq(k, n int) float64 {
	if k >= (n+1)/2 {
		return float64(k - n)
	}
	return float64(k)
}

// shiftImage shifts img (n×n) by (dx, dy) pixels in the Fourier sense:
// multiplies its spectrum by exp(−2πi(u·dx + v·dy)/n) with signed
// frequencies (Fourier shift theorem; Bracewell, The Fourier Transform and
// its Applications). Independent of the pupil ramp under test.
func shiftImage(img []float64, n int, dx, dy float64) []float64 {
	plan := fft.NewPlan(n, n)
	z := make([]complex128, n*n)
	plan.ForwardReal(z, img)
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			ph := -2 * math.Pi * (signedFreq(x, n)*dx + signedFreq(y, n)*dy) / float64(n)
			z[y*n+x] *= cmplx.Rect(1, ph)
		}
	}
	out := make([]float64, n*n)
	plan.InverseReal(out, z)
	return out
}

// TestShiftPhaseMovesOTF: the ramp of ShiftPhase multiplies the OTF by
// exp(−2πi(u·dx + v·dy)/N) at every frequency inside the cut-off, for a
// sub-pixel shift and an aberrated pupil (Fourier shift theorem; Goodman,
// Introduction to Fourier Optics, the OTF as the pupil autocorrelation).
func TestShiftPhaseMovesOTF(t *testing.T) {
	const n = 32
	pup, err := optics.NewPupil(testTelescope(0.9), n)
	if err != nil {
		t.Fatal(err)
	}
	b, err := modes.New(modes.KindZernike, 10, n, pup.Radius)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(4, 4))
	coef := make([]float64, 10)
	for i := range coef {
		coef[i] = 0.4 * rng.NormFloat64()
	}
	phase := make([]float64, n*n)
	b.Phase(phase, coef)
	ramp := make([]float64, n*n)
	const dx, dy = 1.3, -0.55
	ShiftPhase(ramp, n, dx, dy)
	shifted := make([]float64, n*n)
	for i := range shifted {
		shifted[i] = phase[i] + ramp[i]
	}
	im := optics.NewImager(pup)
	s0 := make([]complex128, n*n)
	s1 := make([]complex128, n*n)
	im.OTF(s0, phase)
	im.OTF(s1, shifted)
	var emax float64
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			u, v := signedFreq(x, n), signedFreq(y, n)
			want := s0[y*n+x] * cmplx.Rect(1, -2*math.Pi*(u*dx+v*dy)/n)
			emax = math.Max(emax, cmplx.Abs(s1[y*n+x]-want))
		}
	}
	// S(0) = 1: the error is relative to the OTF's peak.
	if emax > 1e-12 {
		t.Errorf("max |S_shifted − S·exp(−2πi u·δ/N)| = %.3g, want ≤ 1e-12", emax)
	}
	t.Logf("shift theorem through the pupil ramp: max error %.2g", emax)
}

// TestShiftToTilt: the Noll Z2/Z3 coefficients of ShiftToTilt draw, through
// the Zernike basis (Z2 = 2ρcosθ, Z3 = 2ρ sinθ; Noll 1976), the same phase
// as ShiftPhase on the pupil, and TiltToShift inverts ShiftToTilt.
func TestShiftToTilt(t *testing.T) {
	const n = 48
	pup, err := optics.NewPupil(testTelescope(0.8), n)
	if err != nil {
		t.Fatal(err)
	}
	b, err := modes.New(modes.KindZernike, 3, n, pup.Radius)
	if err != nil {
		t.Fatal(err)
	}
	const dx, dy = 0.7, -0.4
	z2, z3 := ShiftToTilt(n, pup.Radius, dx, dy)
	zern := make([]float64, n*n)
	b.Phase(zern, []float64{z2, z3, 0})
	ramp := make([]float64, n*n)
	ShiftPhase(ramp, n, dx, dy)
	var emax float64
	for _, i := range pup.Index {
		emax = math.Max(emax, math.Abs(zern[i]-ramp[i]))
	}
	if emax > 1e-12 {
		t.Errorf("Zernike tilt from ShiftToTilt differs from the ramp by %.3g rad", emax)
	}
	bx, by := TiltToShift(n, pup.Radius, z2, z3)
	if math.Abs(bx-dx) > 1e-14 || math.Abs(by-dy) > 1e-14 {
		t.Errorf("TiltToShift(ShiftToTilt(%g, %g)) = %g, %g", dx, dy, bx, by)
	}
	t.Logf("(%g, %g) px ↔ Z2 = %.4f, Z3 = %.4f rad; max phase difference %.2g", dx, dy, z2, z3, emax)
}

// offsetProblem simulates the compact-object burst of makeProblem (noiseless,
// 64 px, 3 frames, focused + 1 wave defocus, 10 Zernike modes) with
// channel 1 shifted by (dx, dy) pixels in Fourier space, and returns it with
// a solver that fits the channel offset.
func offsetProblem(t *testing.T, dx, dy float64, seed uint64) (*problem, *Objective) {
	t.Helper()
	const n, frames, count = 64, 3, 10
	pr := makeProblem(t, n, frames, []float64{0, 1}, modes.KindZernike, count, 0.2, true, seed)
	for j := range pr.data[1] {
		pr.data[1][j] = shiftImage(pr.data[1][j], n, dx, dy)
	}
	s := NewObjective(pr.pupil, pr.basis, pr.div, frames, Settings{Gamma: 1e-10, Window: 1.0 / n, TiltConstrain: true, FitChannelOffset: true})
	if err := s.SetData(pr.data); err != nil {
		t.Fatal(err)
	}
	return pr, s
}

// fitOffset minimises the objective with gonum's L-BFGS from zero
// wavefronts and the given starting offset, and returns the fitted offset.
func fitOffset(t *testing.T, s *Objective, start [2]float64) (dx, dy float64, e float64) {
	t.Helper()
	x0 := make([]float64, s.NumParams())
	x0[len(x0)-2], x0[len(x0)-1] = start[0], start[1]
	prob := optimize.Problem{
		Func: func(x []float64) float64 { return s.ValueGrad(nil, x) },
		Grad: func(g, x []float64) { s.ValueGrad(g, x) },
	}
	set := &optimize.Settings{MajorIterations: 400, GradientThreshold: 1e-12}
	res, err := optimize.Minimize(prob, x0, set, &optimize.LBFGS{})
	if res == nil {
		t.Fatalf("minimise: %v", err)
	}
	dx, dy = s.ChannelOffset(res.X, 1)
	return dx, dy, res.F
}

// TestChannelOffsetRecovery: a known misregistration of channel 1 is
// recovered by the fit within 0.05 px, and a registered pair gives an
// offset below 0.05 px (tolerance from the task; the model is exact here,
// so the residual error is the optimiser's).
func TestChannelOffsetRecovery(t *testing.T) {
	cases := []struct {
		name          string
		trueX, trueY  float64
		startX, start float64
	}{
		{"registered", 0, 0, 0.3, 0.3},
		{"offset", 0.7, -0.4, 0, 0},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, s := offsetProblem(t, c.trueX, c.trueY, 17)
			dx, dy, e := fitOffset(t, s, [2]float64{c.startX, c.start})
			t.Logf("true offset (%g, %g) px, fitted (%.4f, %.4f) px, E = %.3g", c.trueX, c.trueY, dx, dy, e)
			if math.Hypot(dx-c.trueX, dy-c.trueY) > 0.05 {
				t.Errorf("fitted offset (%.3f, %.3f) px, want (%g, %g) within 0.05 px", dx, dy, c.trueX, c.trueY)
			}
		})
	}
}

// TestOffsetLayout: with FitChannelOffset the parameter vector has
// 2·(channels−1) more entries, Constrain leaves them alone, ChannelOffset
// reads them, and a single channel panics (programming error).
func TestOffsetLayout(t *testing.T) {
	const n, frames, count = 32, 3, 10
	pr := makeProblem(t, n, frames, []float64{0, 1, -0.5}, modes.KindKL, count, 0.3, false, 2)
	s := NewObjective(pr.pupil, pr.basis, pr.div, frames, Settings{TiltConstrain: true, FitChannelOffset: true})
	if got, want := s.NumParams(), frames*count+4; got != want {
		t.Fatalf("NumParams = %d, want %d", got, want)
	}
	a := make([]float64, s.NumParams())
	for i := range a {
		a[i] = 0.1 * float64(i%7+1)
	}
	nt := frames * count
	a[nt], a[nt+1], a[nt+2], a[nt+3] = 0.7, -0.4, 0.2, 0.1
	s.Constrain(a)
	if dx, dy := s.ChannelOffset(a, 1); dx != 0.7 || dy != -0.4 {
		t.Errorf("channel 1 offset after Constrain = (%g, %g), want (0.7, −0.4)", dx, dy)
	}
	if dx, dy := s.ChannelOffset(a, 2); dx != 0.2 || dy != 0.1 {
		t.Errorf("channel 2 offset after Constrain = (%g, %g), want (0.2, 0.1)", dx, dy)
	}
	if p := NewObjective(pr.pupil, pr.basis, pr.div, frames, Settings{}); p.NumParams() != nt {
		t.Errorf("without offsets NumParams = %d, want %d", p.NumParams(), nt)
	}
	defer func() {
		if recover() == nil {
			t.Error("FitChannelOffset with one channel did not panic")
		}
	}()
	NewObjective(pr.pupil, pr.basis, pr.div[:1], frames, Settings{FitChannelOffset: true})
}
