package fits

import (
	"bytes"
	"compress/gzip"
	"errors"
	"fmt"
	"io"
	"os"
	"strconv"
	"strings"
)

// DefaultMaxBytes is the default Limits.MaxBytes: 4 GiB, room for a
// burst of 2 channels × 100 frames of 1024 × 1024 float64 pixels with
// margin, on a machine of 24 GiB.
const DefaultMaxBytes = 4 << 30

// Limits bound what reading one file may allocate.
type Limits struct {
	// MaxBytes bounds the bytes of a file after gzip decompression and
	// the float64 values of one decoded image (8 bytes each); 0 means
	// DefaultMaxBytes. Sizes are checked against it before allocating.
	MaxBytes int64
	// MaxHDUs bounds the number of HDUs of a file; 0 means 1000.
	MaxHDUs int
}

func (l Limits) maxBytes() int64 {
	if l.MaxBytes <= 0 {
		return DefaultMaxBytes
	}
	return l.MaxBytes
}

func (l Limits) maxHDUs() int {
	if l.MaxHDUs <= 0 {
		return 1000
	}
	return l.MaxHDUs
}

// File is a FITS file read into memory (Open, Decode) or opened for
// reading as needed (OpenFile).
type File struct {
	HDUs []*Unit
	// Gzip is true when the file was gzip-compressed as a whole.
	Gzip  bool
	close func() error
}

// Close closes the file of OpenFile; it does nothing for a File in
// memory. The File's data cannot be decoded after Close.
func (f *File) Close() error {
	if f.close == nil {
		return nil
	}
	c := f.close
	f.close = nil
	return c()
}

// Unit is one header-data unit (HDU) of a read File. Its data stay in the file's
// bytes until decoded (Image, FloatColumn).
type Unit struct {
	Index    int     // 0 for the primary HDU
	Header   *Header // as read; see Header.Notes
	Xtension string  // "" for the primary HDU, else XTENSION ("IMAGE", "BINTABLE", ...)
	Name     string  // EXTNAME, trailing blanks removed; "" if none
	Bitpix   int     // BITPIX
	Axes     []int   // NAXISn, NAXIS1 first

	data   []byte  // the data unit, heap included, without padding; nil for a file read lazily (OpenFile)
	src    *source // the file's bytes
	off    int     // first byte of the data unit in src
	size   int     // bytes of the data unit
	buf    []byte  // ReadPlane's buffer
	pcount int
	lim    Limits
}

// bytes returns the data unit: the bytes in memory, or read from the file
// of OpenFile (a new slice each call).
func (h *Unit) bytes() ([]byte, error) {
	if h.data != nil || h.src == nil {
		return h.data, nil
	}
	b, err := h.src.read(h.off, h.size)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", h.what(), err)
	}
	return b, nil
}

// what names the HDU in messages: "primary HDU" or "HDU n (TYPE 'NAME')"
// with n 1-based as FITS counts HDUs.
func (h *Unit) what() string {
	if h.Index == 0 {
		return "primary HDU"
	}
	s := "HDU " + strconv.Itoa(h.Index+1)
	switch {
	case h.Xtension != "" && h.Name != "":
		s += " (" + h.Xtension + " '" + h.Name + "')"
	case h.Xtension != "":
		s += " (" + h.Xtension + ")"
	}
	return s
}

// String names the HDU as in error messages: "primary HDU", "HDU 2
// (BINTABLE 'TRUTH')", ...
func (h *Unit) String() string { return h.what() }

// gzipMagic are the first bytes of a gzip member (RFC 1952 §2.3.1).
var gzipMagic = []byte{0x1f, 0x8b}

// Open reads the file at path (see Decode). Errors name the path.
func Open(path string, lim Limits) (*File, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	st, err := f.Stat()
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	if st.Size() > lim.maxBytes() {
		return nil, fmt.Errorf("%s: %d bytes, more than the limit of %d", path, st.Size(), lim.maxBytes())
	}
	data := make([]byte, st.Size())
	if _, err := io.ReadFull(f, data); err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	ff, err := Decode(data, lim)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	return ff, nil
}

