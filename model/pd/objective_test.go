package pd

import (
	"math"
	"math/rand/v2"
	"testing"

	"pdwave/model/fft"
	"pdwave/model/modes"
	"pdwave/model/optics"
)

// testTelescope returns the demo-like telescope (D = 0.5 m, λ = 600 nm,
// obscuration 0.15) sampled at frac of Nyquist, so that the pupil diameter
// on an n grid is r_c = frac·n/2 pixels.
func testTelescope(frac float64) optics.Telescope {
	lam, d := 600e-9, 0.5
	return optics.Telescope{
		Diameter: d, Obscuration: 0.15, FocalRatio: 40, Wavelength: lam,
		PixelScale: frac * lam / (2 * d),
	}
}

type problem struct {
	pupil  *optics.Pupil
	basis  *modes.Basis
	div    [][]float64
	truth  []float64
	object []float64
	data   [][][]float64
}

// makeProblem simulates frames×channels noiseless images of a random
// object by circular convolution with the PSFs of random coefficients
// (rms about rms rad per mode) and the given diversities (waves PV of
// defocus per channel). If compact, the object is confined to the central
// quarter of the field, so that the window does not touch the images.
func makeProblem(t testing.TB, n, frames int, pv []float64, kind modes.Kind, count int, rms float64, compact bool, seed uint64) *problem {
	t.Helper()
	tel := testTelescope(0.9)
	pup, err := optics.NewPupil(tel, n)
	if err != nil {
		t.Fatal(err)
	}
	b, err := modes.New(kind, count, n, pup.Radius)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(seed, 1))
	pr := &problem{pupil: pup, basis: b}
	for _, v := range pv {
		d := make([]float64, n*n)
		pup.Defocus(d, v)
		pr.div = append(pr.div, d)
	}
	// Object: smoothed noise (or a compact blob field) plus a level.
	obj := make([]float64, n*n)
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			if compact && (y < 3*n/8 || y >= 5*n/8 || x < 3*n/8 || x >= 5*n/8) {
				continue
			}
			obj[y*n+x] = rng.Float64()
		}
	}
	if !compact {
		// smooth a little so the spectrum falls like a scene's
		tmp := make([]float64, n*n)
		for y := 0; y < n; y++ {
			for x := 0; x < n; x++ {
				var s float64
				for dy := -1; dy <= 1; dy++ {
					for dx := -1; dx <= 1; dx++ {
						s += obj[((y+dy+n)%n)*n+(x+dx+n)%n]
					}
				}
				tmp[y*n+x] = 1 + s/9
			}
		}
		obj = tmp
	}
	if compact {
		// zero total flux: the window-weighted mean of every image is then
		// zero and the mean subtraction leaves the data untouched
		var m float64
		cnt := 0
		for y := 3 * n / 8; y < 5*n/8; y++ {
			for x := 3 * n / 8; x < 5*n/8; x++ {
				m += obj[y*n+x]
				cnt++
			}
		}
		m /= float64(cnt)
		for y := 3 * n / 8; y < 5*n/8; y++ {
			for x := 3 * n / 8; x < 5*n/8; x++ {
				obj[y*n+x] -= m
			}
		}
	}
	pr.object = obj
	plan := fft.NewPlan(n, n)
	O := make([]complex128, n*n)
	plan.ForwardReal(O, obj)
	im := optics.NewImager(pup)
	pr.truth = make([]float64, frames*count)
	for j := 0; j < frames; j++ {
		for k := 0; k < count; k++ {
			pr.truth[j*count+k] = rms * rng.NormFloat64() / math.Sqrt(1+float64(k)/4)
		}
	}
	pr.data = make([][][]float64, len(pv))
	phase := make([]float64, n*n)
	otf := make([]complex128, n*n)
	for k := range pv {
		pr.data[k] = make([][]float64, frames)
		for j := 0; j < frames; j++ {
			b.Phase(phase, pr.truth[j*count:(j+1)*count])
			for i := range phase {
				phase[i] += pr.div[k][i]
			}
			im.OTF(otf, phase)
			for i := range otf {
				otf[i] *= O[i]
			}
			img := make([]float64, n*n)
			plan.InverseReal(img, otf)
			pr.data[k][j] = img
		}
	}
	return pr
}

