// Package fits is pdwave's own FITS layer: it reads and writes the files of
// FITS Standard 4.0 (IAU FITS Working Group 2016) that the other packages
// need, with no knowledge of what the images mean. Package burst maps
// bursts onto it; the other verbs write their products with WriteFile.
//
// # Reading
//
// Decode and Open read a whole file into memory: gzip-compressed files
// (RFC 1952, recognised by their magic bytes) are decompressed first, within
// Limits.MaxBytes. The HDU structure is scanned without decoding data, and
// every size read from a header (NAXISn, PCOUNT, GCOUNT, THEAP, ZNAXISn,
// ZTILEn, heap descriptors) is checked against the bytes the file holds and
// against Limits before anything is allocated, so a corrupted or hostile file
// gives an error, never a panic or a huge allocation.
//
// Header values are read as FITS Standard 4.0 §4.2 defines them (see
// ParseValue); departures that have one obvious meaning (a lowercase
// exponent letter, a repeated keyword) are read and reported in
// Header.Notes, as astropy reads them. Of a keyword given twice the first
// card counts, as astropy's Header[key] does.
//
// Images are read as physical values BZERO + BSCALE·stored (§5.3) with BLANK
// pixels as NaN, from image HDUs and from tile-compressed images (§10, the
// tiled-image convention of Pence et al. 2010: RICE_1, GZIP_1, GZIP_2,
// NOCOMPRESS; quantised floating-point tiles with NO_DITHER,
// SUBTRACTIVE_DITHER_1 and SUBTRACTIVE_DITHER_2).
//
// # Writing
//
// WriteFile writes image and binary-table HDUs with headers in the fixed
// format of §4.2, ASCII only, atomically (pdwave/internal/atomicfile).
// Provenance makes the cards recording what wrote a file.
package fits

// FITS Standard 4.0 §3.1 and §4: a file is a sequence of HDUs; each header
// is a whole number of 2880-byte blocks of 80-character cards ending with
// END, each data unit is padded to a whole number of blocks.
const (
	blockSize = 2880
	cardSize  = 80
)

// Card is one FITS header card. Key is the keyword (1–8 characters of
// A–Z, 0–9, '-', '_'; read HIERARCH cards keep the words after HIERARCH).
// Value is nil (undefined), bool, an integer type, float32/float64 (finite)
// or string (printable ASCII; long strings are written with CONTINUE
// cards). Cards read from a file hold nil, bool, int, float64, string,
// complex128, *big.Int (integers beyond 64 bits) or Unparsed. For the
// commentary keywords COMMENT, HISTORY and "" the text is in Comment (long
// text is wrapped over several cards) and Value is ignored.
type Card struct {
	Key     string
	Value   any
	Comment string
}

// Unparsed is the value of a read card whose value field is not a FITS
// value (FITS Standard 4.0 §4.2): the field's text, comment removed. It is
// kept so that a malformed value is reported, never taken for an absent
// one; WriteFile refuses it.
type Unparsed string

// Number converts a numeric header value (float64, float32, int, int64 or
// int32, as read or set in a Card) to float64. It reports false for any
// other type (strings, booleans, nil, Unparsed); it does not check for NaN
// or Inf.
func Number(v any) (float64, bool) {
	switch x := v.(type) {
	case float64:
		return x, true
	case float32:
		return float64(x), true
	case int:
		return float64(x), true
	case int64:
		return float64(x), true
	case int32:
		return float64(x), true
	}
	return 0, false
}

// Float returns the card's value as float64 if it is numeric (see Number).
func (c Card) Float() (float64, bool) { return Number(c.Value) }

// isCommentary reports whether key is one of the commentary keywords whose
// text is in Card.Comment.
func isCommentary(key string) bool {
	return key == "COMMENT" || key == "HISTORY" || key == ""
}
