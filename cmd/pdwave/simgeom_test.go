package main

import (
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"pdwave/model/burst"
	"pdwave/model/site"
)

// TestSimulateGeometryRoundTrip: bursts simulated for a site with a camera
// geometry are in the common orientation and carry PDGEOM, so reading them
// back with the same site's geometry leaves them as written (with a note).
// Planted: simulate without the PDGEOM card fails (the defocused channel is
// transposed and mirrored on reading).
func TestSimulateGeometryRoundTrip(t *testing.T) {
	dir := t.TempDir()
	repo, _ := filepath.Abs(filepath.Join("..", ".."))
	demo, err := os.ReadFile(filepath.Join(repo, "testdata", "demo-site.yaml"))
	if err != nil {
		t.Fatal(err)
	}
	geomSite := filepath.Join(dir, "geom-site.yaml")
	if err := os.WriteFile(geomSite, append(demo, "\ngeometry:\n  defocused: {transpose: true, flip_x: true}\n"...), 0o644); err != nil {
		t.Fatal(err)
	}
	if code, _, stderr := runCLI(t, repo, "simulate", "--site", geomSite, "--out", filepath.Join(dir, "sim"), "--frames", "2"); code != 0 {
		t.Fatalf("simulate: exit %d\n%s", code, stderr)
	}
	st, err := site.Load(geomSite)
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(dir, "sim", "burst-0001.fits")
	plain, err := burst.Read(path)
	if err != nil {
		t.Fatal(err)
	}
	got, err := burst.ReadFiles([]string{path}, burst.Options{Geometry: st.CameraGeometry()})
	if err != nil {
		t.Fatal(err)
	}
	for c := range got.Data {
		for f := range got.Data[c] {
			if !slices.Equal(got.Data[c][f], plain.Data[c][f]) {
				t.Fatalf("channel %d frame %d turned on reading with the site it was simulated for", c+1, f+1)
			}
		}
	}
	if got.Geometry != "" || !strings.Contains(strings.Join(got.Notes, "\n"), "already oriented") {
		t.Errorf("geometry %q, notes %q: want none applied and a note", got.Geometry, got.Notes)
	}
}