// Decode reads a FITS file held in memory. A gzip-compressed file (RFC
// 1952, recognised by its magic bytes 1f 8b) is decompressed first; its
// decompressed size is checked against lim before the buffer grows past
// it. Decode keeps data (no copy). It errors if the bytes are not FITS
// (ErrNotFITS, wrapped), if the structure is malformed or a declared data
// unit does not fit in the file, never panicking.
func Decode(data []byte, lim Limits) (*File, error) {
	gz := false
	if bytes.HasPrefix(data, gzipMagic) {
		var err error
		if data, err = gunzip(data, lim.maxBytes()); err != nil {
			return nil, err
		}
		gz = true
	}
	hdus, err := scanHDUs(&source{mem: data, size: len(data)}, lim)
	if err != nil {
		return nil, err
	}
	return &File{HDUs: hdus, Gzip: gz}, nil
}

// gunzip decompresses a gzip file of at most max bytes decompressed. The
// size recorded in the gzip trailer (ISIZE, the size modulo 2^32, RFC 1952
// §2.3.1) only sizes the first allocation, bounded by max; the reader
// itself stops past max.
func gunzip(data []byte, max int64) ([]byte, error) {
	zr, err := gzip.NewReader(bytes.NewReader(data))
	if err != nil {
		return nil, fmt.Errorf("gzip-compressed file: %w", err)
	}
	defer zr.Close()
	hint := int64(0)
	if len(data) >= 18 {
		t := data[len(data)-4:]
		hint = int64(t[0]) | int64(t[1])<<8 | int64(t[2])<<16 | int64(t[3])<<24
	}
	if hint > max {
		return nil, fmt.Errorf("gzip-compressed file: it records %d decompressed bytes, more than the limit of %d", hint, max)
	}
	var buf bytes.Buffer
	buf.Grow(int(min(hint, max)))
	n, err := io.Copy(&buf, io.LimitReader(zr, max+1))
	if err != nil {
		return nil, fmt.Errorf("gzip-compressed file: %w", err)
	}
	if n > max {
		return nil, fmt.Errorf("gzip-compressed file: more than the limit of %d bytes decompressed", max)
	}
	return buf.Bytes(), nil
}

// Notes returns the notes of every HDU's header, each prefixed with the HDU
// it comes from.
func (f *File) Notes() []string {
	var out []string
	for _, h := range f.HDUs {
		for _, n := range h.Header.Notes {
			out = append(out, h.what()+": "+n)
		}
	}
	return out
}

// Find returns the HDU chosen by sel: a decimal number is the 0-based HDU
// index (0 = primary, as astropy counts), anything else an EXTNAME,
// compared without regard to case and trailing blanks (as astropy does);
// the first HDU of that name counts. It errors naming the HDUs the file
// has.
func (f *File) Find(sel string) (*Unit, error) {
	sel = strings.TrimSpace(sel)
	if i, err := strconv.Atoi(sel); err == nil {
		if i < 0 || i >= len(f.HDUs) {
			return nil, fmt.Errorf("HDU %d does not exist (the file has HDUs 0..%d)", i, len(f.HDUs)-1)
		}
		return f.HDUs[i], nil
	}
	var names []string
	for _, h := range f.HDUs {
		if strings.EqualFold(strings.TrimSpace(h.Name), sel) {
			return h, nil
		}
		if h.Name != "" {
			names = append(names, h.Name)
		}
	}
	if len(names) == 0 {
		return nil, fmt.Errorf("no HDU named %q (the file's HDUs have no EXTNAME)", sel)
	}
	return nil, fmt.Errorf("no HDU named %q (the file has %s)", sel, strings.Join(names, ", "))
}

// errNoImage is returned by HDU.ImageAxes for HDUs holding no image.
var errNoImage = errors.New("holds no image")
