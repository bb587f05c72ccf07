package fits

import (
	"bytes"
	"encoding/binary"
	"fmt"
	"os"
	"runtime"
	"strings"
	"testing"
)

// setCard replaces the value of the first card with keyword key in the
// header bytes of data (a copy is returned).
func setCard(t *testing.T, data []byte, key, value string) []byte {
	t.Helper()
	out := append([]byte(nil), data...)
	k := []byte(fmt.Sprintf("%-8s= ", key))
	for p := 0; p+80 <= len(out); p += 80 {
		if bytes.Equal(out[p:p+10], k) {
			copy(out[p+10:p+80], fmt.Sprintf("%20s", value)+strings.Repeat(" ", 50))
			return out
		}
	}
	t.Fatalf("no card %s", key)
	return nil
}

// replaceCard replaces the card with keyword key by the card image card.
func replaceCard(t *testing.T, data []byte, key, card string) []byte {
	t.Helper()
	out := append([]byte(nil), data...)
	k := []byte(fmt.Sprintf("%-8s= ", key))
	for p := 0; p+80 <= len(out); p += 80 {
		if bytes.Equal(out[p:p+10], k) {
			copy(out[p:p+80], fmt.Sprintf("%-80s", card))
			return out
		}
	}
	t.Fatalf("no card %s", key)
	return nil
}

// TestHostileCompressed: sizes read from a compressed image's header and
// heap (ZNAXISn, ZTILEn, NAXIS2, PCOUNT, THEAP, array descriptors,
// ZCMPTYPE, ZBITPIX, BYTEPIX) that do not fit the file or the limit give
// one clear error naming the problem, never a panic or a large
// allocation (64 MB budget). The base file is testdata/i16_RICE_1.fits
// (astropy). Planted: without the compression-ratio check "ZNAXIS huge"
// allocates 2.4 GB and fails the budget.
func TestHostileCompressed(t *testing.T) {
	base, err := os.ReadFile("testdata/i16_RICE_1.fits")
	if err != nil {
		t.Fatal(err)
	}
	heap := func(data []byte, f func(desc []byte)) []byte {
		out := append([]byte(nil), data...)
		// The table data start at the second HDU's data unit: primary
		// (one block) and the table header (one block).
		f(out[2*blockSize : 2*blockSize+8])
		return out
	}
	cases := []struct {
		name string
		data []byte
		want string
	}{
		{"ZNAXIS huge", setCard(t, setCard(t, base, "ZNAXIS1", "5000000"), "ZTILE1", "5000000"), "compression ratio"},
		{"ZNAXIS beyond the limit", setCard(t, setCard(t, base, "ZNAXIS1", "4000000000000"), "ZTILE1", "4000000000000"), "limit"},
		{"ZTILE 0", setCard(t, base, "ZTILE2", "0"), "ZTILE2"},
		{"tiles do not match rows", setCard(t, base, "ZTILE2", "2"), "rows"},
		{"NAXIS2 beyond the file", setCard(t, base, "NAXIS2", "1000000000"), "truncated"},
		{"PCOUNT beyond the file", setCard(t, base, "PCOUNT", "99999999"), "truncated"},
		{"THEAP beyond the data", replaceCard(t, base, "ZTENSION", "THEAP   =              9999999"), "THEAP"},
		{"descriptor beyond the heap", heap(base, func(d []byte) { binary.BigEndian.PutUint32(d[4:], 1<<30) }), "outside"},
		{"negative descriptor", heap(base, func(d []byte) { binary.BigEndian.PutUint32(d, 1<<31) }), "outside"},
		{"unknown compression", setCard(t, base, "ZCMPTYPE", "'LZW_9'"), "LZW_9"},
		{"HCOMPRESS", setCard(t, base, "ZCMPTYPE", "'HCOMPRESS_1'"), "not supported"},
		{"bad ZBITPIX", setCard(t, base, "ZBITPIX", "12"), "ZBITPIX"},
		{"bad BYTEPIX", setCard(t, base, "ZVAL2", "3"), "BYTEPIX"},
		{"truncated heap", base[:len(base)-blockSize+100], "truncated"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var before, after runtime.MemStats
			runtime.ReadMemStats(&before)
			f, err := Decode(c.data, Limits{})
			if err == nil {
				_, err = f.HDUs[1].Image()
			}
			runtime.ReadMemStats(&after)
			if err == nil || !strings.Contains(err.Error(), c.want) {
				t.Errorf("error %v, want mention of %q", err, c.want)
			}
			if n := after.TotalAlloc - before.TotalAlloc; n > 64<<20 {
				t.Errorf("allocated %d bytes", n)
			}
		})
	}
}
