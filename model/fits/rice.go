package fits

import (
	"errors"
	"fmt"
)

// errShortRice is returned when a Rice-coded tile ends early.
var errShortRice = errors.New("RICE_1 data end before the tile is complete")

// bitReader reads big-endian bits from a byte slice, never past its end.
type bitReader struct {
	buf  []byte
	pos  int    // next byte
	acc  uint64 // bits not yet consumed, right-aligned
	nacc uint   // number of bits in acc
}

// bits returns the next n ≤ 32 bits.
func (r *bitReader) bits(n uint) (uint64, error) {
	for r.nacc < n {
		if r.pos >= len(r.buf) {
			return 0, errShortRice
		}
		r.acc = r.acc<<8 | uint64(r.buf[r.pos])
		r.pos++
		r.nacc += 8
	}
	r.nacc -= n
	v := r.acc >> r.nacc
	r.acc &= 1<<r.nacc - 1
	return v, nil
}

// unary returns the number of 0 bits before the next 1 bit, consuming
// both; the run is bounded by the data.
func (r *bitReader) unary() (uint64, error) {
	n := uint64(0)
	for {
		if r.nacc == 0 {
			// Skip whole zero bytes quickly.
			for r.pos < len(r.buf) && r.buf[r.pos] == 0 {
				r.pos++
				n += 8
			}
		}
		b, err := r.bits(1)
		if err != nil {
			return 0, err
		}
		if b == 1 {
			return n, nil
		}
		n++
	}
}

// riceDecode decodes n integers of bytepix bytes (1, 2 or 4) coded with the
// Rice algorithm of the tiled-image convention (FITS Standard 4.0 §10.4.1;
// Pence, Seaman & White 2009 and White & Greenfield 1999): the first value
// raw in bytepix bytes, then blocks of blockSize differences, each block
// starting with an fs field of 3, 4 or 5 bits (bytepix 1, 2, 4): fs − 1 < 0
// means every difference of the block is zero, fs − 1 = 6, 14 or 25 means
// the differences are stored raw in 8·bytepix bits, otherwise each is a
// unary-coded high part followed by fs − 1 low bits. Differences are
// mapped to non-negative integers as 2d for d ≥ 0 and −2d − 1 for d < 0,
// and summed modulo 2^(8·bytepix). Values of bytepix 1 are unsigned,
// others signed. It errors on truncated or malformed data, never reading
// past data.
func riceDecode(data []byte, n, bytepix, blockSize int) ([]int64, error) {
	var fsBits, fsMax uint
	switch bytepix {
	case 1:
		fsBits, fsMax = 3, 6
	case 2:
		fsBits, fsMax = 4, 14
	case 4:
		fsBits, fsMax = 5, 25
	default:
		return nil, fmt.Errorf("RICE_1 with BYTEPIX = %d is not supported (1, 2 or 4)", bytepix)
	}
	if blockSize < 1 || blockSize > 1<<16 {
		return nil, fmt.Errorf("RICE_1 BLOCKSIZE = %d is invalid", blockSize)
	}
	nbits := uint(8 * bytepix)
	if len(data) < bytepix {
		return nil, errShortRice
	}
	var last uint64
	for i := 0; i < bytepix; i++ {
		last = last<<8 | uint64(data[i])
	}
	r := &bitReader{buf: data[bytepix:]}
	out := make([]int64, n)
	for i := 0; i < n; i += blockSize {
		if err := r.riceBlock(out[i:min(i+blockSize, n)], &last, fsBits, fsMax, nbits, bytepix); err != nil {
			return nil, err
		}
	}
	return out, nil
}

// riceBlock decodes one block of len(out) values, last being the value
// before the block (updated).
func (r *bitReader) riceBlock(out []int64, last *uint64, fsBits, fsMax, nbits uint, bytepix int) error {
	mask := uint64(1)<<nbits - 1
	fs0, err := r.bits(fsBits)
	if err != nil {
		return err
	}
	fs := int(fs0) - 1
	for j := range out {
		var m uint64
		switch {
		case fs < 0:
			m = 0
		case uint(fs) == fsMax:
			if m, err = r.bits(nbits); err != nil {
				return err
			}
		default:
			hi, err := r.unary()
			if err != nil {
				return err
			}
			lo, err := r.bits(uint(fs))
			if err != nil {
				return err
			}
			m = hi<<uint(fs) | lo
		}
		// Undo the mapping: even m is d = m/2, odd m is d = −(m+1)/2.
		d := m >> 1
		if m&1 != 0 {
			d = ^d
		}
		*last = (*last + d) & mask
		out[j] = signed(*last, bytepix)
	}
	return nil
}

// signed converts a value of bytepix bytes to int64: unsigned for one
// byte, two's complement otherwise.
func signed(v uint64, bytepix int) int64 {
	switch bytepix {
	case 1:
		return int64(v)
	case 2:
		return int64(int16(v))
	case 4:
		return int64(int32(v))
	}
	return int64(v)
}
