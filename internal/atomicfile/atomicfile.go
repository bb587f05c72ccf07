// Package atomicfile writes files so that a reader sees either the old file
// or the complete new one, never a part: the one writer behind every product,
// checkpoint, journal and part file of pdwave.
//
// A file is written to a temporary ".<name>.tmp-*" in the same folder,
// flushed, given mode 0644 under the process umask, synced, closed and
// renamed over the destination; the folder is then synced (best effort). On
// any error the temporary file is removed. Stale temporary files of an
// interrupted run are removed by RemoveStale.
//
// Several files that belong together (a FITS product and its sidecars, a
// checkpoint's weights and state) are written as a Set: all temporaries
// first, then the renames, so the set appears together or not at all (see
// Set for what happens when a rename fails midway).
package atomicfile

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
)

// Mode is the permission every written file gets: 0644 with the bits of the
// process umask cleared (see umask, POSIX.1-2017 "umask").
func Mode() os.FileMode { return 0o644 &^ umask() }

// DirMode is the permission of a folder built under a temporary name and
// renamed into place: 0755 with the bits of the process umask cleared.
func DirMode() os.FileMode { return 0o755 &^ umask() }

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
func (a *File) Commit() error {
	if err := a.finish(); err != nil {
		return err
	}
	if err := checkDest(a.path); err != nil {
		os.Remove(a.f.Name())
		return err
	}
	if err := os.Rename(a.f.Name(), a.path); err != nil {
		os.Remove(a.f.Name())
		return fmt.Errorf("writing %s: %w", a.path, err)
	}
	syncDir(filepath.Dir(a.path))
	return nil
}

// finish flushes, sets the mode, syncs and closes the temporary file, which
// stays under its temporary name. On error it is removed.
func (a *File) finish() (err error) {
	if a.done {
		return fmt.Errorf("writing %s: already finished", a.path)
	}
	a.done = true
	defer func() {
		if err != nil {
			a.f.Close()
			os.Remove(a.f.Name())
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
	return a.f.Close()
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
// of the form ".<base>.tmp-*" (including a Set's backups ".<base>.tmp-*.old")
// and "..<base>.tmp-*" (the temporary of a writer that Set.AddPath handed a
// temporary name) are touched. A folder that does not exist holds nothing
// stale.
func RemoveStale(path string) (int, error) {
	dir, base := filepath.Dir(path), filepath.Base(path)
	ents, err := os.ReadDir(dir)
	if errors.Is(err, os.ErrNotExist) {
		return 0, nil
	}
	if err != nil {
		return 0, fmt.Errorf("cleaning temporary files of %s: %w", path, err)
	}
	prefix := "." + base + ".tmp-"
	n := 0
	for _, e := range ents {
		name := e.Name()
		if e.Type().IsRegular() && (strings.HasPrefix(name, prefix) || strings.HasPrefix(name, "."+prefix)) {
			if os.Remove(filepath.Join(dir, name)) == nil {
				n++
			}
		}
	}
	return n, nil
}

// checkDest refuses a destination that exists and is neither a regular
// file nor a symbolic link (a device such as /dev/null, a pipe, a socket,
// a folder): renaming over it would replace it.
func checkDest(path string) error {
	st, err := os.Lstat(path)
	if err != nil {
		return nil
	}
	if m := st.Mode(); !m.IsRegular() && m&os.ModeSymlink == 0 {
		return fmt.Errorf("writing %s: it exists and is not a regular file (%v); not replaced", path, m.Type())
	}
	return nil
}

// syncDir syncs a folder so that a rename in it is durable (best effort).
func syncDir(dir string) {
	if d, err := os.Open(dir); err == nil {
		d.Sync()
		d.Close()
	}
}
