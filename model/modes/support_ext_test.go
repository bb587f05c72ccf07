package modes_test

import (
	"testing"

	"pdwave/model/modes"
	"pdwave/model/optics"
)

// Basis.Support of an obscured basis is the hard-edge pupil of
// optics.NewPupil (no spiders) pixel for pixel, for several obscurations and
// pupil radii.
func TestSupportMatchesPupil(t *testing.T) {
	for _, c := range []struct {
		n      int
		radius float64
		eps    float64
	}{{64, 15.5, 0.15}, {64, 16, 0.3}, {80, 20, 0.25}, {96, 23.7, 0.42}, {48, 12, 0}} {
		// Pupil radius = D N p/(2λ): choose the pixel scale that gives c.radius.
		tel := optics.Telescope{Diameter: 1, Obscuration: c.eps, Wavelength: 1e-6,
			PixelScale: 2e-6 * c.radius / float64(c.n), FocalRatio: 10}
		p, err := optics.NewPupil(tel, c.n)
		if err != nil {
			t.Fatal(err)
		}
		b, err := modes.NewFor(modes.KindKL, 10, c.n, p.Radius, modes.Aperture{Obscuration: c.eps, OuterScale: 30})
		if err != nil {
			t.Fatal(err)
		}
		if len(b.Support) != len(p.Index) {
			t.Fatalf("%+v: pupil has %d pixels, basis support %d", c, len(p.Index), len(b.Support))
		}
		for k := range b.Support {
			if b.Support[k] != p.Index[k] {
				t.Fatalf("%+v: pupil and basis support differ at %d", c, k)
			}
		}
	}
}
