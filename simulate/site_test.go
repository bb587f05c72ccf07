package simulate

import (
	"math"
	"math/rand/v2"
	"reflect"
	"strings"
	"testing"

	"pdwave/model/instrument"
	"pdwave/model/site"
)

// TestDemoSite reads the demo site file and checks that the Config built
// from it is the demo configuration used by the other tests (r0 at 600 nm
// from 0.08 m at 500 nm by λ^(6/5), Roddier 1981; D/r0 = 0.5 m/r0), that
// the notes name the site as the source and a flag overrides it, and that
// a site-level Patch and Field run and are reproducible.
func TestDemoSite(t *testing.T) {
	s, err := site.Load("../testdata/demo-site.yaml")
	if err != nil {
		t.Fatal(err)
	}
	got, notes, err := ConfigFromSite(s, instrument.Partial{})
	if err != nil {
		t.Fatal(err)
	}
	want := demoConfig()
	want.Turbulence.R0 = 0.08 * math.Pow(600.0/500, 1.2)
	want.Site = "Lomaverde 0.5 m demo solar telescope (invented)"
	want.DOverR0 = 0.5 / want.Turbulence.R0
	want.OuterScale = 30
	if math.Abs(got.Telescope.PixelScale-want.Telescope.PixelScale) > 1e-15 {
		t.Errorf("pixel scale %g, want %g", got.Telescope.PixelScale, want.Telescope.PixelScale)
	}
	got.Telescope.PixelScale = want.Telescope.PixelScale
	if math.Abs(got.Telescope.Wavelength/want.Telescope.Wavelength-1) < 1e-12 {
		got.Telescope.Wavelength = want.Telescope.Wavelength
	}
	for i := range got.Turbulence.Layers {
		if math.Abs(got.Turbulence.Layers[i].Direction-want.Turbulence.Layers[i].Direction) < 1e-12 {
			got.Turbulence.Layers[i].Direction = want.Turbulence.Layers[i].Direction
		}
	}
	if math.Abs(got.Turbulence.R0-want.Turbulence.R0) < 1e-12 {
		got.Turbulence.R0 = want.Turbulence.R0
	}
	if math.Abs(got.DOverR0-want.DOverR0) < 1e-12 {
		got.DOverR0 = want.DOverR0
	}
	if !reflect.DeepEqual(got, want) {
		t.Errorf("config from the demo site:\n got %+v\nwant %+v", got, want)
	}
	if notes["diversity"] != instrument.FromSite || notes["d_over_r0"] != instrument.FromSite || notes["modes"] != instrument.FromSite {
		t.Errorf("notes %v, want the site as the source", notes)
	}
	flagged, notes, err := ConfigFromSite(s, instrument.Partial{Modes: instrument.Some(21)})
	if err != nil || flagged.Modes != 21 || notes["modes"] != instrument.FromFlags {
		t.Errorf("--modes 21: %d modes from %v (%v)", flagged.Modes, notes["modes"], err)
	}
	if _, _, err := ConfigFromSite(s, instrument.Partial{PixelScale: instrument.Some(0.2 * arcsec)}); err == nil || !strings.Contains(err.Error(), "Nyquist") {
		t.Errorf("coarse pixels: error %v, want one naming the Nyquist sampling", err)
	}
	s.Sizes.Frames = 2
	a, err := Patch(s, rand.New(rand.NewPCG(1, 2)), Options{})
	if err != nil {
		t.Fatal(err)
	}
	b, err := Patch(s, rand.New(rand.NewPCG(1, 2)), Options{})
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(a, b) {
		t.Error("site Patch not reproducible")
	}
	if a.Truth == nil || a.Truth.Modes != 36 || a.Truth.Basis != "kl" || a.Object == nil {
		t.Errorf("truth %+v, object %d px", a.Truth, len(a.Object))
	}
	f, err := Field(s, rand.New(rand.NewPCG(1, 2)), 96, 80, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if f.Nx != 96 || f.Ny != 80 || f.Frames != 2 || f.Validate() != nil {
		t.Errorf("field %d×%d×%d: %v", f.Nx, f.Ny, f.Frames, f.Validate())
	}
}
