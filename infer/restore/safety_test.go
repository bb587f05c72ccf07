package restore

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestProductAppearsTogether checks the FITS product and its sidecars are
// one set: when one sidecar cannot be put in place (a folder stands where
// the CSV goes), neither the FITS file nor the other sidecars appear, and
// no temporary is left. Planted: writing the four files one after the
// other left restored_preview.png behind and failed.
func TestProductAppearsTogether(t *testing.T) {
	f := fakeField(t, 96, 96, 2)
	opt := Options{Patch: 48, Overlap: 12, Workers: 1, NewEngine: func() (Engine, error) { return fakeEngine{}, nil }}
	p := runFull(t, f, opt)
	dir := t.TempDir()
	out := filepath.Join(dir, "restored.fits")
	if err := os.MkdirAll(filepath.Join(dir, "restored_patches.csv", "x"), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := p.Write(out, "test"); err == nil {
		t.Fatal("write over a folder succeeded")
	}
	ents, _ := os.ReadDir(dir)
	if len(ents) != 1 {
		var n []string
		for _, e := range ents {
			n = append(n, e.Name())
		}
		t.Errorf("left %v, want only the folder in the way", n)
	}
	os.RemoveAll(filepath.Join(dir, "restored_patches.csv"))
	if err := p.Write(out, "test"); err != nil {
		t.Fatal(err)
	}
	for _, q := range ProductPaths(out) {
		if _, err := os.Stat(q); err != nil {
			t.Errorf("%s missing: %v", q, err)
		}
	}
}

// TestDiffKeys checks what a key comparison reports: nothing when only the
// file names differ (moved inputs), and the item that differs otherwise.
// Planted: comparing the names as well refused the moved inputs and failed.
func TestDiffKeys(t *testing.T) {
	base := Identity{
		Files:    []FileID{{"burst", "a.fits", "sha256:" + strings.Repeat("1", 64)}, {"site", "s.yaml", "sha256:" + strings.Repeat("2", 64)}},
		Weights:  "sha256:" + strings.Repeat("3", 64),
		Settings: map[string]string{"patch": "64", "polish": "3"},
	}
	moved := base
	moved.Files = []FileID{{"burst", "/elsewhere/a.fits", base.Files[0].Hash}, {"site", "t.yaml", base.Files[1].Hash}}
	if d := DiffKeys(base.Key(), moved.Key(), "then", "now"); d != "" {
		t.Errorf("moved inputs reported as %q", d)
	}
	other := base
	other.Files = []FileID{{"burst", "a.fits", "sha256:" + strings.Repeat("4", 64)}, base.Files[1]}
	other.Settings = map[string]string{"patch": "48", "polish": "3"}
	other.Weights = "none"
	d := DiffKeys(base.Key(), other.Key(), "in the journal", "now")
	for _, want := range []string{"burst file's content differs", "a.fits (sha256 111111111111…) in the journal", "setting patch differs: 64 in the journal, 48 now", "the weights' content differs"} {
		if !strings.Contains(d, want) {
			t.Errorf("%q does not say %q", d, want)
		}
	}
	if d := DiffKeys(base.Key()+"range 0 10\n", base.Key()+"range 10 20\n", "a", "b"); !strings.Contains(d, "share of patches") {
		t.Errorf("range difference reported as %q", d)
	}
}
