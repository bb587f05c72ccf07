package atomicfile

import (
	"errors"
	"io"
	"os"
	"path/filepath"
	"testing"
)

// TestWriteReplaces checks the new content arrives whole, with mode 0644
// under the umask (the umask is 022 or stricter on test machines; the
// expected mode is computed, not assumed).
func TestWriteReplaces(t *testing.T) {
	p := filepath.Join(t.TempDir(), "out.fits")
	if err := os.WriteFile(p, []byte("old"), 0o600); err != nil {
		t.Fatal(err)
	}
	if err := WriteBytes(p, []byte("new content")); err != nil {
		t.Fatal(err)
	}
	got, _ := os.ReadFile(p)
	if string(got) != "new content" {
		t.Fatalf("content %q", got)
	}
	st, _ := os.Stat(p)
	if st.Mode().Perm() != Mode() || Mode()&0o400 == 0 {
		t.Errorf("mode %v, want %v", st.Mode().Perm(), Mode())
	}
	if m := Mode(); m&^0o644 != 0 {
		t.Errorf("Mode %v grants more than 0644", m)
	}
}

// TestFailedWriteKeepsOld checks a failing writer leaves the old file and no
// temporary file behind.
func TestFailedWriteKeepsOld(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "out.csv")
	os.WriteFile(p, []byte("old"), 0o644)
	boom := errors.New("boom")
	err := Write(p, func(w io.Writer) error {
		w.Write([]byte("partial"))
		return boom
	})
	if !errors.Is(err, boom) {
		t.Fatalf("error %v, want boom", err)
	}
	got, _ := os.ReadFile(p)
	if string(got) != "old" {
		t.Fatalf("old file replaced: %q", got)
	}
	ents, _ := os.ReadDir(dir)
	if len(ents) != 1 {
		t.Fatalf("left %d files, want only the old one", len(ents))
	}
}

// TestRemoveStale checks leftovers of an interrupted write are removed and
// nothing else is.
func TestRemoveStale(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "field.fits")
	a, err := Create(p)
	if err != nil {
		t.Fatal(err)
	}
	a.Write([]byte("x")) // interrupted: never committed
	os.WriteFile(filepath.Join(dir, ".other.fits.tmp-1"), nil, 0o644)
	os.WriteFile(filepath.Join(dir, "field.fits.tmp-keep"), nil, 0o644)
	n, err := RemoveStale(p)
	if err != nil || n != 1 {
		t.Fatalf("removed %d (%v), want 1", n, err)
	}
	if _, err := os.Stat(a.f.Name()); !os.IsNotExist(err) {
		t.Errorf("stale temporary file still there")
	}
	ents, _ := os.ReadDir(dir)
	if len(ents) != 2 {
		t.Errorf("%d files left, want the 2 that are not ours", len(ents))
	}
	if err := a.Commit(); err == nil {
		t.Errorf("commit of a removed temporary file succeeded")
	}
}
