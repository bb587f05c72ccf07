package fits

import (
	"bytes"
	"testing"

	"github.com/astrogo/fitsio"
)

// TestImagePixels reads images of every integer BITPIX and of BITPIX −64
// and checks physical = BZERO + BSCALE·stored (FITS Standard 4.0 §5.3,
// eq. 3), including the camera convention of unsigned 16-bit data stored
// as BITPIX 16 with BZERO = 32768 (FITS Standard 4.0 §5.3, Table 11; the
// table number from memory).
func TestImagePixels(t *testing.T) {
	type tc struct {
		name        string
		bitpix      int
		data        any
		zero, scale any // nil = keyword absent
		want        []float64
	}
	cases := []tc{
		{"uint8", 8, []byte{0, 1, 200, 255, 7, 9}, nil, nil, []float64{0, 1, 200, 255, 7, 9}},
		{"int16 unsigned", 16, []int16{-32768, -1, 0, 1, 32767, 5}, 32768, nil, []float64{0, 32767, 32768, 32769, 65535, 32773}},
		{"int32 scaled", 32, []int32{-2, 0, 3, 4, 5, 6}, 1.5, 0.5, []float64{0.5, 1.5, 3, 3.5, 4, 4.5}},
		{"int64", 64, []int64{1, 2, 3, 4, 5, 6}, nil, nil, []float64{1, 2, 3, 4, 5, 6}},
		{"float32 zero scale means 1", -32, []float32{0.5, 1, 2, 4, 8, 16}, nil, 0.0, []float64{0.5, 1, 2, 4, 8, 16}},
		{"float64", -64, []float64{-1, 0, 1, 2, 3, 1e300}, nil, nil, []float64{-1, 0, 1, 2, 3, 1e300}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var cards []fitsio.Card
			if c.zero != nil {
				cards = append(cards, fitsio.Card{Name: "BZERO", Value: c.zero})
			}
			if c.scale != nil {
				cards = append(cards, fitsio.Card{Name: "BSCALE", Value: c.scale})
			}
			var buf bytes.Buffer
			f, err := fitsio.Create(&buf)
			if err != nil {
				t.Fatal(err)
			}
			hdu, err := fitsio.NewPrimaryHDU(fitsio.NewHeader(cards, fitsio.IMAGE_HDU, c.bitpix, []int{3, 2}))
			if err != nil {
				t.Fatal(err)
			}
			if err := hdu.Write(c.data); err != nil {
				t.Fatal(err)
			}
			if err := f.Write(hdu); err != nil {
				t.Fatal(err)
			}
			if err := f.Close(); err != nil {
				t.Fatal(err)
			}
			r, err := fitsio.Open(bytes.NewReader(buf.Bytes()))
			if err != nil {
				t.Fatal(err)
			}
			defer r.Close()
			got, err := ImagePixels(r.HDU(0).(fitsio.Image))
			if err != nil {
				t.Fatal(err)
			}
			if len(got) != len(c.want) {
				t.Fatalf("%d values, want %d", len(got), len(c.want))
			}
			for i := range got {
				if got[i] != c.want[i] {
					t.Errorf("pixel %d = %g, want %g", i, got[i], c.want[i])
				}
			}
		})
	}
}
