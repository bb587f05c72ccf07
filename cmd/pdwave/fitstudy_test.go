package main

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestFitStudyCommand: bad study flags fail with a message naming the flag
// and write nothing; the smallest study (the reference setting, one burst
// of granulation and one of brick) writes a CSV with one row per scene and
// prints the summary table.
func TestFitStudyCommand(t *testing.T) {
	repo, err := filepath.Abs(filepath.Join("..", ".."))
	if err != nil {
		t.Fatal(err)
	}
	site := filepath.Join(repo, "testdata", "demo-site.yaml")
	for _, c := range []struct {
		args []string
		want string
	}{
		{[]string{"--scenes", "bogus"}, "bogus"},
		{[]string{"--scenes", "granulation,granulation"}, "twice"},
		{[]string{"--cases", "bogus"}, "--cases"},
		{[]string{"--quick", "--cases", "patch"}, "--quick"},
		{[]string{"--bursts", "0"}, "--bursts"},
		{[]string{"--scene-dir", filepath.Join(repo, "no-such-folder")}, "no-such-folder"},
	} {
		out := filepath.Join(t.TempDir(), "study")
		args := append([]string{"fit", "study", "--site", site, "--out", out}, c.args...)
		code, _, stderr := runCLI(t, repo, args...)
		if code == 0 || !strings.Contains(stderr, c.want) {
			t.Errorf("%v: exit %d, stderr %q, want a failure mentioning %q", c.args, code, stderr, c.want)
		}
		if _, err := os.Stat(out); err == nil {
			t.Errorf("%v: left %s behind", c.args, out)
		}
	}

	out := filepath.Join(t.TempDir(), "study")
	code, _, stderr := runCLI(t, repo, "fit", "study", "--site", site, "--out", out,
		"--cases", "ref", "--scenes", "granulation,brick", "--bursts", "1")
	if code != 0 {
		t.Fatalf("fit study: exit %d\n%s", code, stderr)
	}
	b, err := os.ReadFile(filepath.Join(out, "fit-study.csv"))
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSpace(string(b)), "\n")
	if len(lines) != 3 || !strings.HasPrefix(lines[0], "scene,d_over_r0,") ||
		!strings.HasPrefix(lines[1], "granulation,5,64,16,1,1,") || !strings.HasPrefix(lines[2], "brick,5,64,16,1,1,") {
		t.Errorf("fit-study.csv:\n%s", b)
	}
	if !strings.Contains(stderr, "2–10 mean") || strings.Count(stderr, "\n") < 5 {
		t.Errorf("no summary table on stderr:\n%s", stderr)
	}
}
