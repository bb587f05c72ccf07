package burst

import (
	"testing"

	"pdwave/model/fits"
)

// TestPatchAndCutoutCards cuts a 2×2 patch at (1, 2) out of a 4×5 burst and
// checks the pixels of both channels and the moved reference pixel: a
// cut-out starting at 0-based column x0 has CRPIX1' = CRPIX1 − x0 (FITS
// Standard 4.0 §8.2, section number from memory: CRPIXj is a 1-based pixel
// coordinate along axis j).
func TestPatchAndCutoutCards(t *testing.T) {
	b := New(4, 5, 2)
	for c := range b.Data {
		for f := range b.Data[c] {
			for i := range b.Data[c][f] {
				b.Data[c][f][i] = float64(1000*c + 100*f + i)
			}
		}
	}
	p := b.Patch(1, 2, 2)
	for c := range p {
		for f := range p[c] {
			want := []float64{9, 10, 13, 14} // y·4 + x for y = 2, 3 and x = 1, 2
			for i, v := range p[c][f] {
				if w := float64(1000*c+100*f) + want[i]; v != w {
					t.Errorf("channel %d frame %d pixel %d = %g, want %g", c, f, i, v, w)
				}
			}
		}
	}
	cards := []fits.Card{
		{Key: "CRPIX1", Value: 2.5}, {Key: "CRPIX2", Value: 3}, {Key: "CRPIX3", Value: 1},
		{Key: "CTYPE4", Value: "STOKES"}, {Key: "DATE-OBS", Value: "2026-01-01"},
		{Key: "CRPIX1", Value: "not a number"},
	}
	got := CutoutCards(cards, 1, 2)
	want := []fits.Card{{Key: "CRPIX1", Value: 1.5}, {Key: "CRPIX2", Value: 1.0}, {Key: "DATE-OBS", Value: "2026-01-01"}}
	if len(got) != len(want) {
		t.Fatalf("cards %v, want %v", got, want)
	}
	for i := range got {
		if got[i].Key != want[i].Key || got[i].Value != want[i].Value {
			t.Errorf("card %d = %v, want %v", i, got[i], want[i])
		}
	}
	if cards[0].Value != 2.5 {
		t.Errorf("CutoutCards modified its input")
	}
	defer func() {
		if recover() == nil {
			t.Errorf("Patch outside the frames did not panic")
		}
	}()
	b.Patch(3, 0, 2)
}
