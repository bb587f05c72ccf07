package site

import (
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"testing"

	"pdwave/model/modes"
)

const demoPath = "../../testdata/demo-site.yaml"

func TestLoadDemo(t *testing.T) {
	s, err := Load(demoPath)
	if err != nil {
		t.Fatal(err)
	}
	tel := s.Telescope()
	// Values of the invented demo site (contract "Shared decisions").
	if tel.Diameter != 0.5 || tel.Obscuration != 0.15 || tel.Spiders != 0 || tel.FocalRatio != 40 {
		t.Errorf("telescope %+v", tel)
	}
	if math.Abs(tel.Wavelength-600e-9) > 1e-20 {
		t.Errorf("wavelength %g m", tel.Wavelength)
	}
	// 0.120 arcsec = 0.12·π/648000 rad = 5.8178e-7 rad (definition of the arcsecond).
	if math.Abs(tel.PixelScale-5.8177641733e-7) > 1e-16 {
		t.Errorf("pixel scale %g rad", tel.PixelScale)
	}
	// Nyquist λ/(2D) = 600e-9/1.0 rad = 0.12376 arcsec ≥ 0.120 (Shannon
	// sampling of the incoherent cut-off D/λ; Goodman).
	if err := tel.CheckSampling(s.Sizes.Patch); err != nil {
		t.Errorf("demo sampling: %v", err)
	}
	if s.DiversityPV() != 1 {
		t.Errorf("diversity %g", s.DiversityPV())
	}
	// r0(600 nm) = 0.08·(600/500)^(6/5) = 0.08·1.24456 = 0.099565 m
	// (r0 ∝ λ^(6/5), Fried 1966; power computed by hand).
	if r0 := s.R0Median(); math.Abs(r0-0.099565) > 2e-6 || s.MedianR0() != r0 {
		t.Errorf("r0 at 600 nm = %g m, want 0.099565", r0)
	}
	if s.Seeing.OuterScaleM != 30 || s.OuterScale() != 30 || s.Seeing.R0Spread != 1.3 {
		t.Errorf("seeing %+v", s.Seeing)
	}
	wantLayers := []Layer{{0, 0.6, 5, 30}, {3000, 0.25, 12, 100}, {10000, 0.15, 25, 250}}
	if len(s.Seeing.Layers) != 3 {
		t.Fatalf("layers %+v", s.Seeing.Layers)
	}
	for i, l := range s.Seeing.Layers {
		w := wantLayers[i]
		if l.HeightM != w.HeightM || math.Abs(l.Weight-w.Weight) > 1e-15 || l.WindMS != w.WindMS || l.WindDirDeg != w.WindDirDeg {
			t.Errorf("layer %d: %+v, want %+v", i, l, w)
		}
	}
	if math.Abs(s.Seeing.Layers[1].WindDirection()-100*math.Pi/180) > 1e-15 {
		t.Errorf("wind direction %g rad", s.Seeing.Layers[1].WindDirection())
	}
	if c := s.Camera; c.FrameIntervalS != 0.005 || c.PhotonsPerPixel != 10000 || c.ReadNoiseE != 5 || c.BitDepth != 16 {
		t.Errorf("camera %+v", c)
	}
	if z := s.Sizes; z.Patch != 64 || z.Frames != 16 || z.Modes != 36 || z.Basis != modes.KindKL {
		t.Errorf("sizes %+v", z)
	}
	o := s.Optics()
	if o.Wavelength.V != tel.Wavelength || o.PixelScale.V != tel.PixelScale || o.Diameter.V != 0.5 || o.Obscuration.V != 0.15 || o.DiversityPV.V != 1 || !o.Obscuration.Set {
		t.Errorf("optics %+v", o)
	}
}

// minimal is a valid file with only the required fields.
const minimal = `
telescope: {diameter_m: 1, wavelength_nm: 500, pixel_scale_arcsec: 0.05, diversity_pv_waves: -0.5}
seeing: {r0_500nm_m: 0.1, layers: [{height_m: 0, weight: 1}]}
camera: {frame_interval_s: 0.01}
`

