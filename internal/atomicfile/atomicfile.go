// Package atomicfile writes files so that a reader sees either the old file
// or the complete new one, never a part: the one writer behind every product,
// checkpoint, journal and part file of pdwave.
//
// A file is written to a temporary ".<name>.tmp-*" in the same folder,
// flushed, given mode 0644 under the process umask, synced, closed and
// renamed over the destination; the folder is then synced (best effort). On
// any error the temporary file is removed. Stale temporary files of an
// interrupted run are removed by RemoveStale.
package atomicfile

import (
	"bufio"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
)

// Mode is the permission every written file gets: 0644 with the bits of the
// process umask cleared (see umask, POSIX.1-2017 "umask").
func Mode() os.FileMode { return 0o644 &^ umask() }

// tempPattern is the pattern of the temporary file for a destination name.
func tempPattern(base string) string { return "." + base + ".tmp-*" }

// File is a file being written atomically: Write into it (buffered), then
// Commit to rename it into place, or Abort to drop it. A File is not safe for
// concurrent use.
type File struct {
	path string
	f    *os.File
	w    *bufio.Writer
	done bool
}

// Create starts writing path: it creates the temporary file beside path.
// Errors name path.
func Create(path string) (*File, error) {
	dir := filepath.Dir(path)
	f, err := os.CreateTemp(dir, tempPattern(filepath.Base(path)))
	if err != nil {
		return nil, fmt.Errorf("writing %s: %w", path, err)
	}
	return &File{path: path, f: f, w: bufio.NewWriterSize(f, 1<<16)}, nil
}

// Write writes p to the temporary file (io.Writer).
func (a *File) Write(p []byte) (int, error) { return a.w.Write(p) }

// Path returns the destination path.
func (a *File) Path() string { return a.path }

// Commit flushes, sets the mode, syncs, closes and renames the temporary file
// over the destination. On error the temporary file is removed and the
// destination is left as it was. Commit after Commit or Abort is an error.
func (a *File) Commit() (err error) {
	if a.done {
		return fmt.Errorf("writing %s: already finished", a.path)
	}
	a.done = true
	tmp := a.f.Name()
	defer func() {
		if err != nil {
			a.f.Close()
			os.Remove(tmp)
			err = fmt.Errorf("writing %s: %w", a.path, err)
		}
	}()
	if err = a.w.Flush(); err != nil {
		return err
	}
	if err = a.f.Chmod(Mode()); err != nil {
		return err
	}
	if err = a.f.Sync(); err != nil {
		return err
	}
	if err = a.f.Close(); err != nil {
		return err
	}
	if err = os.Rename(tmp, a.path); err != nil {
		return err
	}
	syncDir(filepath.Dir(a.path))
	return nil
}

// Abort drops the temporary file; the destination is left as it was. It is
// a no-op after Commit or Abort.
func (a *File) Abort() {
	if a.done {
		return
	}
	a.done = true
	a.f.Close()
	os.Remove(a.f.Name())
}

// Write writes path through write, which receives a buffered writer: path
// is either left as it was or replaced by the complete new file. Errors name
// path.
func Write(path string, write func(io.Writer) error) error {
	a, err := Create(path)
	if err != nil {
		return err
	}
	if err := write(a.w); err != nil {
		a.Abort()
		return fmt.Errorf("writing %s: %w", path, err)
	}
	return a.Commit()
}

// WriteBytes writes data to path atomically (see Write).
func WriteBytes(path string, data []byte) error {
	return Write(path, func(w io.Writer) error {
		_, err := w.Write(data)
		return err
	})
}

// RemoveStale removes the temporary files an interrupted atomic write of
// path may have left beside it, and returns how many it removed. Only names
// of the form ".<base>.tmp-*" are touched.
func RemoveStale(path string) (int, error) {
	dir, base := filepath.Dir(path), filepath.Base(path)
	ents, err := os.ReadDir(dir)
	if err != nil {
		return 0, fmt.Errorf("cleaning temporary files of %s: %w", path, err)
	}
	prefix := "." + base + ".tmp-"
	n := 0
	for _, e := range ents {
		if e.Type().IsRegular() && strings.HasPrefix(e.Name(), prefix) {
			if os.Remove(filepath.Join(dir, e.Name())) == nil {
				n++
			}
		}
	}
	return n, nil
}

// syncDir syncs a folder so that a rename in it is durable (best effort).
func syncDir(dir string) {
	if d, err := os.Open(dir); err == nil {
		d.Sync()
		d.Close()
	}
}
