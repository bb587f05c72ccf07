// Package optics describes a telescope and forms images through it: the
// sampling rule that ties the pupil grid to the image pixels, the pupil
// (central obscuration, spider vanes), point-spread and optical transfer
// functions (Goodman, Introduction to Fourier Optics), and defocus
// diversity (Noll 1976 Z4).
//
// Units are SI: metres and radians. Phases are in radians; images are
// row-major N×N arrays (index y*N+x).
package optics

import (
	"fmt"
	"math"
)

// RadToArcsec converts radians to arcseconds.
const RadToArcsec = 180 * 3600 / math.Pi

// Telescope holds the optical parameters of one telescope and camera.
type Telescope struct {
	Diameter    float64 // aperture diameter D, m
	Obscuration float64 // central obscuration, fraction of the diameter, [0,1)
	Spiders     int     // number of spider vanes, 0 = none
	SpiderWidth float64 // vane width, m
	FocalRatio  float64 // F#, used for focus-shift diversity; 0 = unknown
	Wavelength  float64 // λ, m
	PixelScale  float64 // p, rad per pixel
}

// Validate reports whether the telescope is physically meaningful: positive
// finite diameter, wavelength and pixel scale, obscuration in [0,1), a
// non-negative number of spiders with a width in [0, D) (positive if there are
// spiders), and a non-negative focal ratio.
func (t Telescope) Validate() error {
	pos := func(name string, v float64) error {
		if !(v > 0) || math.IsInf(v, 0) {
			return fmt.Errorf("telescope: %s must be a positive finite number, got %g", name, v)
		}
		return nil
	}
	if err := pos("diameter", t.Diameter); err != nil {
		return err
	}
	if err := pos("wavelength", t.Wavelength); err != nil {
		return err
	}
	if err := pos("pixel scale", t.PixelScale); err != nil {
		return err
	}
	if !(t.Obscuration >= 0 && t.Obscuration < 1) {
		return fmt.Errorf("telescope: central obscuration %g must be a fraction of the diameter in [0, 1)", t.Obscuration)
	}
	if t.Spiders < 0 {
		return fmt.Errorf("telescope: number of spider vanes %d < 0", t.Spiders)
	}
	if t.Spiders > 0 && !(t.SpiderWidth > 0 && t.SpiderWidth < t.Diameter) {
		return fmt.Errorf("telescope: spider width %g m must be in (0, D = %g m)", t.SpiderWidth, t.Diameter)
	}
	if !(t.SpiderWidth >= 0) || math.IsInf(t.SpiderWidth, 0) {
		return fmt.Errorf("telescope: spider width %g m must be a finite non-negative number", t.SpiderWidth)
	}
	if !(t.FocalRatio >= 0) || math.IsInf(t.FocalRatio, 0) {
		return fmt.Errorf("telescope: focal ratio %g must be a finite non-negative number", t.FocalRatio)
	}
	return nil
}

// Nyquist returns the Nyquist pixel scale λ/(2D) in rad.
func (t Telescope) Nyquist() float64 { return t.Wavelength / (2 * t.Diameter) }

// CutoffRadius returns the radius of the diffraction cut-off D/λ in
// frequency pixels of an n×n patch, r_c = D·n·p/λ (incoherent cut-off;
// Goodman, Introduction to Fourier Optics); the frequency spacing is 1/(n p).
func (t Telescope) CutoffRadius(n int) float64 {
	return t.Diameter * float64(n) * t.PixelScale / t.Wavelength
}

// CheckSampling returns an error if the images are under-sampled, p > λ/(2D),
// i.e. the cut-off r_c exceeds n/2 and the OTF would alias (Shannon
// sampling of the cut-off D/λ). The
// message gives the pixel scale and the Nyquist limit in arcsec. It also
// returns Validate's error and an error for n < 1.
func (t Telescope) CheckSampling(n int) error {
	if err := t.Validate(); err != nil {
		return err
	}
	if n < 1 {
		return fmt.Errorf("telescope: patch size %d < 1", n)
	}
	// r_c > n/2  ⇔  p > λ/(2D); a relative slack of 1e-12 accepts exact Nyquist.
	if t.PixelScale > t.Nyquist()*(1+1e-12) {
		return fmt.Errorf("under-sampled: pixel scale %.4f arcsec exceeds Nyquist λ/(2D) = %.4f arcsec (λ = %.1f nm, D = %.3f m); the cut-off radius %.2f px exceeds N/2 = %d px",
			t.PixelScale*RadToArcsec, t.Nyquist()*RadToArcsec, t.Wavelength*1e9, t.Diameter, t.CutoffRadius(n), n/2)
	}
	return nil
}

// DefocusCoefficient returns the Noll Z4 coefficient a (rad) whose
// peak-to-valley over the pupil is pvWaves waves. Z4 = √3(2ρ²−1) spans 2√3
// from ρ = 0 to 1 (Noll 1976, Table I), so a = 2π·pv/(2√3).
func DefocusCoefficient(pvWaves float64) float64 {
	return 2 * math.Pi * pvWaves / (2 * math.Sqrt(3))
}

// FocusShiftPV returns the peak-to-valley wavefront error, in waves, of a
// longitudinal focus shift dz (m) at focal ratio fnum: dz/(8 λ F#²). This is
// the defocus term W = dz·NA²/2 with NA = 1/(2 F#) (paraxial geometric optics).
// dz may be negative (the result is then negative).
func FocusShiftPV(dz, wavelength, fnum float64) float64 {
	return dz / (8 * wavelength * fnum * fnum)
}

// DiffractionMTF returns the modulation transfer function of an unobstructed
// circular aperture at normalised frequency ν = f/(D/λ) (Goodman,
// Introduction to Fourier Optics):
//
//	MTF(ν) = (2/π)(acos ν − ν√(1−ν²)),  |ν| < 1;  0 otherwise.
func DiffractionMTF(nu float64) float64 {
	nu = math.Abs(nu)
	if nu >= 1 {
		return 0
	}
	return 2 / math.Pi * (math.Acos(nu) - nu*math.Sqrt(1-nu*nu))
}
