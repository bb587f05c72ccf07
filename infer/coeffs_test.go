package infer

import (
	"os"
	"path/filepath"
	"testing"

	"pdwave/model/fits"
)

// TestWriteCoefficientsKeepsOlderProduct checks the FITS file and its CSV
// are one set: when the CSV cannot be put in place (a folder stands where
// it goes), an older FITS product is left as it was. Planted: the former
// sequence (write the FITS file, then remove it when the CSV failed) lost
// the older file and failed.
func TestWriteCoefficientsKeepsOlderProduct(t *testing.T) {
	dir := t.TempDir()
	fitsPath := filepath.Join(dir, "f.fits")
	if err := os.WriteFile(fitsPath, []byte("older"), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.MkdirAll(filepath.Join(dir, "f.csv", "x"), 0o755); err != nil {
		t.Fatal(err)
	}
	tab := &CoefficientTable{Basis: "kl", Native: [][]float64{{0.1, 0.2}}, Noll: [][]float64{{0.1, 0.2}}, Title: "t"}
	if _, err := WriteCoefficients(fitsPath, &fits.Image{}, tab); err == nil {
		t.Fatal("write with a folder in the CSV's place succeeded")
	}
	if got, _ := os.ReadFile(fitsPath); string(got) != "older" {
		t.Errorf("older FITS product replaced or removed: %q", got)
	}
	if ents, _ := os.ReadDir(dir); len(ents) != 2 {
		t.Errorf("%d entries left, want the older file and the folder", len(ents))
	}
}
