package outpath

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestPlanRefuses checks every way an output can name an input, a
// non-regular file or a folder holding an input is refused with a message
// that says why, and that plain new outputs pass. Planted, each seen to
// fail: comparing absolute paths without filepath.EvalSymlinks (the
// linked-folder row; os.SameFile still catches a link to the input file),
// dropping os.SameFile (the hard-link row), dropping the
// folder-holds-input check (the folder rows).
func TestPlanRefuses(t *testing.T) {
	dir := t.TempDir()
	p := func(n string) string { return filepath.Join(dir, n) }
	os.MkdirAll(p("data/sub"), 0o755)
	os.WriteFile(p("data/in.fits"), []byte("x"), 0o644)
	os.WriteFile(p("data/sub/deep.fits"), []byte("y"), 0o644)
	os.Symlink(p("data/in.fits"), p("link.fits"))
	os.Symlink(p("data"), p("datalink"))
	os.Symlink(p("data/missing.fits"), p("dangling.fits"))
	if err := os.Link(p("data/in.fits"), p("hard.fits")); err != nil {
		t.Fatal(err)
	}
	t.Chdir(dir)
	in := []string{"data/in.fits", p("data/sub/deep.fits")}
	cases := []struct {
		name      string
		file, dir string
		want      string // "" = accepted
	}{
		{"relative spelling", "./data/in.fits", "", "is the input"},
		{"absolute spelling", p("data/in.fits"), "", "is the input"},
		{"dot-dot spelling", "data/sub/../in.fits", "", "is the input"},
		{"symbolic link", "link.fits", "", "is the input"},
		{"linked folder", "datalink/in.fits", "", "is the input"},
		{"hard link", "hard.fits", "", "is the input"},
		{"device", "/dev/null", "", "device"},
		{"folder for a file", "data", "", "folder"},
		{"new file", "out/new.fits", "", ""},
		{"dangling link to a new file", "dangling.fits", "", ""},
		{"folder holding an input", "", "data", "holds the input"},
		{"parent folder holding an input", "", ".", "holds the input"},
		{"linked folder holding an input", "", "datalink/sub", "holds the input"},
		{"file for a folder", "", "data/in.fits", "not a folder"},
		{"device for a folder", "", "/dev/null", "not a folder"},
		{"new folder", "", "out", ""},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			pl := New("test").Input(in...)
			if c.file != "" {
				pl.File(c.file)
			} else {
				pl.Dir(c.dir)
			}
			err := pl.Err()
			switch {
			case c.want == "" && err != nil:
				t.Fatalf("refused: %v", err)
			case c.want != "" && err == nil:
				t.Fatal("accepted")
			case c.want != "" && !strings.Contains(err.Error(), c.want):
				t.Fatalf("error %q does not say %q", err, c.want)
			}
		})
	}
	// Two outputs with one name, under two spellings.
	if err := New("test").File("out/a.fits").File(p("out/a.fits")).Err(); err == nil || !strings.Contains(err.Error(), "two outputs") {
		t.Errorf("two outputs with one name: %v", err)
	}
	if !SameFile("data/in.fits", "link.fits") || SameFile("data/in.fits", "data/sub/deep.fits") {
		t.Error("SameFile wrong")
	}
}

// TestReplaceable checks that only a folder pdwave wrote (every entry in
// its manifest) may be replaced. Planted: accepting any folder with a
// manifest, whatever else it holds, failed the "added file" row.
func TestReplaceable(t *testing.T) {
	dir := t.TempDir()
	if err := Replaceable("demo", filepath.Join(dir, "new")); err != nil {
		t.Errorf("new folder: %v", err)
	}
	if err := Replaceable("demo", dir); err != nil {
		t.Errorf("empty folder: %v", err)
	}
	os.WriteFile(filepath.Join(dir, "thesis.tex"), []byte("mine"), 0o644)
	if err := Replaceable("demo", dir); err == nil || !strings.Contains(err.Error(), "did not write") {
		t.Errorf("foreign folder: %v", err)
	}
	out := filepath.Join(dir, "out")
	os.MkdirAll(filepath.Join(out, "report"), 0o755)
	os.WriteFile(filepath.Join(out, "restored.fits"), []byte("r"), 0o644)
	os.WriteFile(filepath.Join(out, "report", "index.html"), []byte("h"), 0o644)
	if err := WriteManifest(out); err != nil {
		t.Fatal(err)
	}
	if err := Replaceable("demo", out); err != nil {
		t.Errorf("pdwave's own folder: %v", err)
	}
	os.WriteFile(filepath.Join(out, "report", "notes.txt"), []byte("mine"), 0o644)
	if err := Replaceable("demo", out); err == nil || !strings.Contains(err.Error(), "notes.txt") {
		t.Errorf("added file: %v", err)
	}
	if err := Replaceable("demo", filepath.Join(out, "restored.fits")); err == nil {
		t.Error("a file accepted as a folder")
	}
}
