package atomicfile

import (
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
)

// Set is a group of files that appear together or not at all: a FITS
// product and its sidecars, a report's figures. Each file is written in
// full to a temporary ".<name>.tmp-*" beside its destination (flushed,
// mode Mode(), synced) and nothing is visible under the final names until
// Commit renames them all.
//
// Guarantees:
//   - A failure while writing (Add, AddPath) or before the first rename
//     leaves every destination as it was and removes the temporaries (the
//     caller must call Abort after a failed Add).
//   - Commit renames in the order the files were added; put the file whose
//     presence marks the set complete (the FITS product) last.
//   - A destination that exists and is not a regular file or a symbolic
//     link (a device such as /dev/null, a pipe, a folder) is refused before
//     the first rename, so it is never replaced.
//   - A rename can still fail midway (a destination replaced by a folder,
//     a full or read-only file system). Commit then undoes the renames
//     already made: a destination that existed before is restored from a
//     hard link taken before the first rename, one that did not exist is
//     removed, and the remaining temporaries are removed. Where the file
//     system refuses hard links, an older file already replaced cannot be
//     brought back and is removed as well, so the set is still either all
//     there or absent; the error says so.
//   - A crash (power loss, SIGKILL) between renames can leave part of a set
//     under the final names with the rest still as temporaries; RemoveStale
//     on each destination clears the temporaries at the next start, and the
//     last-added file is the one to test for completeness.
//
// A Set is not safe for concurrent use.
type Set struct {
	files []setFile
	done  bool
}

type setFile struct {
	path, tmp string
}

// NewSet returns an empty set.
func NewSet() *Set { return &Set{} }

// Add writes the future file path through write, which receives a buffered
// writer, into a temporary beside path. Errors name path; after an error
// the caller should Abort the set.
func (s *Set) Add(path string, write func(io.Writer) error) error {
	if s.done {
		return fmt.Errorf("writing %s: set already finished", path)
	}
	a, err := Create(path)
	if err != nil {
		return err
	}
	if err := write(a.w); err != nil {
		a.Abort()
		return fmt.Errorf("writing %s: %w", path, err)
	}
	if err := a.finish(); err != nil {
		return err
	}
	s.files = append(s.files, setFile{path: path, tmp: a.f.Name()})
	return nil
}

// AddPath adds the future file path written by write under the temporary
// name tmp it is given (for writers that take a file name, such as a FITS
// writer; write may replace tmp by renaming over it). The temporary is then
// given mode Mode() and synced. Errors name path.
func (s *Set) AddPath(path string, write func(tmp string) error) error {
	if s.done {
		return fmt.Errorf("writing %s: set already finished", path)
	}
	f, err := os.CreateTemp(filepath.Dir(path), tempPattern(filepath.Base(path)))
	if err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	tmp := f.Name()
	f.Close()
	fail := func(err error) error {
		os.Remove(tmp)
		return fmt.Errorf("writing %s: %w", path, err)
	}
	if err := write(tmp); err != nil {
		return fail(err)
	}
	if err := syncMode(tmp); err != nil {
		return fail(err)
	}
	s.files = append(s.files, setFile{path: path, tmp: tmp})
	return nil
}

// syncMode gives the file at tmp mode Mode() and syncs it.
func syncMode(tmp string) error {
	f, err := os.OpenFile(tmp, os.O_RDWR, 0)
	if err != nil {
		return err
	}
	defer f.Close()
	if err := f.Chmod(Mode()); err != nil {
		return err
	}
	return f.Sync()
}

// Paths returns the destinations added so far, in order.
func (s *Set) Paths() []string {
	p := make([]string, len(s.files))
	for i, f := range s.files {
		p[i] = f.path
	}
	return p
}

// Abort removes the temporaries; no destination is touched. It is a no-op
// after Commit or Abort.
func (s *Set) Abort() {
	if s.done {
		return
	}
	s.done = true
	for _, f := range s.files {
		os.Remove(f.tmp)
	}
}

// Commit renames every temporary over its destination, in the order added,
// and syncs the folders. On failure it undoes the renames made (see Set)
// and returns an error naming the file that failed. Commit after Commit or
// Abort is an error.
func (s *Set) Commit() error {
	if s.done {
		return errors.New("atomicfile: set already finished")
	}
	s.done = true
	for _, f := range s.files {
		if err := checkDest(f.path); err != nil {
			for _, g := range s.files {
				os.Remove(g.tmp)
			}
			return err
		}
	}
	backups, existed := s.backup()
	defer func() {
		for _, b := range backups {
			if b != "" {
				os.Remove(b)
			}
		}
	}()
	for i, f := range s.files {
		if err := os.Rename(f.tmp, f.path); err != nil {
			lost := s.undo(i, backups, existed)
			for _, g := range s.files[i:] {
				os.Remove(g.tmp)
			}
			msg := fmt.Sprintf("writing %s: %v; the %d file(s) of the set renamed before it were taken back", f.path, err, i)
			if lost > 0 {
				msg += fmt.Sprintf(" (%d older file(s) could not be restored and were removed)", lost)
			}
			return errors.New(msg)
		}
	}
	dirs := map[string]bool{}
	for _, f := range s.files {
		if d := filepath.Dir(f.path); !dirs[d] {
			dirs[d] = true
			syncDir(d)
		}
	}
	return nil
}

// backup hard-links every existing destination to a temporary name, so an
// interrupted Commit can restore it. backups[i] is "" where there is
// nothing to keep or the link failed; existed[i] says whether destination i
// was there before.
func (s *Set) backup() (backups []string, existed []bool) {
	backups, existed = make([]string, len(s.files)), make([]bool, len(s.files))
	for i, f := range s.files {
		if _, err := os.Lstat(f.path); err != nil {
			continue
		}
		existed[i] = true
		name := f.tmp + ".old"
		if os.Link(f.path, name) == nil {
			backups[i] = name
		}
	}
	return backups, existed
}

// undo takes back the first n renames of a failed Commit and returns how
// many older files could not be restored (and were removed).
func (s *Set) undo(n int, backups []string, existed []bool) (lost int) {
	for i := n - 1; i >= 0; i-- {
		f := s.files[i]
		if backups[i] != "" && os.Rename(backups[i], f.path) == nil {
			backups[i] = ""
			continue
		}
		os.Remove(f.path)
		if existed[i] {
			lost++
		}
	}
	return lost
}
