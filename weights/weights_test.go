package weights

import (
	"math"
	"strings"
	"testing"

	"pdwave/model/net"
)

// The embedded weights load, describe the demo telescope of
// testdata/demo-site.yaml (0.5 m, obscuration 0.15, 600 nm, 0.120 arcsec,
// 1 wave PV, 64 px) and refuse other optics.
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
	if _, err := For(net.Meta{Diameter: 0.5, Obscuration: 0.15, Wavelength: 600e-9, PixelScale: 0.12 * arcsec, Patch: 64}); err != nil {
		t.Fatalf("demo optics refused: %v", err)
	}
	_, err = For(net.Meta{Diameter: 1.0, Obscuration: 0.15, Wavelength: 600e-9})
	if err == nil || !strings.Contains(err.Error(), "aperture diameter") {
		t.Fatalf("1 m telescope: %v", err)
	}
	if m.Meta.Training["steps"] == "" {
		t.Errorf("built-in weights carry no training record")
	}
}