// TestGradientFiniteDifference checks the analytic gradient (Paxman,
// Schulz & Fienup 1992 chain rule, numpy FFT conventions) against central
// differences, including the channel-offset parameters. Tolerance 1e-6
// relative (common practice: central differences with step 1e-5 are
// accurate to ~1e-9 here); the offsets are checked on their own scale so a
// wrong offset gradient cannot hide below the largest mode gradient.
func TestGradientFiniteDifference(t *testing.T) {
	cases := []struct {
		name   string
		kind   modes.Kind
		pv     []float64
		set    Settings
		frames int
	}{
		{"zernike-2ch", modes.KindZernike, []float64{0, 1}, Settings{}, 3},
		{"kl-3ch-prior-tilt", modes.KindKL, []float64{0, 1, -0.5}, Settings{PriorWeight: 0.05, TiltConstrain: true, NoiseFilter: true}, 2},
		{"zernike-1ch", modes.KindZernike, []float64{0.7}, Settings{Gamma: 1e-3}, 3},
		{"zernike-2ch-offset", modes.KindZernike, []float64{0, 1}, Settings{FitChannelOffset: true}, 3},
		{"kl-3ch-offset-prior-tilt", modes.KindKL, []float64{0, 1, -0.5}, Settings{PriorWeight: 0.05, TiltConstrain: true, NoiseFilter: true, FitChannelOffset: true}, 2},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			const n, count = 32, 10
			pr := makeProblem(t, n, c.frames, c.pv, c.kind, count, 0.4, false, 7)
			s := NewObjective(pr.pupil, pr.basis, pr.div, c.frames, c.set)
			s.SetPrior(KolmogorovPrior(pr.basis, 3))
			// add noise so the mask is not trivial
			rng := rand.New(rand.NewPCG(3, 3))
			for k := range pr.data {
				for j := range pr.data[k] {
					for i := range pr.data[k][j] {
						pr.data[k][j][i] += 0.01 * rng.NormFloat64()
					}
				}
			}
			if err := s.SetData(pr.data); err != nil {
				t.Fatal(err)
			}
			alpha := make([]float64, s.NumParams())
			for i := range alpha {
				alpha[i] = 0.3 * rng.NormFloat64()
				if i < len(pr.truth) {
					alpha[i] += pr.truth[i]
				}
			}
			grad := make([]float64, len(alpha))
			s.ValueGrad(grad, alpha)
			nt := len(pr.truth)
			if len(alpha)-nt != 2*(len(c.pv)-1) && c.set.FitChannelOffset {
				t.Fatalf("NumParams = %d, want %d + 2·(channels−1)", len(alpha), nt)
			}
			const h = 1e-5
			var gmax, emax, omax, oemax float64
			for i := range alpha {
				a0 := alpha[i]
				alpha[i] = a0 + h
				fp := s.ValueGrad(nil, alpha)
				alpha[i] = a0 - h
				fm := s.ValueGrad(nil, alpha)
				alpha[i] = a0
				fd := (fp - fm) / (2 * h)
				if i < nt {
					gmax = math.Max(gmax, math.Abs(grad[i]))
					emax = math.Max(emax, math.Abs(fd-grad[i]))
				} else {
					omax = math.Max(omax, math.Abs(grad[i]))
					oemax = math.Max(oemax, math.Abs(fd-grad[i]))
				}
			}
			if gmax == 0 {
				t.Fatal("zero gradient")
			}
			if emax/gmax > 1e-6 {
				t.Errorf("modes: max |fd − analytic| / max|grad| = %.3g, want ≤ 1e-6", emax/gmax)
			}
			if len(alpha) > nt {
				if omax == 0 || oemax/omax > 1e-6 {
					t.Errorf("offsets: max |fd − analytic| = %.3g, max |grad| = %.3g, want ratio ≤ 1e-6", oemax, omax)
				}
			}
			t.Logf("max relative gradient error: modes %.2g (max |grad| %.3g), offsets %.2g (max |grad| %.3g)", emax/gmax, gmax, oemax/math.Max(omax, 1e-300), omax)
		})
	}
}

