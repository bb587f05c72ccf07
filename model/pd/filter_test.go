package pd

import (
	"fmt"
	"math"
	"math/cmplx"
	"math/rand/v2"
	"testing"

	"pdwave/model/fft"
	"pdwave/model/modes"
	"pdwave/model/optics"
)

// knownBurst is a burst of a power-law object seen through the
// aberration-free focused and defocused channels, with white noise.
type knownBurst struct {
	pupil *optics.Pupil
	basis *modes.Basis
	div   [][]float64
	clean [][][]float64 // noiseless images [channel][frame]
	data  [][][]float64 // with noise
	sigma float64       // noise rms per pixel
}

// powerLawObject returns an N×N object of mean 1 whose spectrum has
// |O(u)|² = a·|u|⁻³ exactly at every non-zero frequency (random phases,
// Hermitian so the object is real).
func powerLawObject(n int, a float64, rng *rand.Rand) []float64 {
	plan := fft.NewPlan(n, n)
	white := make([]float64, n*n)
	for i := range white {
		white[i] = rng.NormFloat64()
	}
	O := make([]complex128, n*n)
	plan.ForwardReal(O, white)
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			i := y*n + x
			r := math.Hypot(signedFreq(x, n), signedFreq(y, n))
			if r == 0 {
				O[i] = complex(float64(n*n), 0)
				continue
			}
			O[i] *= complex(math.Sqrt(a*math.Pow(r, -3))/cmplx.Abs(O[i]), 0)
		}
	}
	obj := make([]float64, n*n)
	plan.InverseReal(obj, O)
	return obj
}

func makeKnownBurst(t *testing.T, n, frames int, a, sigma float64, seed uint64) *knownBurst {
	t.Helper()
	pup, err := optics.NewPupil(testTelescope(0.9), n)
	if err != nil {
		t.Fatal(err)
	}
	b, err := modes.New(modes.KindZernike, 10, n, pup.Radius)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(seed, 5))
	kb := &knownBurst{pupil: pup, basis: b, sigma: sigma, div: [][]float64{make([]float64, n*n), make([]float64, n*n)}}
	pup.Defocus(kb.div[1], 1)
	plan := fft.NewPlan(n, n)
	O := make([]complex128, n*n)
	plan.ForwardReal(O, powerLawObject(n, a, rng))
	im := optics.NewImager(pup)
	otf := make([]complex128, n*n)
	for k := range kb.div {
		im.OTF(otf, kb.div[k])
		for i := range otf {
			otf[i] *= O[i]
		}
		img := make([]float64, n*n)
		plan.InverseReal(img, otf)
		var cl, no [][]float64
		for j := 0; j < frames; j++ {
			d := make([]float64, n*n)
			for i, v := range img {
				d[i] = v + sigma*rng.NormFloat64()
			}
			cl = append(cl, img)
			no = append(no, d)
		}
		kb.clean = append(kb.clean, cl)
		kb.data = append(kb.data, no)
	}
	return kb
}

// truePower returns the expected smoothed data power per frequency that the
// filter estimates: the windowed, mean-subtracted spectra of the noiseless
// images, averaged over the images, plus the white-noise power σ²Σw²
// (Parseval), box-smoothed 3×3 with wrap-around as Settings.NoiseFilter
// documents.
func truePower(kb *knownBurst, n int, win []float64, noise float64) []float64 {
	plan := fft.NewPlan(n, n)
	pw := make([]float64, n*n)
	buf := make([]float64, n*n)
	z := make([]complex128, n*n)
	nimg := 0
	var sw float64
	for _, v := range win {
		sw += v
	}
	for k := range kb.clean {
		for _, im := range kb.clean[k] {
			var m float64
			for i, v := range im {
				m += win[i] * v
			}
			m /= sw
			for i, v := range im {
				buf[i] = win[i] * (v - m)
			}
			plan.ForwardReal(z, buf)
			for i, c := range z {
				pw[i] += real(c)*real(c) + imag(c)*imag(c)
			}
			nimg++
		}
	}
	out := make([]float64, n*n)
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			var s float64
			for dy := -1; dy <= 1; dy++ {
				for dx := -1; dx <= 1; dx++ {
					s += pw[((y+dy+n)%n)*n+(x+dx+n)%n]
				}
			}
			out[y*n+x] = s/9/float64(nimg) + noise
		}
	}
	return out
}

