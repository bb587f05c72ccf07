package restore

import (
	"os"
	"path/filepath"
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
