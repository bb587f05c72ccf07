package restore

import (
	"os"
	"path/filepath"
	"testing"

	"github.com/astrogo/fitsio"
)

// TestReadFrameStack reads a dark stack stored the way cameras write it
// (BITPIX 16, BZERO = 32768 for unsigned data, FITS Standard 4.0 §5.3) and
// checks that ReadFrame returns the mean over the third axis.
func TestReadFrameStack(t *testing.T) {
	const nx, ny, nz = 3, 2, 2
	stored := make([]int16, nx*ny*nz)
	want := make([]float64, nx*ny)
	for i := range stored {
		stored[i] = int16(i*100 - 32768)
		want[i%(nx*ny)] += float64(i*100) / nz
	}
	path := filepath.Join(t.TempDir(), "dark.fits")
	w, err := os.Create(path)
	if err != nil {
		t.Fatal(err)
	}
	f, err := fitsio.Create(w)
	if err != nil {
		t.Fatal(err)
	}
	hdu, err := fitsio.NewPrimaryHDU(fitsio.NewHeader([]fitsio.Card{{Name: "BZERO", Value: 32768}}, fitsio.IMAGE_HDU, 16, []int{nx, ny, nz}))
	if err != nil {
		t.Fatal(err)
	}
	if err := hdu.Write(stored); err != nil {
		t.Fatal(err)
	}
	if err := f.Write(hdu); err != nil {
		t.Fatal(err)
	}
	if err := f.Close(); err != nil {
		t.Fatal(err)
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	got, gx, gy, err := ReadFrame(path)
	if err != nil {
		t.Fatal(err)
	}
	if gx != nx || gy != ny {
		t.Fatalf("size %d×%d, want %d×%d", gx, gy, nx, ny)
	}
	for i := range want {
		if got[i] != want[i] {
			t.Errorf("pixel %d = %g, want %g", i, got[i], want[i])
		}
	}
}
