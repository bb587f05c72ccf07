package infer

import (
	"fmt"
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/mat"

	"pdwave/model/fft"
	"pdwave/model/modes"
	"pdwave/model/optics"
)

// Synthetic describes a small, self-contained burst generator for the
// accuracy study and tests: independent Kolmogorov wavefronts per frame
// drawn as Zernike coefficients j = 2…JMax with the Noll covariance
// (Noll 1976 eq. 25) at D/r0, a granulation-like object, images formed on
// a canvas twice the patch size and cropped to the central patch (so the
// patch is not periodic and light enters from outside it), and photon
// noise. It has no anisoplanatism, no temporal correlation between frames
// and no modes above JMax; simulate's bursts are the realistic ones.
type Synthetic struct {
	N, Frames   int              // patch side (pixels) and frames per channel
	Telescope   optics.Telescope // optics of the pupil and the sampling
	DiversityPV []float64        // per channel, waves PV
	DOverR0     float64          // at the observing wavelength
	JMax        int              // highest Noll index in the wavefront (≥ 3)
	Photons     float64          // mean photons per pixel; 0 = noiseless
}

// SyntheticBurst is one generated burst.
type SyntheticBurst struct {
	Data   [][][]float64 // [channel][frame] N×N
	Noll   [][]float64   // frames × (JMax−1) true Noll coefficients j = 2…JMax, rad
	Object []float64     // the 2N×2N canvas object (mean 1)
}

// Burst draws one burst from rng. It returns an error for invalid settings.
func (s Synthetic) Burst(rng *rand.Rand) (*SyntheticBurst, error) {
	if s.N < 8 || s.Frames < 1 || len(s.DiversityPV) < 1 || s.JMax < 3 || !(s.DOverR0 > 0) || s.Photons < 0 {
		return nil, fmt.Errorf("synthetic burst: invalid settings %+v", s)
	}
	n2 := 2 * s.N
	pup, err := optics.NewPupil(s.Telescope, n2)
	if err != nil {
		return nil, fmt.Errorf("synthetic burst: %w", err)
	}
	nm := s.JMax - 1
	zb, err := modes.New(modes.KindZernike, nm, n2, pup.Radius)
	if err != nil {
		return nil, fmt.Errorf("synthetic burst: %w", err)
	}
	cov := modes.NollCovarianceMatrix(nm)
	var ch mat.Cholesky
	if !ch.Factorize(cov) {
		return nil, fmt.Errorf("synthetic burst: Noll covariance of %d modes not positive definite", nm)
	}
	var l mat.TriDense
	ch.LTo(&l)
	scale := math.Pow(s.DOverR0, 5.0/6)
	plan := fft.NewPlan(n2, n2)
	obj := granulation(rng, n2, plan)
	O := make([]complex128, n2*n2)
	plan.ForwardReal(O, obj)
	im := optics.NewImager(pup)
	divs := make([][]float64, len(s.DiversityPV))
	for k, pv := range s.DiversityPV {
		divs[k] = make([]float64, n2*n2)
		pup.Defocus(divs[k], pv)
	}
	b := &SyntheticBurst{Data: make([][][]float64, len(s.DiversityPV)), Noll: make([][]float64, s.Frames)}
	for k := range b.Data {
		b.Data[k] = make([][]float64, s.Frames)
	}
	z := make([]float64, nm)
	phase := make([]float64, n2*n2)
	ph := make([]float64, n2*n2) // phase plus diversity of one channel
	otf := make([]complex128, n2*n2)
	img := make([]float64, n2*n2)
	for j := 0; j < s.Frames; j++ {
		for i := range z {
			z[i] = rng.NormFloat64()
		}
		c := make([]float64, nm)
		for i := 0; i < nm; i++ {
			var v float64
			for q := 0; q <= i; q++ {
				v += l.At(i, q) * z[q]
			}
			c[i] = v * scale
		}
		b.Noll[j] = c
		zb.Phase(phase, c)
		for k := range s.DiversityPV {
			for i := range ph {
				ph[i] = phase[i] + divs[k][i]
			}
			im.OTF(otf, ph)
			for i := range otf {
				otf[i] *= O[i]
			}
			plan.InverseReal(img, otf)
			out := make([]float64, s.N*s.N)
			o := s.N / 2
			for y := 0; y < s.N; y++ {
				for x := 0; x < s.N; x++ {
					v := img[(y+o)*n2+x+o]
					if s.Photons > 0 {
						v *= s.Photons
						v += math.Sqrt(math.Max(v, 0)) * rng.NormFloat64()
					}
					out[y*s.N+x] = v
				}
			}
			b.Data[k][j] = out
		}
	}
	b.Object = obj
	return b, nil
}

// granulation returns a granulation-like field of mean 1 and rms contrast
// 0.12: band-pass filtered noise peaked at a granule scale of 11 px,
// exponentiated to give bright cells and narrow dark lanes (common
// practice for test scenes; not a solar model).
func granulation(rng *rand.Rand, n int, plan *fft.Plan) []float64 {
	w := make([]complex128, n*n)
	for i := range w {
		w[i] = complex(rng.NormFloat64(), 0)
	}
	plan.Forward(w, w)
	k0 := float64(n) / 11
	for y := 0; y < n; y++ {
		fy := float64(y)
		if y >= n/2 {
			fy -= float64(n)
		}
		for x := 0; x < n; x++ {
			fx := float64(x)
			if x >= n/2 {
				fx -= float64(n)
			}
			k := math.Hypot(fx, fy) / k0
			w[y*n+x] *= complex(k*k*math.Exp(-k*k), 0)
		}
	}
	f := make([]float64, n*n)
	plan.InverseReal(f, w)
	var m, v float64
	for _, x := range f {
		m += x
	}
	m /= float64(len(f))
	for _, x := range f {
		v += (x - m) * (x - m)
	}
	sd := math.Sqrt(v / float64(len(f)))
	for i, x := range f {
		f[i] = math.Exp(0.8 * (x - m) / sd)
	}
	m, v = 0, 0
	for _, x := range f {
		m += x
	}
	m /= float64(len(f))
	for _, x := range f {
		v += (x - m) * (x - m)
	}
	sd = math.Sqrt(v / float64(len(f)))
	for i, x := range f {
		f[i] = 1 + 0.12*(x-m)/sd
	}
	return f
}
