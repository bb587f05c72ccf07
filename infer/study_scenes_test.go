package infer

import (
	"bytes"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"

	"pdwave/model/instrument"
	"pdwave/model/site"
	"pdwave/simulate"
)

// smallStudy is a cheap study set-up: the demo site's simulator and a fit
// of 10 KL modes, at most 15 iterations, on one 32 px case of 4 frames.
func smallStudy(t *testing.T) (Config, simulate.Config, []StudyCase) {
	t.Helper()
	st, err := site.Load("../testdata/demo-site.yaml")
	if err != nil {
		t.Fatal(err)
	}
	cfg := DefaultConfig()
	cfg.Telescope = demoTelescope()
	cfg.Modes = 10
	cfg.Stop.Iterations = 15
	scfg, _, err := simulate.ConfigFromSite(st, instrument.Partial{})
	if err != nil {
		t.Fatal(err)
	}
	return cfg, scfg, []StudyCase{{DOverR0: 4, Patch: 32, Frames: 4, DiversityPV: 1}}
}

// shippedImages loads the real scenes of testdata/scenes.
func shippedImages() (*simulate.ImageScene, error) {
	dir, err := simulate.FindSceneDir()
	if err != nil {
		return nil, err
	}
	return simulate.LoadSceneDir(dir)
}

// withoutTime returns the row with its wall time cleared (the only value
// that may differ between runs).
func withoutTime(r StudyRow) StudyRow {
	r.Seconds = 0
	return r
}

// TestStudyScenesRows: a study over granulation and two real images gives
// one row per scene (2 bursts each) and a pooled "real" row (4 bursts)
// whose mean and maximum are those of the two image rows; the rows of
// different scenes differ (the object changes the fit); values are sane;
// the rows do not depend on the worker count nor on which other scenes
// run; and the CSV reads back to the same rows at its 4 digits.
func TestStudyScenesRows(t *testing.T) {
	cfg, sim, cases := smallStudy(t)
	scenes, err := SimulatedStudyScenes(sim, "granulation,brick,gravel", shippedImages)
	if err != nil {
		t.Fatal(err)
	}
	rows, err := StudyScenes(cfg, cases, 2, scenes, 7, 1, nil)
	if err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	if err := WriteStudySummary(&buf, rows); err != nil {
		t.Fatal(err)
	}
	t.Logf("\n%s", buf.String())
	checkSceneRows(t, rows)

	two, err := StudyScenes(cfg, cases, 2, scenes, 7, 2, nil)
	if err != nil {
		t.Fatal(err)
	}
	alone, err := StudyScenes(cfg, cases, 2, scenes[2:], 7, 2, nil)
	if err != nil {
		t.Fatal(err)
	}
	for i := range rows {
		if withoutTime(two[i]) != withoutTime(rows[i]) {
			t.Errorf("row %d differs between 1 and 2 workers:\n%+v\n%+v", i, rows[i], two[i])
		}
	}
	if withoutTime(alone[0]) != withoutTime(rows[2]) {
		t.Errorf("gravel alone differs from gravel among other scenes:\n%+v\n%+v", alone[0], rows[2])
	}
	checkRoundTrip(t, rows)
}

// checkSceneRows checks the labels, counts, pooling and ranges of the rows
// of TestStudyScenesRows.
func checkSceneRows(t *testing.T, rows []StudyRow) {
	t.Helper()
	var labels []string
	for _, r := range rows {
		labels = append(labels, r.Scene)
	}
	if want := []string{"granulation", "brick", "gravel", "real"}; !slices.Equal(labels, want) {
		t.Fatalf("rows %q, want %q", labels, want)
	}
	for i, r := range rows {
		want := 2
		if r.Scene == "real" {
			want = 4
		}
		if r.Bursts != want {
			t.Errorf("%s: %d bursts, want %d", r.Scene, r.Bursts, want)
		}
		// Finite and positive; 15 iterations of a small fit need not beat
		// no correction on every real image, but stay within a few times
		// the true variance (common practice).
		if !(r.Err10 > 0 && r.Err10 < 5 && r.Err21 > 0 && r.Err21 < 5) {
			t.Errorf("%s: errors %.3g (2–10), %.3g (2–21) out of range", r.Scene, r.Err10, r.Err21)
		}
		if !(r.Err10Median <= r.Err10Max && r.Err10 <= r.Err10Max && r.Err21Median <= r.Err21Max) {
			t.Errorf("%s: median or mean above the maximum: %+v", r.Scene, r)
		}
		if r.Err10Over1 < 0 || r.Err10Over1 > 1 || r.Err21Over1 < 0 || r.Err21Over1 > 1 {
			t.Errorf("%s: shares above 1 out of [0, 1]: %g, %g", r.Scene, r.Err10Over1, r.Err21Over1)
		}
		if i > 0 && i < 3 && rows[i].Err10 == rows[0].Err10 {
			t.Errorf("%s and granulation have the same error %.6g: scenes not separated", r.Scene, r.Err10)
		}
	}
	// Granulation, the scene the fit is made for, beats no correction
	// (common practice: error < 1).
	if rows[0].Err10 >= 1 {
		t.Errorf("granulation error %.3g over Noll 2–10, want < 1", rows[0].Err10)
	}
	b, g, real := rows[1], rows[2], rows[3]
	if m := (b.Err10 + g.Err10) / 2; math.Abs(real.Err10-m) > 1e-12 {
		t.Errorf("pooled real mean %.6g, want the mean of brick and gravel %.6g", real.Err10, m)
	}
	if m := math.Max(b.Err21Max, g.Err21Max); real.Err21Max != m {
		t.Errorf("pooled real maximum %.6g, want %.6g", real.Err21Max, m)
	}
}