// TestMetricZeroAtTruth: for noiseless images of a compact object (so the
// window does not matter) the Gonsalves metric, the residual of the
// least-squares object fit, vanishes at the true coefficients (Gonsalves
// 1982; Paxman et al. 1992) and is clearly positive away from them.
func TestMetricZeroAtTruth(t *testing.T) {
	const n, frames, count = 64, 3, 10
	pr := makeProblem(t, n, frames, []float64{0, 1}, modes.KindZernike, count, 0.3, true, 11)
	// A one-pixel taper: the images of the compact object stay in the flat
	// part of the window except for faint PSF wings.
	s := NewObjective(pr.pupil, pr.basis, pr.div, frames, Settings{Gamma: 1e-12, Window: 1.0 / n})
	if err := s.SetData(pr.data); err != nil {
		t.Fatal(err)
	}
	e0 := s.ValueGrad(nil, pr.truth)
	off := append([]float64(nil), pr.truth...)
	off[2] += 0.2 // 0.2 rad of extra defocus in frame 0
	e1 := s.ValueGrad(nil, off)
	// Not exactly zero: the faint PSF wings of the periodic images reach the
	// one-pixel taper (measured 5e-7); a wrong coefficient costs 1e-2.
	if e0 > 1e-5 || e0 > 1e-3*e1 {
		t.Errorf("normalised metric at the truth = %.3g, want ≈ 0 (≤ 1e-5 and ≤ 1e-3 of %.3g)", e0, e1)
	}
	if e1 < 1e-4 {
		t.Errorf("normalised metric 0.2 rad off = %.3g, want clearly > 0", e1)
	}
	t.Logf("E(truth) = %.2g, E(truth + 0.2 rad Z4 in one frame) = %.3g", e0, e1)
}

// TestCommonTiltInvisible: a tip/tilt common to all frames shifts every
// PSF by the same amount, S → S·exp(iφ(u)), which the common object absorbs;
// the metric is invariant (Paxman, Schulz & Fienup 1992). With TiltConstrain the
// objective is flat along that direction also when a prior is active.
func TestCommonTiltInvisible(t *testing.T) {
	const n, frames, count = 32, 4, 10
	pr := makeProblem(t, n, frames, []float64{0, 1}, modes.KindKL, count, 0.4, false, 5)
	alpha := append([]float64(nil), pr.truth...)
	for i := range alpha {
		alpha[i] += 0.1
	}
	dirs := tiltDirections(pr.basis)
	shifted := append([]float64(nil), alpha...)
	for j := 0; j < frames; j++ {
		for k := 0; k < count; k++ {
			shifted[j*count+k] += 0.8*dirs[0][k] - 0.5*dirs[1][k]
		}
	}
	for _, set := range []Settings{{}, {PriorWeight: 0.1, TiltConstrain: true}} {
		s := NewObjective(pr.pupil, pr.basis, pr.div, frames, set)
		s.SetPrior(KolmogorovPrior(pr.basis, 5))
		if err := s.SetData(pr.data); err != nil {
			t.Fatal(err)
		}
		e0, e1 := s.ValueGrad(nil, alpha), s.ValueGrad(nil, shifted)
		if math.Abs(e1-e0) > 1e-9*math.Abs(e0) {
			t.Errorf("settings %+v: E changed under a common tilt: %.12g → %.12g", set, e0, e1)
		}
	}
	// Without the constraint, a tilt in one frame only does change E.
	s := NewObjective(pr.pupil, pr.basis, pr.div, frames, Settings{})
	if err := s.SetData(pr.data); err != nil {
		t.Fatal(err)
	}
	one := append([]float64(nil), alpha...)
	for k := 0; k < count; k++ {
		one[k] += 0.8 * dirs[0][k]
	}
	if e0, e1 := s.ValueGrad(nil, alpha), s.ValueGrad(nil, one); math.Abs(e1-e0) < 1e-6*e0 {
		t.Errorf("a tilt of one frame left E unchanged (%.12g, %.12g)", e0, e1)
	}
}