func TestDefaults(t *testing.T) {
	s, err := Parse([]byte(minimal))
	if err != nil {
		t.Fatal(err)
	}
	if s.Sizes != (Sizes{Patch: 64, Frames: 16, Modes: 36, Basis: modes.KindKL}) {
		t.Errorf("default sizes %+v", s.Sizes)
	}
	if s.Seeing.R0Spread != 1 || s.Seeing.OuterScaleM != 0 || !math.IsInf(s.OuterScale(), 1) {
		t.Errorf("default seeing %+v", s.Seeing)
	}
	if s.Camera.PhotonsPerPixel != 0 || s.Camera.BitDepth != 0 || s.Tel.Obscuration != 0 {
		t.Errorf("defaults %+v %+v", s.Camera, s.Tel)
	}
	if s.DiversityPV() != -0.5 {
		t.Errorf("diversity %g", s.DiversityPV())
	}
	// Without spread, DrawR0 is the median at 500 nm.
	if r := s.DrawR0(rand.New(rand.NewPCG(1, 2))); r != 0.1 {
		t.Errorf("DrawR0 = %g, want 0.1", r)
	}
}

// TestFocusShift: 1 wave PV at F/40 and 600 nm is Δz = 8·λ·F#² =
// 8·600e-9·1600 m = 7.68 mm (PV defocus Δz/(8 F#²) of a focus shift Δz,
// from memory).
func TestFocusShift(t *testing.T) {
	data, err := os.ReadFile(demoPath)
	if err != nil {
		t.Fatal(err)
	}
	y := strings.Replace(string(data), "diversity_pv_waves: 1.0", "focus_shift_mm: 7.68", 1)
	s, err := Parse([]byte(y))
	if err != nil {
		t.Fatal(err)
	}
	if d := s.DiversityPV(); math.Abs(d-1) > 1e-12 {
		t.Errorf("diversity from focus shift = %g waves, want 1", d)
	}
}

func TestLayerWeightsNormalised(t *testing.T) {
	y := strings.Replace(minimal, "layers: [{height_m: 0, weight: 1}]",
		"layers: [{height_m: 0, weight: 0.33}, {height_m: 5000, weight: 0.33}, {height_m: 9000, weight: 0.33}]", 1)
	s, err := Parse([]byte(y))
	if err != nil {
		t.Fatal(err)
	}
	sum := 0.0
	for _, l := range s.Seeing.Layers {
		sum += l.Weight
	}
	if math.Abs(sum-1) > 1e-15 || math.Abs(s.Seeing.Layers[0].Weight-1.0/3) > 1e-15 {
		t.Errorf("weights not normalised: %+v", s.Seeing.Layers)
	}
}

// TestDrawR0: the draws are log-normal with median R0Median() and
// standard deviation of ln r0 equal to ln(r0_spread). With n = 20000 draws
// the standard error of the sample median of ln r0 is 1.2533·σ/√n ≈ 0.0023
// and of its standard deviation σ/√(2n) ≈ 0.0013 (large-sample formulas,
// common practice); the tolerances are about 4 standard errors.
func TestDrawR0(t *testing.T) {
	s, err := Load(demoPath)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(7, 11))
	const n = 20000
	logs := make([]float64, n)
	mean := 0.0
	for i := range logs {
		r := s.DrawR0(rng)
		if !(r > 0) {
			t.Fatalf("draw %d: r0 = %g", i, r)
		}
		logs[i] = math.Log(r)
		mean += logs[i] / n
	}
	v := 0.0
	for _, l := range logs {
		v += (l - mean) * (l - mean) / (n - 1)
	}
	sort.Float64s(logs)
	med := (logs[n/2-1] + logs[n/2]) / 2
	if d := med - math.Log(s.R0Median()); math.Abs(d) > 0.01 {
		t.Errorf("median ln r0 off by %g", d)
	}
	if d := math.Sqrt(v) - math.Log(1.3); math.Abs(d) > 0.006 {
		t.Errorf("std of ln r0 = %g, want ln 1.3 = %g", math.Sqrt(v), math.Log(1.3))
	}
	// Deterministic for a seed.
	a := s.DrawR0(rand.New(rand.NewPCG(3, 4)))
	b := s.DrawR0(rand.New(rand.NewPCG(3, 4)))
	if a != b {
		t.Errorf("same seed gave %g and %g", a, b)
	}
}

