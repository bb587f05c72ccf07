package restore

import (
	"errors"
	"fmt"
	"io"
	"os"
	"strconv"
	"strings"
)

// checkFITSSizes walks the headers of the FITS file f and checks that the
// data every HDU declares fits in the file, so a damaged or foreign file
// cannot make the decoder allocate more than the file holds. Sizes follow
// FITS Standard 4.0 §4.4.1.1 (eq. 1 and 2): |BITPIX|/8 · GCOUNT ·
// (PCOUNT + NAXIS1 ⋯ NAXISn), padded to 2880-byte blocks.
func checkFITSSizes(f *os.File) error {
	st, err := f.Stat()
	if err != nil {
		return err
	}
	size := st.Size()
	const block = 2880
	var pos int64
	buf := make([]byte, block)
	for hdu := 0; pos < size; hdu++ {
		kv := map[string]string{}
		for blocks := 0; ; blocks++ {
			if blocks > 10000 {
				return fmt.Errorf("HDU %d: header without END", hdu+1)
			}
			if _, err := f.ReadAt(buf, pos); err != nil {
				if errors.Is(err, io.EOF) {
					return fmt.Errorf("HDU %d: truncated header", hdu+1)
				}
				return err
			}
			pos += block
			if headerCards(buf, kv) {
				break
			}
		}
		n, err := dataBytes(kv)
		if err != nil {
			return fmt.Errorf("HDU %d: %w", hdu+1, err)
		}
		if n > size-pos {
			return fmt.Errorf("HDU %d declares %d data bytes, the file holds %d more: truncated or damaged", hdu+1, n, size-pos)
		}
		pos += (n + block - 1) / block * block
	}
	return nil
}

// headerCards adds the keyword values of one header block to kv and
// reports whether the block holds END.
func headerCards(b []byte, kv map[string]string) bool {
	for i := 0; i+80 <= len(b); i += 80 {
		key := strings.TrimSpace(string(b[i : i+8]))
		if key == "END" {
			return true
		}
		if string(b[i+8:i+10]) == "= " {
			v := string(b[i+10 : i+80])
			if j := strings.IndexByte(v, '/'); j >= 0 && !strings.Contains(v[:j], "'") {
				v = v[:j]
			}
			kv[key] = strings.TrimSpace(v)
		}
	}
	return false
}

// dataBytes is the unpadded data size an HDU's keywords declare.
func dataBytes(kv map[string]string) (int64, error) {
	num := func(k string, def int64) (int64, error) {
		v, ok := kv[k]
		if !ok {
			return def, nil
		}
		n, err := strconv.ParseInt(v, 10, 64)
		if err != nil || n < 0 && k != "BITPIX" {
			return 0, fmt.Errorf("keyword %s = %q is not a valid integer", k, v)
		}
		return n, nil
	}
	bitpix, err := num("BITPIX", 0)
	if err != nil {
		return 0, err
	}
	naxis, err := num("NAXIS", 0)
	if err != nil || naxis > 999 {
		return 0, fmt.Errorf("keyword NAXIS = %q is not valid", kv["NAXIS"])
	}
	if naxis == 0 {
		return 0, nil
	}
	prod := int64(1)
	for i := int64(1); i <= naxis; i++ {
		n, err := num("NAXIS"+strconv.FormatInt(i, 10), -1)
		if err != nil || n < 0 {
			return 0, fmt.Errorf("keyword NAXIS%d is missing or not valid", i)
		}
		if n > 0 && prod > (1<<50)/n {
			return 0, errors.New("declared data too large")
		}
		prod *= n
	}
	pcount, err := num("PCOUNT", 0)
	if err != nil {
		return 0, err
	}
	gcount, err := num("GCOUNT", 1)
	if err != nil {
		return 0, err
	}
	if pcount > 1<<50 || gcount > 1<<20 {
		return 0, errors.New("declared data too large")
	}
	w := bitpix
	if w < 0 {
		w = -w
	}
	return w / 8 * gcount * (pcount + prod), nil
}
