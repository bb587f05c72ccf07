package main

import (
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"pdwave/model/burst"
	"pdwave/model/fits"
)

// TestGeometryCLI: a burst whose defocused camera stores its image
// mirrored and transposed is read, with the site file's geometry section
// saying so, as the burst before: predict gives the same coefficients and
// restore the same field (recording PDGEOM); without the geometry the
// coefficients differ. A
// burst with one NaN pixel is read (filled, noted) instead of refused.
// Planted: burstOptions without the site's geometry fails the first
// comparison.
func TestGeometryCLI(t *testing.T) {
	dir := t.TempDir()
	p := func(name string) string { return filepath.Join(dir, name) }
	repo, _ := filepath.Abs(filepath.Join("..", ".."))
	demoSite := filepath.Join(repo, "testdata", "demo-site.yaml")
	site, err := os.ReadFile(demoSite)
	if err != nil {
		t.Fatal(err)
	}
	geomSite := p("geom-site.yaml")
	if err := os.WriteFile(geomSite, append(site, "\ngeometry:\n  defocused: {transpose: true, flip_x: true}\n"...), 0o644); err != nil {
		t.Fatal(err)
	}
	run := func(args ...string) string {
		t.Helper()
		code, _, stderr := runCLI(t, repo, args...)
		if code != 0 {
			t.Fatalf("%v: exit %d\n%s", args, code, stderr)
		}
		return stderr
	}
	// A simulated field (restore's offset fit needs a scene, not noise).
	run("simulate", "--site", demoSite, "--out", p("sim"), "--field", "96", "--frames", "3", "--seed", "4")
	b, err := burst.Read(p("sim/burst-0001.fits"))
	if err != nil {
		t.Fatal(err)
	}
	b.Truth, b.Object = nil, nil
	if err := burst.Write(p("burst.fits"), b, nil); err != nil {
		t.Fatal(err)
	}
	// As stored: the inverse of "transpose, then mirror x" is "mirror x,
	// then transpose": stored(x, y) = orig(n−1−y, x).
	n := b.Nx
	for f, im := range b.Data[1] {
		st := make([]float64, len(im))
		for y := 0; y < n; y++ {
			for x := 0; x < n; x++ {
				st[y*n+x] = im[x*n+(n-1-y)]
			}
		}
		b.Data[1][f] = st
	}
	if err := burst.Write(p("stored.fits"), b, nil); err != nil {
		t.Fatal(err)
	}
	run("predict", p("burst.fits"), "--site", demoSite, "--out", p("ref.csv"))
	stderr := run("predict", p("stored.fits"), "--site", geomSite, "--out", p("geom.csv"))
	run("predict", p("stored.fits"), "--site", demoSite, "--out", p("nogeom.csv"))
	want := csvRows(t, p("ref.csv"))
	if csvRows(t, p("geom.csv")) != want {
		t.Error("stored burst read with the site's geometry: coefficients differ from the burst's")
	}
	if !strings.Contains(stderr, "camera geometry applied: 1:id 2:T,FX") {
		t.Errorf("no geometry note: %s", stderr)
	}
	if csvRows(t, p("nogeom.csv")) == want {
		t.Error("stored burst read without geometry gives the burst's coefficients")
	}
	run("restore", p("burst.fits"), "--site", demoSite, "--out", p("r-ref.fits"), "--quiet")
	run("restore", p("stored.fits"), "--site", geomSite, "--out", p("r-geom.fits"), "--quiet")
	ref, geom := readPrimary(t, p("r-ref.fits")), readPrimary(t, p("r-geom.fits"))
	refPix, err := ref.Image()
	if err != nil {
		t.Fatal(err)
	}
	geomPix, err := geom.Image()
	if err != nil {
		t.Fatal(err)
	}
	for i, v := range refPix {
		if math.Abs(geomPix[i]-v) > 1e-6*math.Abs(v) {
			t.Fatalf("restored pixel %d: %g with geometry, %g from the burst", i, geomPix[i], v)
		}
	}
	if c, ok := geom.Header.Get("PDGEOM"); !ok || c.Value != "1:id 2:T,FX" {
		t.Errorf("PDGEOM = %v (%v)", c.Value, ok)
	}
	// One NaN pixel: filled and noted, not refused.
	const m, frames = 64, 2
	nan := noise(m*m*frames*2, 5)
	nan[m*m*frames+17] = float32(math.NaN())
	writeFITS(t, p("nan.fits"), []int{m, m, frames, 2}, nan, demoOptics, 0)
	if stderr := run("predict", p("nan.fits"), "--site", demoSite, "--out", p("nan.csv")); !strings.Contains(stderr, "masked = 0 px in channel 1, 1 px in channel 2") {
		t.Errorf("NaN pixel: no masking note in %s", stderr)
	}
}

// readPrimary reads the primary HDU of a FITS file.
func readPrimary(t *testing.T, path string) *fits.Unit {
	t.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	f, err := fits.Decode(data, fits.Limits{})
	if err != nil {
		t.Fatal(err)
	}
	return f.HDUs[0]
}
