package main

import (
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"pdwave/infer/restore"
)

// runCLIEnv is runCLI with extra environment variables.
func runCLIEnv(t *testing.T, dir string, env []string, args ...string) (int, string) {
	t.Helper()
	for _, e := range env {
		k, v, _ := strings.Cut(e, "=")
		t.Setenv(k, v)
		defer os.Unsetenv(k)
	}
	code, _, stderr := runCLI(t, dir, args...)
	return code, stderr
}

// TestShardsCLI checks sharding from the command line: the job-array
// environment alone never shards, --shard array reads it, the parts are
// FITS files named after the output, the merge equals a single run
// (pixels and patch table) and records every shard's command, and parts
// of different input content are refused with what differs. Planted, each
// seen to fail: sharding from the environment without --shard (the plain
// run wrote a part, not the product), the merge's identity check disabled
// (the mismatched merge succeeded).
func TestShardsCLI(t *testing.T) {
	repo, _ := filepath.Abs(filepath.Join("..", ".."))
	site := filepath.Join(repo, "testdata", "demo-site.yaml")
	dir := t.TempDir()
	p := func(n string) string { return filepath.Join(dir, n) }
	for _, seed := range []string{"5", "6"} {
		if code, _, stderr := runCLI(t, repo, "simulate", "--site", site, "--out", p("s"+seed), "--field", "128", "--frames", "4", "--seed", seed); code != 0 {
			t.Fatal(stderr)
		}
	}
	burst := p("s5/burst-0001.fits")
	args := func(out string, more ...string) []string {
		return append([]string{"restore", burst, "--site", site, "--out", p(out), "--quiet", "--workers", "1"}, more...)
	}
	array := []string{"SLURM_ARRAY_TASK_ID=4", "SLURM_ARRAY_TASK_MIN=3", "SLURM_ARRAY_TASK_MAX=4"}
	code, stderr := runCLIEnv(t, repo, array, args("single.fits")...)
	if code != 0 || !strings.Contains(stderr, "--shard is not given") {
		t.Fatalf("plain run in a job array: exit %d\n%s", code, stderr)
	}
	if _, err := os.Stat(p("single.fits")); err != nil {
		t.Fatalf("plain run in a job array wrote no product: %v", err)
	}
	code, stderr = runCLIEnv(t, repo, array, args("merged.fits", "--shard", "array")...)
	if code != 0 || !strings.Contains(stderr, "shard 1/2 from the job array") {
		t.Fatalf("--shard array: exit %d\n%s", code, stderr)
	}
	if code, _, stderr := runCLI(t, repo, args("merged.fits", "--shard", "0/2")...); code != 0 {
		t.Fatal(stderr)
	}
	if code, _, stderr := runCLI(t, repo, "restore", "merge", "--out", p("merged.fits")); code != 0 {
		t.Fatal(stderr)
	}
	sameRestoration(t, p("single.fits"), p("merged.fits"))
	var s restore.Summary
	b, _ := os.ReadFile(p("merged_summary.json"))
	if err := json.Unmarshal(b, &s); err != nil {
		t.Fatal(err)
	}
	for _, sh := range []string{"0/2", "1/2"} {
		if c := s.Settings["command shard "+sh]; !strings.Contains(c, "--shard") {
			t.Errorf("merged provenance lacks the command of shard %s: %q", sh, c)
		}
	}

	// Shard 1 from other data under the same name: the merge says what differs.
	other, _ := os.ReadFile(p("s6/burst-0001.fits"))
	orig, _ := os.ReadFile(burst)
	os.WriteFile(burst, other, 0o644)
	code, _, stderr = runCLI(t, repo, args("mixed.fits", "--shard", "1/2")...)
	os.WriteFile(burst, orig, 0o644)
	if code != 0 {
		t.Fatal(stderr)
	}
	if code, _, stderr := runCLI(t, repo, args("mixed.fits", "--shard", "0/2")...); code != 0 {
		t.Fatal(stderr)
	}
	code, _, stderr = runCLI(t, repo, "restore", "merge", "--out", p("mixed.fits"))
	if code == 0 || !strings.Contains(stderr, "the burst file's content differs") {
		t.Errorf("merge of parts from different data: exit %d\n%s", code, stderr)
	}
	// An incomplete set names the missing shard.
	os.Remove(restore.PartPath(p("mixed.fits"), restore.Shard{Index: 1, Count: 2}))
	code, _, stderr = runCLI(t, repo, "restore", "merge", "--out", p("mixed.fits"))
	if code == 0 || !strings.Contains(stderr, "shard 1/2 not given") {
		t.Errorf("merge with a shard missing: exit %d\n%s", code, stderr)
	}
}

// TestSeriesCLI restores a series of bursts into one folder, checks the
// series summary, then reruns it: bursts already restored from the same
// content and settings are skipped, a burst whose content changed is
// restored again. Planted: done() always false (every rerun restored both
// bursts again) failed.
func TestSeriesCLI(t *testing.T) {
	repo, _ := filepath.Abs(filepath.Join("..", ".."))
	site := filepath.Join(repo, "testdata", "demo-site.yaml")
	dir := t.TempDir()
	p := func(n string) string { return filepath.Join(dir, n) }
	if code, _, stderr := runCLI(t, repo, "simulate", "--site", site, "--out", p("in"), "--bursts", "2", "--field", "128", "--frames", "4", "--seed", "8"); code != 0 {
		t.Fatal(stderr)
	}
	args := []string{"restore", p("in/burst-0001.fits"), p("in/burst-0002.fits"), "--site", site, "--out", p("out"), "--quiet", "--workers", "1"}
	if code, _, stderr := runCLI(t, repo, args...); code != 0 {
		t.Fatal(stderr)
	}
	series, err := os.ReadFile(p("out/" + restore.SeriesFile))
	if err != nil {
		t.Fatal(err)
	}
	if lines := strings.Split(strings.TrimSpace(string(series)), "\n"); len(lines) != 3 || !strings.HasPrefix(lines[0], "burst,product,patches") || !strings.Contains(lines[2], "burst-0002_restored.fits") {
		t.Fatalf("series summary:\n%s", series)
	}
	code, _, stderr := runCLI(t, repo, args...)
	if code != 0 || strings.Count(stderr, "already restored") != 2 {
		t.Fatalf("rerun: exit %d, want both bursts skipped\n%s", code, stderr)
	}
	// New content for the second burst: only it is restored again.
	b1, _ := os.ReadFile(p("in/burst-0001.fits"))
	os.WriteFile(p("in/burst-0002.fits"), b1, 0o644)
	code, _, stderr = runCLI(t, repo, args...)
	if code != 0 || strings.Count(stderr, "already restored") != 1 || !strings.Contains(stderr, "burst-0002_restored.fits: ") {
		t.Fatalf("rerun after a change: exit %d\n%s", code, stderr)
	}
	after, _ := os.ReadFile(p("out/" + restore.SeriesFile))
	if l := strings.Split(strings.TrimSpace(string(after)), "\n"); len(l) != 3 || strings.Split(l[1], ",")[5] != strings.Split(l[2], ",")[5] {
		t.Errorf("series summary after the change (both bursts now hold the same data):\n%s", after)
	}
}
