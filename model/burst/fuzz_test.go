package burst

import (
	"encoding/binary"
	"os"
	"path/filepath"
	"testing"
)

// FuzzRead: Read's decoder must return an error, never panic or allocate
// beyond the input, whatever the bytes. Seeded with small valid files.
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
	seed("burst.fits", func(p string) error { return Write(p, testBurst(3, 2, 2, 2), Provenance("fuzz", nil)) })
	seed("plain.fits", func(p string) error {
		b := New(2, 2, 1)
		return Write(p, b, nil)
	})
	seed("chan.fits", func(p string) error {
		return WriteFile(p, &Image{Dims: []int{2, 2, 2}, Data: make([]float64, 8), Cards: []Card{{Key: "DIVPV", Value: 1.0}}})
	})
	seed("u16.fits", func(p string) error {
		h := newHeader()
		for _, c := range []Card{{Key: "SIMPLE", Value: true}, {Key: "BITPIX", Value: 16}, {Key: "NAXIS", Value: 4},
			{Key: "NAXIS1", Value: 2}, {Key: "NAXIS2", Value: 1}, {Key: "NAXIS3", Value: 1}, {Key: "NAXIS4", Value: 2},
			{Key: "BZERO", Value: 32768}, {Key: "BLANK", Value: 7}, {Key: "WAVELNTH", Value: 600}, {Key: "WAVEUNIT", Value: -9}} {
			must(h.add(c))
		}
		raw := make([]byte, blockSize)
		binary.BigEndian.PutUint16(raw, 0x8001)
		return os.WriteFile(p, append(h.bytes(), raw...), 0o644)
	})
	f.Fuzz(func(t *testing.T, data []byte) {
		if b, err := decodeBurst(data); err == nil {
			if err := b.Validate(); err != nil {
				t.Errorf("decoded burst fails Validate: %v", err)
			}
		}
		decodeChannel(data, 1)
	})
}
