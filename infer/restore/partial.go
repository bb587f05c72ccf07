package restore

import (
	"bufio"
	"encoding/gob"
	"errors"
	"fmt"
	"io"
	"os"
	"sort"

	"pdwave/internal/atomicfile"
	"pdwave/model/burst"
)

// Meta describes one restoration: everything the output writer needs besides
// the patches. It travels in partial files, so a merge writes the same output
// as a single run.
type Meta struct {
	Key              string            // identity of inputs, weights and settings (Identity.Key)
	Nx, Ny, Frames   int               // field size, pixels, and frames per channel
	Patch, Overlap   int               // patch side and overlap, pixels
	Basis            string            // native basis of the coefficients ("kl", "zernike", "" if none)
	Modes            int               // coefficients per frame
	Estimator        string            // how the coefficients were obtained
	ShiftX, ShiftY   float64           // defocused channel offset removed, pixels
	Cards            []burst.Card      // header cards of the input to carry over
	Settings         map[string]string // provenance settings
	Mean             []float64         // burst-mean focused calibrated image, Nx·Ny
	Inputs           []string          // input file names
	CalibrationNotes string            // what calibration was applied
}

const (
	restorePartMagic   = "pdwave restore partial"
	restorePartVersion = 1
)

type restorePartHeader struct {
	Magic   string
	Version int
	Meta    Meta
	Shard   Shard
	Lo, Hi  int
}

// PartWriter streams the patches of one shard into a partial file. Records
// must be written in increasing id order covering [lo, hi) exactly; the file
// appears under its final name only on a successful Close.
type PartWriter struct {
	path   string
	tmp    *atomicfile.File
	enc    *gob.Encoder
	lo, hi int
	next   int
}

// CreatePart starts a partial file for shard sh covering patches [lo, hi).
func CreatePart(path string, meta *Meta, sh Shard, lo, hi int) (*PartWriter, error) {
	f, err := atomicfile.Create(path)
	if err != nil {
		return nil, err
	}
	w := &PartWriter{path: path, tmp: f, lo: lo, hi: hi, next: lo}
	w.enc = gob.NewEncoder(f)
	h := restorePartHeader{Magic: restorePartMagic, Version: restorePartVersion, Meta: *meta, Shard: sh, Lo: lo, Hi: hi}
	if err := w.enc.Encode(&h); err != nil {
		w.Abort()
		return nil, fmt.Errorf("writing %s: %w", path, err)
	}
	return w, nil
}

// Write appends one patch; it is a Sink. Errors on an out-of-order id.
func (w *PartWriter) Write(r *PatchResult) error {
	if r.ID != w.next || r.ID >= w.hi {
		return fmt.Errorf("writing %s: patch %d out of order (want %d)", w.path, r.ID, w.next)
	}
	if err := w.enc.Encode(r); err != nil {
		return fmt.Errorf("writing %s: %w", w.path, err)
	}
	w.next++
	return nil
}

// Close checks that every patch of the range was written, then syncs and
// renames the file into place. On error the temporary file is removed.
func (w *PartWriter) Close() error {
	if w.next != w.hi {
		w.Abort()
		return fmt.Errorf("writing %s: only %d of %d patches written", w.path, w.next-w.lo, w.hi-w.lo)
	}
	// End marker.
	if err := w.enc.Encode(&PatchResult{ID: -1}); err != nil {
		w.Abort()
		return fmt.Errorf("writing %s: %w", w.path, err)
	}
	return w.tmp.Commit()
}

// Abort discards the partial file.
func (w *PartWriter) Abort() { w.tmp.Abort() }

type restorePartReader struct {
	path string
	f    *os.File
	dec  *gob.Decoder
	h    restorePartHeader
}