// TestNoiseFilterKnownSpectrum: for an object with a known power-law
// spectrum (|O|² ∝ |u|⁻³) behind known OTFs plus white noise of known
// variance, (1) the measured noise power matches the injected σ²Σw²
// (Parseval) within 3 %; (2) the noise filter keeps every frequency inside
// the cut-off whose true data power exceeds 1.3 × threshold × noise and
// drops every one below threshold × noise / 1.3 (the ±30 % shell allows the
// noise realisation, about 5 % rms after averaging 16 images and 3×3
// smoothing: common practice); (3) the restored object has no power at the
// dropped frequencies: its spectrum is zero outside the mask (to rounding,
// ≤ 1e-20 of the kept power).
func TestNoiseFilterKnownSpectrum(t *testing.T) {
	const n, frames, sigma, a = 64, 8, 0.01, 4e4
	kb := makeKnownBurst(t, n, frames, a, sigma, 3)
	win := Window(n, 0.125)
	var w2 float64
	for _, v := range win {
		w2 += v * v
	}
	injected := sigma * sigma * w2
	truth := truePower(kb, n, win, injected)
	for _, thr := range []float64{3, 8} {
		s := NewObjective(kb.pupil, kb.basis, kb.div, frames, Settings{NoiseFilter: true, NoiseThreshold: thr, Gamma: 1e-3})
		if err := s.SetData(kb.data); err != nil {
			t.Fatal(err)
		}
		if got := s.Noise(); math.Abs(got/injected-1) > 0.03 {
			t.Errorf("threshold %g: measured noise power %.5g, injected σ²Σw² = %.5g (ratio %.4f), want within 3 %%", thr, got, injected, got/injected)
		}
		kept := make([]bool, n*n)
		for _, u := range s.mask {
			kept[u] = true
		}
		var missed, extra, shell, inside int
		var rTrue float64 // largest radius the truth keeps
		for y := 0; y < n; y++ {
			for x := 0; x < n; x++ {
				u := y*n + x
				r := s.freqRadius(y, x)
				if u == 0 || r >= s.cutoff {
					if kept[u] {
						extra++
					}
					continue
				}
				inside++
				ratio := truth[u] / (thr * injected)
				if ratio > 1 {
					rTrue = math.Max(rTrue, r)
				}
				switch {
				case ratio > 1.3 && !kept[u]:
					missed++
				case ratio < 1/1.3 && kept[u]:
					extra++
				case ratio >= 1/1.3 && ratio <= 1.3:
					shell++
				}
			}
		}
		t.Logf("threshold %g: noise %.5g vs injected %.5g (ratio %.4f); kept %d of %d inside the cut-off, truth keeps up to r = %.1f px; %d in the ±30 %% shell; missed %d, extra %d",
			thr, s.Noise(), injected, s.Noise()/injected, s.MaskSize(), inside, rTrue, shell, missed, extra)
		if missed > 0 || extra > 0 {
			t.Errorf("threshold %g: the filter missed %d frequencies above 1.3×threshold×noise and kept %d below threshold×noise/1.3 (or beyond the cut-off)", thr, missed, extra)
		}
		checkRestoreBand(t, s, kept, truth, thr*injected/1.3)
	}
}

// checkRestoreBand checks that the restored object (true coefficients: zero)
// has no power outside the mask, in particular where the true data power is
// below low, and logs its azimuthal profile around the cut.
func checkRestoreBand(t *testing.T, s *Objective, kept []bool, truth []float64, low float64) {
	t.Helper()
	n := s.n
	rest := make([]float64, n*n)
	s.Restore(rest, make([]float64, s.NumParams()))
	for i := range rest {
		rest[i] -= s.level
	}
	plan := fft.NewPlan(n, n)
	z := make([]complex128, n*n)
	plan.ForwardReal(z, rest)
	var in, out, below float64
	var prof [64]float64
	var cnt [64]int
	for u, c := range z {
		p := real(c)*real(c) + imag(c)*imag(c)
		if kept[u] {
			in += p
		} else {
			out += p
		}
		if truth[u] < low {
			below += p
		}
		k := int(math.Floor(s.freqRadius(u/n, u%n) + 0.5))
		prof[k] += p
		cnt[k]++
	}
	if !(out <= 1e-20*in) || !(below <= 1e-20*in) {
		t.Errorf("restored power outside the mask %.3g, at frequencies below the noise cut %.3g, kept %.3g: want ≤ 1e-20 of the kept power", out, below, in)
	}
	var line string
	for k := 8; k < 24; k++ {
		line += fmt.Sprintf(" %d:%.1e", k, prof[k]/float64(cnt[k])/in)
	}
	t.Logf("restored power per bin (relative to the total kept): %s; outside the mask %.2g", line, out/in)
}
