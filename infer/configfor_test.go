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

// TestConfigFor checks ConfigFor end to end on the demo site file and
// burst-header optics (the full precedence table is instrument's
// TestResolvePrecedence): the site alone, header values winning over the
// site (an explicit 0 obscuration included), flags winning over both, and
// the wavelength scaling of the expected D/r0: r0 ∝ λ^(6/5) (Fried 1966,
// JOSA 56, 1372; Roddier 1981, Progress in Optics 19, 281), so D/r0 at
// twice the site's wavelength is 2^(−6/5) times the site's.
func TestConfigFor(t *testing.T) {
	st, err := site.Load("../testdata/demo-site.yaml")
	if err != nil {
		t.Fatal(err)
	}
	def := st.Optics()
	cfg, err := ConfigFor(instrument.Sources{Site: st.Instrument()}, 7)
	if err != nil {
		t.Fatal(err)
	}
	if cfg.Patch != st.Sizes.Patch || cfg.Modes != st.Sizes.Modes || cfg.Basis != st.Sizes.Basis || cfg.Frames != 7 {
		t.Errorf("sizes %d px, %d %s modes, %d frames; want the site's %d, %d %s and 7",
			cfg.Patch, cfg.Modes, cfg.Basis, cfg.Frames, st.Sizes.Patch, st.Sizes.Modes, st.Sizes.Basis)
	}
	if cfg.Telescope != st.Telescope() || cfg.Notes["wavelength"] != instrument.FromSite {
		t.Errorf("telescope %+v (%v), want the site's %+v", cfg.Telescope, cfg.Notes, st.Telescope())
	}
	if dr0 := def.Diameter.V / st.R0Median(); math.Abs(cfg.DOverR0-dr0) > 1e-12*dr0 {
		t.Errorf("D/r0 = %g, want D/R0Median = %g", cfg.DOverR0, dr0)
	}
	if len(cfg.Diversity) != 2 || cfg.Diversity[0] != 0 || cfg.Diversity[1] != def.DiversityPV.V {
		t.Errorf("diversity %v, want [0 %g]", cfg.Diversity, def.DiversityPV.V)
	}

	hdr := HeaderInstrument(burst.Optics{Wavelength: instrument.Some(2 * def.Wavelength.V), Diameter: instrument.Some(2 * def.Diameter.V),
		DiversityPV: instrument.Some(0.5), Obscuration: instrument.Some(0.0)}) // an explicit zero in the header
	cfg, err = ConfigFor(instrument.Sources{Header: hdr, Site: st.Instrument()}, 7)
	if err != nil {
		t.Fatal(err)
	}
	if cfg.Telescope.Wavelength != 2*def.Wavelength.V || cfg.Telescope.Diameter != 2*def.Diameter.V ||
		cfg.Telescope.PixelScale != def.PixelScale.V || cfg.Diversity[1] != 0.5 || cfg.Telescope.Obscuration != 0 {
		t.Errorf("optics %+v, diversity %v: header values must win, the site fill the rest", cfg.Telescope, cfg.Diversity)
	}
	if want := 2 * def.Diameter.V / (st.R0Median() * math.Pow(2, 6.0/5)); math.Abs(cfg.DOverR0-want) > 1e-12*want {
		t.Errorf("D/r0 at 2λ = %g, want %g (r0 ∝ λ^(6/5))", cfg.DOverR0, want)
	}

	fl := instrument.Partial{Patch: instrument.Some(48), Modes: instrument.Some(10), Basis: instrument.Some(modes.KindZernike), DOverR0: instrument.Some(3.0)}
	cfg, err = ConfigFor(instrument.Sources{Flags: fl, Header: hdr, Site: st.Instrument()}, 7)
	if err != nil {
		t.Fatal(err)
	}
	if cfg.Patch != 48 || cfg.Modes != 10 || cfg.Basis != modes.KindZernike || cfg.DOverR0 != 3 {
		t.Errorf("flags not applied: %d px, %d %s modes, D/r0 %g", cfg.Patch, cfg.Modes, cfg.Basis, cfg.DOverR0)
	}
	if s := cfg.Settings()["from"]; !strings.Contains(s, "patch=flags") || !strings.Contains(s, "obscuration=header") {
		t.Errorf("provenance %q does not say where the values came from", s)
	}

	_, err = ConfigFor(instrument.Sources{Header: HeaderInstrument(burst.Optics{Wavelength: def.Wavelength})}, 7)
	if err == nil || !strings.Contains(err.Error(), "pixel scale") || !strings.Contains(err.Error(), "diversity") {
		t.Errorf("missing optics without a site: error %v, want one naming the pixel scale and the diversity", err)
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
