package burst

import (
	"encoding/binary"
	"os"
	"path/filepath"
	"testing"

	"pdwave/model/fits"
)

// FuzzRead: Read's decoder must return an error, never panic or allocate
// beyond the input and the limit, whatever the bytes. Seeded with small
// valid files, plain and compressed.
func FuzzRead(f *testing.F) {
	dir := f.TempDir()
	seed := func(name string, write func(p string) error) {
		p := filepath.Join(dir, name)
		if err := write(p); err != nil {
			f.Fatal(err)
		}
		data, err := os.ReadFile(p)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(data)
		f.Add(data[:len(data)/2])
	}
	seed("burst.fits", func(p string) error { return Write(p, testBurst(3, 2, 2, 2), fits.Provenance("fuzz", nil)) })
	seed("plain.fits", func(p string) error {
		b := New(2, 2, 1)
		return Write(p, b, nil)
	})
	seed("chan.fits", func(p string) error {
		return fits.WriteFile(p, &fits.Image{Dims: []int{2, 2, 2}, Data: make([]float64, 8), Cards: []fits.Card{{Key: "DIVPV", Value: 1.0}}})
	})
	seed("u16.fits", func(p string) error {
		h, err := fits.EncodeHeader([]fits.Card{{Key: "SIMPLE", Value: true}, {Key: "BITPIX", Value: 16}, {Key: "NAXIS", Value: 4},
			{Key: "NAXIS1", Value: 2}, {Key: "NAXIS2", Value: 1}, {Key: "NAXIS3", Value: 1}, {Key: "NAXIS4", Value: 2},
			{Key: "BZERO", Value: 32768}, {Key: "BLANK", Value: 7}, {Key: "WAVELNTH", Value: 600}, {Key: "WAVEUNIT", Value: -9}})
		if err != nil {
			return err
		}
		raw := make([]byte, blockSize)
		binary.BigEndian.PutUint16(raw, 0x8001)
		return os.WriteFile(p, append(h, raw...), 0o644)
	})
	// Compressed files written by astropy (testdata, see tile_test.go in
	// model/fits): the tile decoder is fuzzed through the burst reader.
	if seeds, _ := filepath.Glob("../fits/testdata/*.fits*"); len(seeds) > 0 {
		for _, p := range seeds {
			if data, err := os.ReadFile(p); err == nil {
				f.Add(data)
			}
		}
	}
	lim := fits.Limits{MaxBytes: 1 << 24}
	f.Fuzz(func(t *testing.T, data []byte) {
		p, err := decodePart("fuzz.fits", data, Options{Limits: lim})
		if err != nil {
			return
		}
		b, err := assemble([]*part{p})
		if err == nil {
			b, err = b.finish("fuzz.fits", []*part{p}, Options{Limits: lim})
		}
		if err == nil {
			if err := b.Validate(); err != nil {
				t.Errorf("decoded burst fails Validate: %v", err)
			}
		}
	})
}
