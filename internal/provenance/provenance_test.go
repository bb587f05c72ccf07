package provenance

import (
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

// TestCommandLine: the recorded command line, run by a POSIX shell,
// gives back the same words (/bin/sh as the reference; printf '%s\n'
// prints one word a line). Planted: quoting without escaping embedded
// single quotes fails.
func TestCommandLine(t *testing.T) {
	args := []string{"/usr/local/bin/pdwave", "fit", "my burst.fits", "--site", "it's.yaml", "--out=a;b", "", "$HOME", "64×64", "a\nb", "plain-1.5"}
	cl := CommandLine(args)
	if !strings.HasPrefix(cl, "pdwave fit 'my burst.fits' --site 'it'\\''s.yaml' ") {
		t.Errorf("CommandLine = %q", cl)
	}
	out, err := exec.Command("/bin/sh", "-c", "printf '%s\\0' "+strings.TrimPrefix(cl, "pdwave ")).Output()
	if err != nil {
		t.Fatalf("sh: %v", err)
	}
	got := strings.Split(strings.TrimSuffix(string(out), "\x00"), "\x00")
	if strings.Join(got, "|") != strings.Join(args[1:], "|") {
		t.Errorf("the shell reads %q, want %q", got, args[1:])
	}
}

// TestSettings: the hashes are SHA-256 of the files' content (FIPS 180-4;
// the check value is sha256("abc") from FIPS 180-4's example, also
// sha256sum's output), several files of one role are '+'-joined, empty
// paths are skipped and a missing file is an error naming it.
func TestSettings(t *testing.T) {
	dir := t.TempDir()
	a, b := filepath.Join(dir, "a"), filepath.Join(dir, "b")
	os.WriteFile(a, []byte("abc"), 0o644)
	os.WriteFile(b, []byte(""), 0o644)
	const abc = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
	const empty = "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"
	s, err := Settings([]string{"pdwave", "x"}, Input{"burst", a}, Input{"burst", b}, Input{"site", a}, Input{"weights", ""})
	if err != nil {
		t.Fatal(err)
	}
	want := map[string]string{"command line": "pdwave x", "sha256 burst": abc + "+" + empty, "sha256 site": abc}
	if len(s) != len(want) {
		t.Errorf("Settings = %v, want %v", s, want)
	}
	for k, v := range want {
		if s[k] != v {
			t.Errorf("%s = %q, want %q", k, s[k], v)
		}
	}
	if _, err := Settings(nil, Input{"burst", filepath.Join(dir, "gone")}); err == nil || !strings.Contains(err.Error(), "gone") {
		t.Errorf("missing file: %v", err)
	}
}