// TestConstrainZeroMeanTilt: after Constrain the burst mean of the Noll
// tilt coefficients is zero, and the projector is idempotent.
func TestConstrainZeroMeanTilt(t *testing.T) {
	const n, frames, count = 32, 5, 12
	pr := makeProblem(t, n, frames, []float64{0, 1}, modes.KindKL, count, 0.4, false, 9)
	s := NewObjective(pr.pupil, pr.basis, pr.div, frames, Settings{TiltConstrain: true})
	a := append([]float64(nil), pr.truth...)
	for i := range a {
		a[i] += 0.3
	}
	s.Constrain(a)
	noll := make([]float64, count)
	var m2, m3 float64
	for j := 0; j < frames; j++ {
		pr.basis.NollEquivalent(noll, a[j*count:(j+1)*count])
		m2 += noll[0]
		m3 += noll[1]
	}
	if math.Abs(m2) > 1e-12 || math.Abs(m3) > 1e-12 {
		t.Errorf("burst-mean Noll tilts after Constrain = %.3g, %.3g, want 0", m2/frames, m3/frames)
	}
	b := append([]float64(nil), a...)
	s.Constrain(b)
	for i := range a {
		if math.Abs(a[i]-b[i]) > 1e-14 {
			t.Fatalf("Constrain not idempotent at %d: %g vs %g", i, a[i], b[i])
		}
	}
	tm := TiltModes(pr.basis)
	for _, k := range tm {
		c := pr.basis.ToNoll.At(0, k)*pr.basis.ToNoll.At(0, k) + pr.basis.ToNoll.At(1, k)*pr.basis.ToNoll.At(1, k)
		if c < 0.5 {
			t.Errorf("KL tilt mode %d has Noll-2/3 content %.3f, want > 0.5", k, c)
		}
	}
}

// TestRestoreCompactObject: with noiseless data of a compact object and
// the true coefficients, the object estimate reproduces the object band-
// limited to the metric's frequencies (F̂ = O where Σ|S|² ≫ γ).
func TestRestoreCompactObject(t *testing.T) {
	const n, frames, count = 64, 3, 10
	pr := makeProblem(t, n, frames, []float64{0, 1}, modes.KindZernike, count, 0.3, true, 13)
	s := NewObjective(pr.pupil, pr.basis, pr.div, frames, Settings{Gamma: 1e-12})
	if err := s.SetData(pr.data); err != nil {
		t.Fatal(err)
	}
	rest := make([]float64, n*n)
	s.Restore(rest, pr.truth)
	// Reference: object transformed, kept at the mask, back.
	plan := fft.NewPlan(n, n)
	O := make([]complex128, n*n)
	plan.ForwardReal(O, pr.object)
	keep := make([]complex128, n*n)
	for _, u := range s.mask {
		keep[u] = O[u]
	}
	ref := make([]float64, n*n)
	plan.InverseReal(ref, keep)
	var num, den, dnum float64
	for y := n / 4; y < 3*n/4; y++ {
		for x := n / 4; x < 3*n/4; x++ {
			i := y*n + x
			r := ref[i] + s.level
			num += (rest[i] - r) * (rest[i] - r)
			den += ref[i] * ref[i]
			dnum += (pr.data[0][0][i] - r) * (pr.data[0][0][i] - r)
		}
	}
	rel := math.Sqrt(num / den)
	t.Logf("restored vs band-limited object: rms error %.3g of the object rms (focused image: %.3g)", rel, math.Sqrt(dnum/den))
	if rel > 0.05 {
		t.Errorf("restoration error %.3g of the object rms, want ≤ 0.05", rel)
	}
}

func benchSolver(tb testing.TB) (*Objective, []float64, []float64) { return benchSolverWith(tb, false) }

// benchSolverWith is benchSolver, with channel-offset parameters if offset.
func benchSolverWith(tb testing.TB, offset bool) (*Objective, []float64, []float64) {
	const n, frames, count = 64, 16, 36
	tel := optics.Telescope{Diameter: 0.5, Obscuration: 0.15, FocalRatio: 40, Wavelength: 600e-9,
		PixelScale: 0.120 / 206264.806}
	pup, err := optics.NewPupil(tel, n)
	if err != nil {
		tb.Fatal(err)
	}
	b, err := modes.New(modes.KindKL, count, n, pup.Radius)
	if err != nil {
		tb.Fatal(err)
	}
	div := [][]float64{nil, make([]float64, n*n)}
	pup.Defocus(div[1], 1)
	s := NewObjective(pup, b, div, frames, Settings{PriorWeight: 0.1, NoiseFilter: true, TiltConstrain: true, FitChannelOffset: offset})
	s.SetPrior(KolmogorovPrior(b, 5))
	rng := rand.New(rand.NewPCG(1, 2))
	if err := s.SetData(benchData(s)); err != nil {
		tb.Fatal(err)
	}
	alpha := make([]float64, s.NumParams())
	for i := range alpha {
		alpha[i] = 0.2 * rng.NormFloat64()
	}
	return s, alpha, make([]float64, s.NumParams())
}

