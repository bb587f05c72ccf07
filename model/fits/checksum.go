package fits

import (
	"bufio"
	"encoding/binary"
	"fmt"
	"io"
	"strconv"
	"strings"
)

// The checksum convention: Seaman, Pence & Rots, "FITS Checksum Proposal"
// (2002), adopted as FITS Standard 4.0 Appendix J. DATASUM is the 32-bit
// ones' complement sum of the data unit as big-endian 32-bit words, written
// as an unsigned decimal string; CHECKSUM is 16 ASCII characters chosen so
// that the ones' complement sum of the whole HDU (header and data) is
// negative zero (all bits set).

// onesSum accumulates a 32-bit ones' complement sum of big-endian 32-bit
// words (Appendix J.1: carries out of bit 31 wrap around into bit 0).
type onesSum struct {
	sum  uint64 // unfolded: at most 2^32 words added between folds
	n    uint64 // words added since the last fold
	tail [4]byte
	k    int // bytes in tail
}

// Write adds p to the sum; it never fails.
func (s *onesSum) Write(p []byte) (int, error) {
	n := len(p)
	for s.k > 0 && len(p) > 0 {
		s.tail[s.k] = p[0]
		s.k, p = s.k+1, p[1:]
		if s.k == 4 {
			s.add(binary.BigEndian.Uint32(s.tail[:]))
			s.k = 0
		}
	}
	for len(p) >= 4 {
		s.add(binary.BigEndian.Uint32(p))
		p = p[4:]
	}
	s.k = copy(s.tail[:], p)
	return n, nil
}

func (s *onesSum) add(w uint32) {
	s.sum += uint64(w)
	if s.n++; s.n == 1<<31 {
		s.sum, s.n = uint64(fold(s.sum)), 0
	}
}

// value returns the folded 32-bit sum. The bytes written must be a whole
// number of words (FITS blocks always are).
func (s *onesSum) value() uint32 { return fold(s.sum) }

// fold wraps the carries of a 64-bit accumulator into 32 bits.
func fold(v uint64) uint32 {
	for v>>32 != 0 {
		v = v&0xffffffff + v>>32
	}
	return uint32(v)
}

// onesAdd is the ones' complement sum of a and b.
func onesAdd(a, b uint32) uint32 { return fold(uint64(a) + uint64(b)) }

// encodeChecksum returns the 16-character ASCII encoding of v (Appendix
// J.2; the proposal's char_encode): each byte of v is spread over four
// characters of 0x30 + byte/4 (the first also + byte%4), pairs are nudged
// away from the punctuation 0x3a–0x40 and 0x5b–0x60 keeping their sum, and
// the result is rotated right by one character because the value starts
// in the 12th column of its card (byte 11 ≡ 3 mod 4).
func encodeChecksum(v uint32) string {
	excluded := func(c int) bool { return (c >= 0x3a && c <= 0x40) || (c >= 0x5b && c <= 0x60) }
	var asc [16]byte
	for i := 0; i < 4; i++ {
		b := int(v>>(8*(3-i))) & 0xff
		q, r := b/4+0x30, b%4
		ch := [4]int{q + r, q, q, q}
		for changed := true; changed; {
			changed = false
			for j := 0; j < 4; j += 2 {
				for excluded(ch[j]) || excluded(ch[j+1]) {
					ch[j]++
					ch[j+1]--
					changed = true
				}
			}
		}
		for j := 0; j < 4; j++ {
			asc[4*j+i] = byte(ch[j])
		}
	}
	var out [16]byte
	for i := range out {
		out[i] = asc[(i+15)%16]
	}
	return string(out[:])
}

// dataSum returns the ones' complement sum of the data unit u writes
// (padding is zeros and adds nothing).
func dataSum(u dataUnit) (uint32, error) {
	var s onesSum
	w := bufio.NewWriter(&s)
	if err := u.put(w); err != nil {
		return 0, err
	}
	if err := w.Flush(); err != nil {
		return 0, err
	}
	if pad := roundBlock(u.size) - u.size; pad > 0 {
		s.Write(make([]byte, pad))
	}
	return s.value(), nil
}

// checksumHeader returns the header bytes of u with DATASUM and CHECKSUM
// as its last cards (Appendix J.3): DATASUM the decimal data sum, CHECKSUM
// the encoded complement of the HDU's sum computed with CHECKSUM =
// '0000000000000000', so that the finished HDU sums to negative zero.
func checksumHeader(u dataUnit) ([]byte, error) {
	ds, err := dataSum(u)
	if err != nil {
		return nil, err
	}
	h := u.h
	must(h.add(Card{Key: "DATASUM", Value: strconv.FormatUint(uint64(ds), 10), Comment: "data unit checksum (FITS 4.0 Appendix J)"}))
	must(h.add(Card{Key: "CHECKSUM", Value: strings.Repeat("0", 16), Comment: "HDU checksum (FITS 4.0 Appendix J)"}))
	hdr := h.bytes()
	at := -1
	for i := 0; i+cardSize <= len(hdr); i += cardSize {
		if string(hdr[i:i+10]) == "CHECKSUM= " {
			at = i + 11
		}
	}
	if at < 0 || hdr[at-1] != '\'' {
		return nil, fmt.Errorf("internal error: no CHECKSUM card in the header")
	}
	var s onesSum
	s.Write(hdr)
	copy(hdr[at:at+16], encodeChecksum(^onesAdd(s.value(), ds)))
	return hdr, nil
}

// hduSum returns the ones' complement sum of r to its end (tests and
// verification: a valid HDU sums to 0xffffffff).
func hduSum(r io.Reader) (uint32, error) {
	var s onesSum
	if _, err := io.Copy(&s, r); err != nil {
		return 0, err
	}
	return s.value(), nil
}
