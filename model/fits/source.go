package fits

import (
	"bufio"
	"compress/gzip"
	"errors"
	"fmt"
	"io"
	"os"
)

// source holds a FITS file's bytes: in memory (mem) or behind a ReaderAt
// read as needed. It is not safe for concurrent use (a gzip source keeps
// its decompression position).
type source struct {
	mem  []byte
	r    io.ReaderAt
	size int
}

// read returns the n bytes at off: a slice of mem, or a new slice read from
// r. It errors if they do not lie inside the file.
func (s *source) read(off, n int) ([]byte, error) {
	return s.readInto(nil, off, n)
}

// readInto returns the n bytes at off, read into buf's storage when the
// file is not in memory (buf grown as needed).
func (s *source) readInto(buf []byte, off, n int) ([]byte, error) {
	if off < 0 || n < 0 || off > s.size || n > s.size-off {
		return nil, fmt.Errorf("truncated file: %d bytes at %d lie outside its %d bytes", n, off, s.size)
	}
	if s.mem != nil {
		return s.mem[off : off+n : off+n], nil
	}
	if cap(buf) < n {
		buf = make([]byte, n)
	}
	buf = buf[:n]
	if _, err := s.r.ReadAt(buf, int64(off)); err != nil && !(errors.Is(err, io.EOF) && n > 0) {
		return nil, err
	}
	return buf, nil
}

// OpenFile opens the FITS file at path for reading as needed: the headers
// are read at once, a data unit only when decoded (Image, ReadPlane,
// FloatColumn, tile by tile for tile-compressed images), so a file larger
// than memory can be read plane by plane. A whole-file gzip file (magic
// bytes 1f 8b) is decompressed as a stream: once to find its size (checked
// against lim), then again from the start whenever a read goes backwards.
// Close the File when done. Errors name the path.
func OpenFile(path string, lim Limits) (*File, error) {
	fh, err := os.Open(path)
	if err != nil {
		return nil, err
	}
	f, err := openFile(fh, lim)
	if err != nil {
		fh.Close()
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	f.close = fh.Close
	return f, nil
}

func openFile(fh *os.File, lim Limits) (*File, error) {
	st, err := fh.Stat()
	if err != nil {
		return nil, err
	}
	if st.Size() > lim.maxBytes() {
		return nil, fmt.Errorf("%d bytes, more than the limit of %d", st.Size(), lim.maxBytes())
	}
	var magic [2]byte
	n, _ := fh.ReadAt(magic[:], 0)
	src := &source{r: fh, size: int(st.Size())}
	gz := n == 2 && magic == [2]byte{gzipMagic[0], gzipMagic[1]}
	if gz {
		g := &gzipAt{f: fh, csize: st.Size()}
		size, err := g.count(lim.maxBytes())
		if err != nil {
			return nil, fmt.Errorf("gzip-compressed file: %w", err)
		}
		src = &source{r: g, size: int(size)}
	}
	hdus, err := scanHDUs(src, lim)
	if err != nil {
		return nil, err
	}
	return &File{HDUs: hdus, Gzip: gz}, nil
}

// gzipAt reads a gzip file's decompressed bytes at any offset: forward by
// decompressing on, backward by starting again from the beginning.
type gzipAt struct {
	f     io.ReaderAt
	csize int64
	zr    *gzip.Reader
	pos   int64
}

// restart starts decompressing from the beginning.
func (g *gzipAt) restart() error {
	br := bufio.NewReaderSize(io.NewSectionReader(g.f, 0, g.csize), 1<<16)
	var err error
	if g.zr == nil {
		g.zr, err = gzip.NewReader(br)
	} else {
		err = g.zr.Reset(br)
	}
	g.pos = 0
	return err
}

// count returns the decompressed size, failing past max bytes.
func (g *gzipAt) count(max int64) (int64, error) {
	if err := g.restart(); err != nil {
		return 0, err
	}
	n, err := io.Copy(io.Discard, io.LimitReader(g.zr, max+1))
	if err != nil {
		return 0, err
	}
	if n > max {
		return 0, fmt.Errorf("more than the limit of %d bytes decompressed", max)
	}
	g.pos = n
	return n, nil
}

// ReadAt implements io.ReaderAt.
func (g *gzipAt) ReadAt(p []byte, off int64) (int, error) {
	if off < g.pos || g.zr == nil {
		if err := g.restart(); err != nil {
			return 0, err
		}
	}
	if off > g.pos {
		k, err := io.CopyN(io.Discard, g.zr, off-g.pos)
		g.pos += k
		if err != nil {
			return 0, err
		}
	}
	n, err := io.ReadFull(g.zr, p)
	g.pos += int64(n)
	if errors.Is(err, io.ErrUnexpectedEOF) {
		err = io.EOF
	}
	return n, err
}