func restoreOpenPart(path string) (*restorePartReader, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("reading %s: %w", path, err)
	}
	r := &restorePartReader{path: path, f: f, dec: gob.NewDecoder(bufio.NewReaderSize(f, 1<<20))}
	if err := r.dec.Decode(&r.h); err != nil || r.h.Magic != restorePartMagic {
		f.Close()
		if err == nil {
			err = errors.New("not a pdwave restore partial file")
		}
		return nil, fmt.Errorf("reading %s: %w", path, err)
	}
	if r.h.Version != restorePartVersion {
		f.Close()
		return nil, fmt.Errorf("reading %s: partial file version %d, this program reads %d", path, r.h.Version, restorePartVersion)
	}
	return r, nil
}

// next returns the next patch, or nil at the end marker.
func (r *restorePartReader) next() (*PatchResult, error) {
	var p PatchResult
	if err := r.dec.Decode(&p); err != nil {
		if errors.Is(err, io.EOF) {
			err = io.ErrUnexpectedEOF
		}
		return nil, fmt.Errorf("reading %s: %w", r.path, err)
	}
	if p.ID == -1 {
		return nil, nil
	}
	return &p, nil
}

// Merge reads partial files written by shard runs of one restoration. It
// checks that the parts share one key and that their ranges tile
// [0, total) without gaps or overlaps, then calls start with the common Meta
// and grid to obtain a sink and feeds it every patch in increasing id order,
// checking that every part is complete. It returns the Meta and the total
// number of patches. Only one patch is held in memory at a time.
func Merge(paths []string, start func(*Meta, *Grid) (Sink, error)) (meta *Meta, total int, err error) {
	if len(paths) == 0 {
		return nil, 0, errors.New("restore: merge: no partial files")
	}
	var parts []*restorePartReader
	defer func() {
		for _, p := range parts {
			p.f.Close()
		}
	}()
	for _, path := range paths {
		p, err := restoreOpenPart(path)
		if err != nil {
			return nil, 0, err
		}
		parts = append(parts, p)
	}
	sort.SliceStable(parts, func(i, j int) bool { return parts[i].h.Lo < parts[j].h.Lo })
	first := parts[0]
	g, err := NewGrid(first.h.Meta.Nx, first.h.Meta.Ny, first.h.Meta.Patch, first.h.Meta.Overlap)
	if err != nil {
		return nil, 0, fmt.Errorf("reading %s: %w", first.path, err)
	}
	total = g.Count()
	at := 0
	for _, p := range parts {
		if d := DiffKeys(first.h.Meta.Key, p.h.Meta.Key, "in "+first.path, "in "+p.path); d != "" {
			return nil, 0, fmt.Errorf("restore: merge: %s and %s come from different inputs or settings: %s", first.path, p.path, d)
		}
		if p.h.Shard.Count != first.h.Shard.Count {
			return nil, 0, fmt.Errorf("restore: merge: %s is shard %v, %s is shard %v", first.path, first.h.Shard, p.path, p.h.Shard)
		}
		if p.h.Lo != at {
			if p.h.Lo < at {
				return nil, 0, fmt.Errorf("restore: merge: %s (shard %v) overlaps another part", p.path, p.h.Shard)
			}
			return nil, 0, fmt.Errorf("restore: merge: patches %d–%d missing (no part covers them)", at, p.h.Lo-1)
		}
		at = p.h.Hi
	}
	if at != total {
		return nil, 0, fmt.Errorf("restore: merge: patches %d–%d missing (no part covers them)", at, total-1)
	}
	m := first.h.Meta
	sink, err := start(&m, g)
	if err != nil {
		return nil, 0, err
	}
	for _, p := range parts {
		for id := p.h.Lo; ; id++ {
			r, err := p.next()
			if err != nil {
				return nil, 0, err
			}
			if r == nil {
				if id != p.h.Hi {
					return nil, 0, fmt.Errorf("reading %s: ends after %d of %d patches", p.path, id-p.h.Lo, p.h.Hi-p.h.Lo)
				}
				break
			}
			if r.ID != id || id >= p.h.Hi {
				return nil, 0, fmt.Errorf("reading %s: patch %d out of order (want %d)", p.path, r.ID, id)
			}
			if err := sink(r); err != nil {
				return nil, 0, err
			}
		}
	}
	return &m, total, nil
}