// checkRoundTrip writes the rows as CSV and reads them back.
func checkRoundTrip(t *testing.T, rows []StudyRow) {
	t.Helper()
	var buf bytes.Buffer
	if err := WriteStudyCSV(&buf, rows); err != nil {
		t.Fatal(err)
	}
	t.Logf("\n%s", buf.String())
	back, err := ReadStudyCSV(&buf)
	if err != nil {
		t.Fatal(err)
	}
	if len(back) != len(rows) {
		t.Fatalf("read %d rows, wrote %d", len(back), len(rows))
	}
	for i := range rows {
		w, g := rows[i], back[i]
		if w.Scene != g.Scene || w.StudyCase != g.StudyCase || w.Bursts != g.Bursts {
			t.Errorf("row %d: read %+v, wrote %+v", i, g, w)
		}
		wf, gf := studyFloats(&w), studyFloats(&g)
		for k := range wf {
			// 4 significant digits: relative rounding ≤ 5e-4.
			if d := math.Abs(*wf[k] - *gf[k]); d > 5e-4*math.Abs(*wf[k]) {
				t.Errorf("row %d %s: read %g, wrote %g", i, studyColumns[6+k], *gf[k], *wf[k])
			}
		}
	}
}

// flatScene is a constant scene that spends k deviates of its stream.
type flatScene struct{ k int }

func (f flatScene) Draw(dst []float64, nx, ny int, _ float64, rng *rand.Rand) (string, error) {
	for range f.k {
		rng.Float64()
	}
	for i := range dst {
		dst[i] = 1
	}
	return "flat", nil
}

// TestSceneSourceSharedStream: two scenes that draw the same object but
// spend different numbers of deviates give the same burst from the same
// seed (screens and noise shared across scenes).
func TestSceneSourceSharedStream(t *testing.T) {
	_, sim, cases := smallStudy(t)
	var data [2][][][]float64
	for i, k := range []int{0, 1000} {
		d, _, err := SimulatedSceneSource(sim, flatScene{k})(cases[0], rand.New(rand.NewPCG(3, 3)))
		if err != nil {
			t.Fatal(err)
		}
		data[i] = d
	}
	for c := range data[0] {
		for f := range data[0][c] {
			if !slices.Equal(data[0][c][f], data[1][c][f]) {
				t.Fatalf("channel %d frame %d differs between scenes spending 0 and 1000 deviates", c, f)
			}
		}
	}
}

// TestStudySpread: mean, median (midpoint for even counts), sample
// standard deviation, maximum and share above 1 of small samples
// (values worked by hand).
func TestStudySpread(t *testing.T) {
	m, med, sd, hi, over := spread([]float64{0.5, 2, 0.1, 1.5})
	if math.Abs(m-1.025) > 1e-12 || math.Abs(med-1) > 1e-12 || hi != 2 || over != 0.5 {
		t.Errorf("spread = %g %g %g %g, want 1.025 1 2 0.5", m, med, hi, over)
	}
	// Sample variance Σ(x−m)²/(n−1) = (0.275625+0.950625+0.855625+0.225625)/3.
	if want := math.Sqrt(2.3075 / 3); math.Abs(sd-want) > 1e-12 {
		t.Errorf("sd = %g, want %g", sd, want)
	}
	if m, med, sd, hi, over := spread([]float64{0.3}); m != 0.3 || med != 0.3 || sd != 0 || hi != 0.3 || over != 0 {
		t.Errorf("one value: %g %g %g %g %g", m, med, sd, hi, over)
	}
}

// TestStudySelections: scans and scene selections resolve to the expected
// cases and labels, and bad entries are refused; the images are not loaded
// for granulation alone.
func TestStudySelections(t *testing.T) {
	grid := StudyGrid()
	if len(grid) != 14 || grid[0] != StudyReference {
		t.Fatalf("grid of %d cases starting %+v", len(grid), grid[0])
	}
	quick, err := StudyScans([]string{"ref", "d-over-r0"})
	if err != nil || !slices.Equal(quick, grid[:5]) {
		t.Errorf("ref,d-over-r0 = %+v (%v), want the first 5 grid cases", quick, err)
	}
	for _, bad := range [][]string{{"bogus"}, {"patch", "patch"}, {"all", "patch"}} {
		if _, err := StudyScans(bad); err == nil {
			t.Errorf("StudyScans(%q) accepted", bad)
		}
	}
	im := func(name string) simulate.SceneImage {
		return simulate.SceneImage{Name: name, Data: []float64{1, 2, 3, 4}, Nx: 2, Ny: 2}
	}
	loads := 0
	images := func() (*simulate.ImageScene, error) {
		loads++
		return &simulate.ImageScene{Images: []simulate.SceneImage{im("a.fits"), im("b.fits")}}, nil
	}
	_, sim, _ := smallStudy(t)
	for sel, want := range map[string]string{
		"granulation": "granulation", "granulation,real": "granulation a b", "b.fits,mix": "b mix", "a": "a",
	} {
		sc, err := SimulatedStudyScenes(sim, sel, images)
		if err != nil {
			t.Errorf("%q: %v", sel, err)
			continue
		}
		var got []string
		for _, s := range sc {
			got = append(got, s.Name)
		}
		if strings.Join(got, " ") != want {
			t.Errorf("%q gave %q, want %q", sel, got, want)
		}
	}
	if loads != 3 {
		t.Errorf("images loaded %d times, want 3 (not for granulation alone)", loads)
	}
	for _, bad := range []string{"", "granulation,", "c", "real,a", "granulation,granulation"} {
		if _, err := SimulatedStudyScenes(sim, bad, images); err == nil {
			t.Errorf("selection %q accepted", bad)
		}
	}
}
