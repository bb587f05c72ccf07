package infer

import (
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"pdwave/model/burst"
	"pdwave/model/fits"
	"pdwave/model/instrument"
	"pdwave/model/modes"
	"pdwave/model/site"
)

// TestConfigFor checks the precedence of ConfigFor (override, then burst
// header, then site file, then defaults) and the wavelength scaling of the
// expected D/r0: r0 ∝ λ^(6/5) (Fried 1966, JOSA 56, 1372; Roddier 1981,
// Progress in Optics 19, 281), so D/r0 at twice the site's wavelength is
// 2^(−6/5) times the site's.
func TestConfigFor(t *testing.T) {
	st, err := site.Load("../testdata/demo-site.yaml")
	if err != nil {
		t.Fatal(err)
	}
	def := st.Optics()

	// Site only.
	cfg, err := ConfigFor(st, burst.Optics{}, 7, Overrides{})
	if err != nil {
		t.Fatal(err)
	}
	if cfg.Patch != st.Sizes.Patch || cfg.Modes != st.Sizes.Modes || cfg.Basis != st.Sizes.Basis || cfg.Frames != 7 {
		t.Errorf("sizes %d px, %d %s modes, %d frames; want the site's %d, %d %s and 7",
			cfg.Patch, cfg.Modes, cfg.Basis, cfg.Frames, st.Sizes.Patch, st.Sizes.Modes, st.Sizes.Basis)
	}
	if cfg.Telescope != st.Telescope() {
		t.Errorf("telescope %+v, want the site's %+v", cfg.Telescope, st.Telescope())
	}
	dr0 := def.Diameter.V / st.R0Median()
	if math.Abs(cfg.DOverR0-dr0) > 1e-12*dr0 {
		t.Errorf("D/r0 = %g, want D/R0Median = %g", cfg.DOverR0, dr0)
	}
	if len(cfg.DiversityPV) != 2 || cfg.DiversityPV[0] != 0 || cfg.DiversityPV[1] != def.DiversityPV.V {
		t.Errorf("diversity %v, want [0 %g]", cfg.DiversityPV, def.DiversityPV.V)
	}

	// Header values win over the site; D/r0 follows the header wavelength.
	hdr := burst.Optics{Wavelength: instrument.Some(2 * def.Wavelength.V), Diameter: instrument.Some(2 * def.Diameter.V), DiversityPV: instrument.Some(0.5)}
	cfg, err = ConfigFor(st, hdr, 7, Overrides{})
	if err != nil {
		t.Fatal(err)
	}
	if cfg.Telescope.Wavelength != hdr.Wavelength.V || cfg.Telescope.Diameter != hdr.Diameter.V ||
		cfg.Telescope.PixelScale != def.PixelScale.V || cfg.DiversityPV[1] != 0.5 {
		t.Errorf("optics %+v, diversity %v: header values must win, the site fill the rest", cfg.Telescope, cfg.DiversityPV)
	}
	want := hdr.Diameter.V / (st.R0Median() * math.Pow(2, 6.0/5))
	if math.Abs(cfg.DOverR0-want) > 1e-12*want {
		t.Errorf("D/r0 at 2λ = %g, want %g (r0 ∝ λ^(6/5))", cfg.DOverR0, want)
	}

	// Overrides win over everything.
	ov := Overrides{Patch: 48, Modes: 10, Basis: modes.KindZernike, DOverR0: 3}
	cfg, err = ConfigFor(st, hdr, 7, ov)
	if err != nil {
		t.Fatal(err)
	}
	if cfg.Patch != 48 || cfg.Modes != 10 || cfg.Basis != modes.KindZernike || cfg.DOverR0 != 3 {
		t.Errorf("overrides not applied: %d px, %d %s modes, D/r0 %g", cfg.Patch, cfg.Modes, cfg.Basis, cfg.DOverR0)
	}

	// No site: the header must give the optics; sizes and D/r0 default.
	full := burst.Optics{Wavelength: def.Wavelength, PixelScale: def.PixelScale, Diameter: def.Diameter, DiversityPV: instrument.Some(1.0)}
	cfg, err = ConfigFor(nil, full, 7, Overrides{})
	if err != nil {
		t.Fatal(err)
	}
	d := DefaultConfig()
	if cfg.Patch != d.Patch || cfg.Modes != d.Modes || cfg.Basis != d.Basis || cfg.DOverR0 != d.DOverR0 {
		t.Errorf("without a site: %d px, %d %s modes, D/r0 %g; want the defaults", cfg.Patch, cfg.Modes, cfg.Basis, cfg.DOverR0)
	}
	_, err = ConfigFor(nil, burst.Optics{Wavelength: def.Wavelength}, 7, Overrides{})
	if err == nil || !strings.Contains(err.Error(), "CDELT1") || !strings.Contains(err.Error(), "DIVPV") {
		t.Errorf("missing optics without a site: error %v, want one naming CDELT1 and DIVPV", err)
	}
}

// TestCoefficientTableCSV checks the CSV layout of WriteCoefficients: sorted
// "# key: value" lines after the title, the notes, the column header and
// one row per frame, and that no temporary file is left.
func TestCoefficientTableCSV(t *testing.T) {
	dir := t.TempDir()
	tab := &CoefficientTable{
		Basis:  modes.KindKL,
		Native: [][]float64{{0.5, -1}, {0.25, 2e-7}},
		Noll:   [][]float64{{1, 2}, {3, 4}},
		Title:  "pdwave test fit", Settings: map[string]string{"b": "2", "a": "1"}, Notes: []string{"iterations: 3"},
	}
	img := &fits.Image{Dims: []int{2, 2}, Data: []float64{1, 2, 3, 4}}
	csvPath, err := WriteCoefficients(filepath.Join(dir, "f.fits"), img, tab)
	if err != nil {
		t.Fatal(err)
	}
	if csvPath != filepath.Join(dir, "f.csv") {
		t.Errorf("CSV path %s, want f.csv next to the FITS file", csvPath)
	}
	got, err := os.ReadFile(csvPath)
	if err != nil {
		t.Fatal(err)
	}
	want := "# pdwave test fit\n# a: 1\n# b: 2\n# iterations: 3\nframe,native_1,native_2,noll_2,noll_3\n1,0.5,-1,1,2\n2,0.25,2e-07,3,4\n"
	if string(got) != want {
		t.Errorf("CSV:\n%s\nwant:\n%s", got, want)
	}
	ents, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	if len(ents) != 2 {
		var names []string
		for _, e := range ents {
			names = append(names, e.Name())
		}
		t.Errorf("files %v, want f.fits and f.csv only", names)
	}
}
