package weights

import (
	"math"
	"strings"
	"testing"

	"pdwave/model/instrument"
	"pdwave/model/modes"
	"pdwave/model/site"
)

// The embedded weights load, describe the demo telescope of
// testdata/demo-site.yaml (0.5 m, obscuration 0.15, 600 nm, 0.120 arcsec,
// 1 wave PV, 64 px) and refuse other optics, diversity, patch or basis.
func TestDefault(t *testing.T) {
	m, err := Default()
	if err != nil {
		t.Fatal(err)
	}
	md := m.Meta
	arcsec := math.Pi / 180 / 3600
	if md.Diameter != 0.5 || md.Obscuration != 0.15 || math.Abs(md.Wavelength-600e-9) > 1e-15 ||
		math.Abs(md.PixelScale-0.12*arcsec) > 1e-15 || md.DiversityPV != 1 || md.Patch != 64 {
		t.Fatalf("built-in weights describe %+v, not the demo telescope", md)
	}
	st, err := site.Load("../testdata/demo-site.yaml")
	if err != nil {
		t.Fatal(err)
	}
	in, _, err := instrument.Resolve(instrument.Sources{Site: st.Instrument()})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := For(in); err != nil {
		t.Fatalf("demo optics refused: %v", err)
	}
	for _, c := range []struct {
		change func(*instrument.Instrument)
		want   string
	}{
		{func(in *instrument.Instrument) { in.Telescope.Diameter = 1.0 }, "aperture diameter"},
		{func(in *instrument.Instrument) { in.Diversity = []float64{0, 1.5} }, "diversity"},
		{func(in *instrument.Instrument) { in.Patch = 48 }, "patch size 64 px, the data has 48 px"},
		{func(in *instrument.Instrument) { in.Basis = modes.KindZernike }, "basis"},
	} {
		other := in
		c.change(&other)
		if _, err := For(other); err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("error %v, want one naming %q", err, c.want)
		}
	}
	if m.Meta.Training["steps"] == "" {
		t.Errorf("built-in weights carry no training record")
	}
}