// TestValueGradAllocs: value and gradient for 64×64, 16 frames, 2 channels,
// 36 modes allocate nothing after warm-up (issue requirement), with and
// without the channel-offset parameters.
func TestValueGradAllocs(t *testing.T) {
	for _, offset := range []bool{false, true} {
		s, alpha, grad := benchSolverWith(t, offset)
		s.ValueGrad(grad, alpha)
		if a := testing.AllocsPerRun(3, func() { s.ValueGrad(grad, alpha) }); a != 0 {
			t.Errorf("offset %v: ValueGrad allocates %v times per call, want 0", offset, a)
		}
		dst := make([]float64, 64*64)
		if a := testing.AllocsPerRun(2, func() { s.Restore(dst, alpha) }); a != 0 {
			t.Errorf("offset %v: Restore allocates %v times per call, want 0", offset, a)
		}
	}
}

// BenchmarkValueGrad: 64×64, 16 frames × 2 channels, 36 KL modes.
func BenchmarkValueGrad(b *testing.B) {
	s, alpha, grad := benchSolver(b)
	b.ReportAllocs()
	cpuLoop(b, func() { s.ValueGrad(grad, alpha) })
}

// BenchmarkValueGradOffset: BenchmarkValueGrad with the channel offset
// fitted (two more parameters).
func BenchmarkValueGradOffset(b *testing.B) {
	s, alpha, grad := benchSolverWith(b, true)
	b.ReportAllocs()
	cpuLoop(b, func() { s.ValueGrad(grad, alpha) })
}

// BenchmarkValue: the same, value only.
func BenchmarkValue(b *testing.B) {
	s, alpha, _ := benchSolver(b)
	b.ReportAllocs()
	cpuLoop(b, func() { s.ValueGrad(nil, alpha) })
}

// TestNoiseEstimate: for white noise of variance σ² the windowed spectrum
// has expected power σ²·Σw² at every frequency (Parseval), which SetData
// must read beyond the cut-off; with the noise filter, images of pure noise
// leave (almost) nothing in the mask, while a strong signal keeps its low
// frequencies.
func TestNoiseEstimate(t *testing.T) {
	const n, frames, count = 64, 4, 10
	pr := makeProblem(t, n, frames, []float64{0, 1}, modes.KindZernike, count, 0.3, false, 21)
	const sigma = 0.05
	rng := rand.New(rand.NewPCG(5, 6))
	noise := make([][][]float64, 2)
	for k := range noise {
		noise[k] = make([][]float64, frames)
		for j := range noise[k] {
			im := make([]float64, n*n)
			for i := range im {
				im[i] = 1 + sigma*rng.NormFloat64()
			}
			noise[k][j] = im
		}
	}
	s := NewObjective(pr.pupil, pr.basis, pr.div, frames, Settings{NoiseFilter: true})
	err := s.SetData(noise)
	var w2 float64
	for _, v := range Window(n, 0.125) {
		w2 += v * v
	}
	want := sigma * sigma * w2
	if got := s.Noise(); math.Abs(got/want-1) > 0.05 {
		t.Errorf("noise power %.4g, want σ²Σw² = %.4g within 5 %%", got, want)
	}
	if err == nil && s.MaskSize() > 20 {
		t.Errorf("pure noise left %d frequencies in the mask", s.MaskSize())
	}
	for k := range pr.data {
		for j := range pr.data[k] {
			for i := range pr.data[k][j] {
				pr.data[k][j][i] = 100*pr.data[k][j][i] + sigma*rng.NormFloat64()
			}
		}
	}
	if err := s.SetData(pr.data); err != nil {
		t.Fatal(err)
	}
	if s.MaskSize() < 100 {
		t.Errorf("strong signal kept only %d frequencies", s.MaskSize())
	}
	t.Logf("mask: %d frequencies of signal data; noise %.3g", s.MaskSize(), s.Noise())
}