func TestBadYAML(t *testing.T) {
	demo, err := os.ReadFile(demoPath)
	if err != nil {
		t.Fatal(err)
	}
	sub := func(old, new string) string {
		if !strings.Contains(string(demo), old) {
			t.Fatalf("demo file has no %q", old)
		}
		return strings.Replace(string(demo), old, new, 1)
	}
	cases := []struct {
		name, yaml, want string
	}{
		{"empty", "", "empty"},
		{"unknown field", sub("diameter_m: 0.50", "diamter_m: 0.50"), "field diamter_m not found"},
		{"unknown section", string(demo) + "\noptics: {}\n", "field optics not found"},
		{"negative diameter", sub("diameter_m: 0.50", "diameter_m: -0.5"), "telescope.diameter_m"},
		{"missing diameter", sub("diameter_m: 0.50", ""), "telescope.diameter_m"},
		{"wrong type", sub("diameter_m: 0.50", "diameter_m: big"), "cannot unmarshal"},
		{"wrong type int", sub("patch: 64", "patch: 64.5"), "sizes.patch must be an integer"},
		{"string for int", sub("bit_depth: 16", "bit_depth: sixteen"), "camera.bit_depth must be an integer"},
		{"list for number", sub("frames: 16", "frames: [16]"), "cannot unmarshal"},
		{"bad basis", sub("basis: kl", "basis: fourier"), "sizes.basis"},
		{"negative patch", sub("patch: 64", "patch: -64"), "sizes.patch"},
		{"zero frames", sub("frames: 16", "frames: 0"), "sizes.frames"},
		{"negative modes", sub("modes: 36", "modes: -3"), "sizes.modes"},
		{"obscuration 1", sub("obscuration: 0.15", "obscuration: 1.0"), "telescope.obscuration"},
		{"spiders without width", sub("spiders: 0", "spiders: 4"), "spider_width_m"},
		{"both diversities", sub("# focus_shift_mm: 7.68", "focus_shift_mm: 7.68"), "not both"},
		{"no diversity", sub("diversity_pv_waves: 1.0", ""), "diversity is missing"},
		{"zero diversity", sub("diversity_pv_waves: 1.0", "diversity_pv_waves: 0"), "non-zero"},
		{"focus shift without F#", strings.NewReplacer("diversity_pv_waves: 1.0", "focus_shift_mm: 7.68", "focal_ratio: 40", "").Replace(string(demo)), "focal_ratio"},
		{"undersampled", sub("pixel_scale_arcsec: 0.120", "pixel_scale_arcsec: 0.2"), "pixel_scale_arcsec"},
		{"weights", sub("weight: 0.15", "weight: 0.5"), "sum to 1.35"},
		{"negative weight", sub("weight: 0.15", "weight: -0.15"), "layers[2].weight"},
		{"duplicate key", sub("r0_spread: 1.3", "r0_spread: 1.3\n  layers: []"), "already defined"},
		{"empty layers", minimalWith("layers: [{height_m: 0, weight: 1}]", "layers: []"), "at least one layer"},
		{"spread below 1", sub("r0_spread: 1.3", "r0_spread: 0.5"), "r0_spread"},
		{"NaN r0", sub("r0_500nm_m: 0.08", "r0_500nm_m: .nan"), "r0_500nm_m"},
		{"Inf wavelength", sub("wavelength_nm: 600", "wavelength_nm: .inf"), "wavelength_nm"},
		{"wavelength in m", sub("wavelength_nm: 600", "wavelength_nm: 6.0e-7"), "not an optical wavelength"},
		{"negative outer scale", sub("outer_scale_m: 30", "outer_scale_m: -1"), "outer_scale_m"},
		{"bit depth", sub("bit_depth: 16", "bit_depth: 64"), "camera.bit_depth"},
		{"no frame interval", sub("frame_interval_s: 0.005", "frame_interval_s: 0"), "camera.frame_interval_s"},
		{"two documents", string(demo) + "\n---\nsizes: {}\n", "more than one"},
		{"not a map", "- 1\n- 2\n", "cannot unmarshal"},
		{"tabs", "telescope:\n\tdiameter_m: 1\n", "yaml"},
		{"geometry 45°", string(demo) + "\ngeometry: {defocused: {rotate_deg: 45}}\n", "geometry.defocused.rotate_deg: must be a multiple of 90"},
		{"geometry focused rotation", string(demo) + "\ngeometry: {focused: {rotate_deg: 90.5}}\n", "geometry.focused.rotate_deg"},
		{"geometry NaN offset", string(demo) + "\ngeometry: {defocused: {offset_x_px: .nan}}\n", "geometry.defocused.offset_x_px"},
		{"geometry huge offset", string(demo) + "\ngeometry: {defocused: {offset_y_px: 1000}}\n", "geometry.defocused.offset_y_px"},
		{"geometry magnification", string(demo) + "\ngeometry: {defocused: {magnification: 1.5}}\n", "geometry.defocused.magnification: must be 0.9 to 1.1"},
		{"geometry magnification 0", string(demo) + "\ngeometry: {defocused: {magnification: 0}}\n", "geometry.defocused.magnification"},
		{"geometry offset for focused", string(demo) + "\ngeometry: {focused: {offset_x_px: 1}}\n", "field offset_x_px not found"},
		{"geometry typo", string(demo) + "\ngeometry: {defocused: {flipx: true}}\n", "field flipx not found"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			s, err := Parse([]byte(tc.yaml))
			if err == nil {
				t.Fatalf("no error; got %+v", s)
			}
			if !strings.Contains(err.Error(), tc.want) {
				t.Errorf("error %q does not mention %q", err, tc.want)
			}
		})
	}
}

