package atomicfile

import (
	"errors"
	"io"
	"os"
	"path/filepath"
	"sort"
	"testing"
)

// names lists the entries of dir, sorted.
func names(t *testing.T, dir string) []string {
	t.Helper()
	ents, err := os.ReadDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	var n []string
	for _, e := range ents {
		n = append(n, e.Name())
	}
	sort.Strings(n)
	return n
}

func text(s string) func(io.Writer) error {
	return func(w io.Writer) error { _, err := io.WriteString(w, s); return err }
}

// TestSetAppearsTogether checks that nothing of a set is visible before
// Commit, everything after it (content and mode), and that a failure while
// writing the last member leaves nothing at all. Planted: Add renaming each
// file into place at once made "a.csv" visible before Commit and fail.
func TestSetAppearsTogether(t *testing.T) {
	dir := t.TempDir()
	p := func(n string) string { return filepath.Join(dir, n) }
	s := NewSet()
	if err := s.Add(p("a.csv"), text("a")); err != nil {
		t.Fatal(err)
	}
	if err := s.AddPath(p("b.fits"), func(tmp string) error { return os.WriteFile(tmp, []byte("b"), 0o600) }); err != nil {
		t.Fatal(err)
	}
	for _, n := range []string{"a.csv", "b.fits"} {
		if _, err := os.Stat(p(n)); err == nil {
			t.Fatalf("%s visible before Commit", n)
		}
	}
	if err := s.Commit(); err != nil {
		t.Fatal(err)
	}
	for n, want := range map[string]string{"a.csv": "a", "b.fits": "b"} {
		got, err := os.ReadFile(p(n))
		if err != nil || string(got) != want {
			t.Fatalf("%s: %q, %v", n, got, err)
		}
		if st, _ := os.Stat(p(n)); st.Mode().Perm() != Mode() {
			t.Errorf("%s has mode %v, want %v", n, st.Mode().Perm(), Mode())
		}
	}
	if got := names(t, dir); len(got) != 2 {
		t.Errorf("left %v, want the two files only", got)
	}

	// A failure while writing the last member: nothing appears.
	dir2 := t.TempDir()
	s = NewSet()
	if err := s.Add(filepath.Join(dir2, "x.png"), text("x")); err != nil {
		t.Fatal(err)
	}
	boom := errors.New("boom")
	if err := s.AddPath(filepath.Join(dir2, "x.fits"), func(string) error { return boom }); !errors.Is(err, boom) {
		t.Fatalf("AddPath error %v, want boom", err)
	}
	s.Abort()
	if got := names(t, dir2); len(got) != 0 {
		t.Errorf("a failed set left %v", got)
	}
}

// TestSetRenameFailsMidway makes the second rename fail (its destination is
// a folder that is not empty) and checks that the first destination gets
// its older content back, the third never appears and no temporary or
// backup is left. Planted: undo removing instead of restoring the older
// file lost "old a" and failed.
func TestSetRenameFailsMidway(t *testing.T) {
	dir := t.TempDir()
	p := func(n string) string { return filepath.Join(dir, n) }
	if err := os.WriteFile(p("a.csv"), []byte("old a"), 0o644); err != nil {
		t.Fatal(err)
	}
	s := NewSet()
	for _, n := range []string{"a.csv", "b.json", "c.fits"} {
		if err := s.Add(p(n), text("new "+n)); err != nil {
			t.Fatal(err)
		}
	}
	// b.json becomes a folder with a file inside after it was added.
	if err := os.MkdirAll(p("b.json/inner"), 0o755); err != nil {
		t.Fatal(err)
	}
	err := s.Commit()
	if err == nil {
		t.Fatal("commit over a folder succeeded")
	}
	t.Log(err)
	if got, _ := os.ReadFile(p("a.csv")); string(got) != "old a" {
		t.Errorf("a.csv is %q after the failed commit, want the older content", got)
	}
	if _, err := os.Stat(p("c.fits")); err == nil {
		t.Error("c.fits appeared although the set failed")
	}
	if got := names(t, dir); len(got) != 2 || got[0] != "a.csv" || got[1] != "b.json" {
		t.Errorf("left %v, want a.csv and the folder b.json only", got)
	}

	// Without an older file the renamed one is removed.
	dir2 := t.TempDir()
	s = NewSet()
	s.Add(filepath.Join(dir2, "n.csv"), text("n"))
	s.Add(filepath.Join(dir2, "m.fits"), text("m"))
	os.MkdirAll(filepath.Join(dir2, "m.fits", "x"), 0o755)
	if err := s.Commit(); err == nil {
		t.Fatal("commit over a folder succeeded")
	}
	if got := names(t, dir2); len(got) != 1 || got[0] != "m.fits" {
		t.Errorf("left %v, want the folder m.fits only", got)
	}
}

// TestRemoveStaleSet checks the leftovers of a set interrupted by a crash
// (a temporary, the nested temporary of a path writer, a backup) are
// removed at the next start. Planted: matching only ".<base>.tmp-" left the
// nested "..<base>.tmp-" file and failed.
func TestRemoveStaleSet(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "r.fits")
	for _, n := range []string{".r.fits.tmp-1", "..r.fits.tmp-2.tmp-3", ".r.fits.tmp-4.old", "r.fits", ".q.fits.tmp-5"} {
		os.WriteFile(filepath.Join(dir, n), nil, 0o644)
	}
	n, err := RemoveStale(p)
	if err != nil || n != 3 {
		t.Fatalf("removed %d (%v), want 3", n, err)
	}
	if got := names(t, dir); len(got) != 2 {
		t.Errorf("left %v, want r.fits and the other file's temporary", got)
	}
	if n, err := RemoveStale(filepath.Join(dir, "missing", "x")); n != 0 || err != nil {
		t.Errorf("missing folder: %d, %v", n, err)
	}
}

// TestNoReplaceOfSpecialFiles checks a named pipe standing where a file
// goes is refused, by Write and by a Set before any rename, and left in
// place (as root, a rename would replace even /dev/null). Planted: without
// checkDest the pipe was replaced by a regular file and the test failed.
func TestNoReplaceOfSpecialFiles(t *testing.T) {
	dir := t.TempDir()
	pipe := filepath.Join(dir, "pipe.fits")
	if err := mkfifo(pipe); err != nil {
		t.Skipf("no named pipes here: %v", err)
	}
	if err := WriteBytes(pipe, []byte("x")); err == nil {
		t.Error("Write over a named pipe succeeded")
	}
	s := NewSet()
	s.Add(filepath.Join(dir, "a.csv"), text("a"))
	s.Add(pipe, text("x"))
	if err := s.Commit(); err == nil {
		t.Error("Set over a named pipe succeeded")
	}
	if st, err := os.Lstat(pipe); err != nil || st.Mode()&os.ModeNamedPipe == 0 {
		t.Errorf("the named pipe was replaced: %v %v", st.Mode(), err)
	}
	if got := names(t, dir); len(got) != 1 {
		t.Errorf("left %v, want the pipe alone", got)
	}
}
