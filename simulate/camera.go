package simulate

import (
	"fmt"
	"math"
	"math/rand/v2"
)

// Camera describes detector noise and digitisation.
type Camera struct {
	Photons   float64 // mean photo-electrons per pixel and frame in each channel; ≤ 0 means noiseless (no scaling, noise or quantisation)
	ReadNoise float64 // read noise, electrons rms, ≥ 0
	Bits      int     // ADC bit depth, 0 for no quantisation, at most 32
	Gain      float64 // electrons per ADU; 0 means max(1, 4·Photons/2^Bits), so four times the mean fits
}

// Validate reports whether the camera is usable.
func (c Camera) Validate() error {
	switch {
	case math.IsNaN(c.Photons) || math.IsInf(c.Photons, 0):
		return fmt.Errorf("simulate: photons per pixel %g is not finite", c.Photons)
	case !(c.ReadNoise >= 0) || math.IsInf(c.ReadNoise, 0):
		return fmt.Errorf("simulate: read noise %g e-, need a finite value ≥ 0", c.ReadNoise)
	case c.Bits < 0 || c.Bits > 32:
		return fmt.Errorf("simulate: bit depth %d, want 0 (none) to 32", c.Bits)
	case !(c.Gain >= 0) || math.IsInf(c.Gain, 0):
		return fmt.Errorf("simulate: gain %g e-/ADU, need a finite value ≥ 0 (0 = automatic)", c.Gain)
	}
	return nil
}

// ElectronsPerADU returns the gain in use, electrons per ADU: Gain if set,
// else max(1, 4·Photons/2^Bits), 1 without quantisation.
func (c Camera) ElectronsPerADU() float64 {
	if c.Gain > 0 {
		return c.Gain
	}
	if c.Bits == 0 {
		return 1
	}
	return math.Max(1, 4*c.Photons/math.Exp2(float64(c.Bits)))
}

// Noiseless reports whether the camera adds no noise.
func (c Camera) Noiseless() bool { return c.Photons <= 0 }

// Expose converts in place an expected image in electrons into a recorded
// one in ADU: Poisson photon noise, Gaussian read noise, division by the
// gain (ElectronsPerADU), rounding and clipping to [0, 2^Bits − 1] (no
// rounding or clipping for Bits = 0). It draws one Poisson and, with read
// noise, one normal deviate per pixel from rng, in pixel order.
func (c Camera) Expose(im []float64, rng *rand.Rand) {
	g := c.ElectronsPerADU()
	top := math.Exp2(float64(c.Bits)) - 1
	for i, v := range im {
		e := Poisson(rng, math.Max(v, 0))
		if c.ReadNoise > 0 {
			e += c.ReadNoise * rng.NormFloat64()
		}
		a := e / g
		if c.Bits > 0 {
			a = math.Min(math.Max(math.Round(a), 0), top)
		}
		im[i] = a
	}
}

// Poisson returns a Poisson deviate of mean lambda (≥ 0; 0 for lambda ≤ 0
// or NaN). Below 10 it multiplies uniforms (Knuth, TAOCP vol. 2,
// §3.4.1); from 10 on it uses the transformed rejection method PTRS of
// Hörmann (1993, Insurance: Mathematics and Economics 12, 39), which costs
// O(1) for any mean.
func Poisson(rng *rand.Rand, lambda float64) float64 {
	if !(lambda > 0) {
		return 0
	}
	if lambda < 10 {
		l := math.Exp(-lambda)
		k := 0.0
		p := rng.Float64()
		for p > l {
			k++
			p *= rng.Float64()
		}
		return k
	}
	slam := math.Sqrt(lambda)
	loglam := math.Log(lambda)
	b := 0.931 + 2.53*slam
	a := -0.059 + 0.02483*b
	invalpha := 1.1239 + 1.1328/(b-3.4)
	vr := 0.9277 - 3.6224/(b-2)
	for {
		u := rng.Float64() - 0.5
		v := rng.Float64()
		us := 0.5 - math.Abs(u)
		k := math.Floor((2*a/us+b)*u + lambda + 0.43)
		if us >= 0.07 && v <= vr {
			return k
		}
		if k < 0 || (us < 0.013 && v > us) {
			continue
		}
		lg, _ := math.Lgamma(k + 1)
		if math.Log(v)+math.Log(invalpha)-math.Log(a/(us*us)+b) <= -lambda+k*loglam-lg {
			return k
		}
	}
}