// TestGeometry: the geometry section becomes the reader's burst.Geometry;
// absent, it is the identity.
func TestGeometry(t *testing.T) {
	demo, err := os.ReadFile(demoPath)
	if err != nil {
		t.Fatal(err)
	}
	s, err := Parse(demo)
	if err != nil {
		t.Fatal(err)
	}
	if !s.CameraGeometry().Identity() {
		t.Errorf("no geometry section: %v", s.CameraGeometry())
	}
	s, err = Parse(append(demo, "\ngeometry:\n  focused: {flip_y: true}\n  defocused: {transpose: true, rotate_deg: -90, flip_x: true, offset_x_px: 0.4, offset_y_px: -1.25, magnification: 1.002}\n"...))
	if err != nil {
		t.Fatal(err)
	}
	g := s.CameraGeometry()
	if err := g.Validate(); err != nil {
		t.Fatal(err)
	}
	if got, want := g.String(), "1:FY 2:T,R270,FX dx=0.4 dy=-1.25 m=1.002"; got != want {
		t.Errorf("geometry %s, want %s", got, want)
	}
}

func minimalWith(old, new string) string { return strings.Replace(minimal, old, new, 1) }

func TestLoadErrors(t *testing.T) {
	dir := t.TempDir()
	if _, err := Load(filepath.Join(dir, "nope.yaml")); err == nil || !strings.Contains(err.Error(), "nope.yaml") {
		t.Errorf("missing file: %v", err)
	}
	p := filepath.Join(dir, "bad.yaml")
	if err := os.WriteFile(p, []byte("telescope: {diameter_m: -1}\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := Load(p); err == nil || !strings.Contains(err.Error(), "bad.yaml") || !strings.Contains(err.Error(), "diameter_m") {
		t.Errorf("bad file: %v", err)
	}
}

// FuzzParse: Parse returns a validated site or an error, never panics.
func FuzzParse(f *testing.F) {
	demo, err := os.ReadFile(demoPath)
	if err != nil {
		f.Fatal(err)
	}
	f.Add(demo)
	f.Add([]byte(minimal))
	f.Add([]byte("telescope: &a {diameter_m: 1}\nseeing: *a\n"))
	f.Add([]byte("sizes: {patch: 99999999999999999999}\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		s, err := Parse(data)
		if err != nil {
			return
		}
		if err := s.Validate(); err != nil {
			t.Errorf("parsed site fails Validate again: %v", err)
		}
		if r := s.R0Median(); !(r > 0) || math.IsInf(r, 0) {
			t.Errorf("R0Median = %g", r)
		}
		if d := s.DiversityPV(); d == 0 || math.IsNaN(d) {
			t.Errorf("DiversityPV = %g", d)
		}
	})
}
