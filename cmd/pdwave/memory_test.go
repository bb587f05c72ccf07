package main

import (
	"os"
	"os/exec"
	"path/filepath"
	"syscall"
	"testing"
)

// restoreRSSConstant is the constant of restore's memory bound: the peak
// resident memory of a run beyond twice the burst file's size. Measured:
// a simulated 96² × 16 × 2 burst (1.2 MB) peaks at 70 MB (program,
// weights, plans, per-worker buffers); the collector's headroom
// (restoreGCHeadroom, 64 MiB) comes on top of it for larger fields. The
// 512² burst of the test (34.6 MB) peaked at 162 MB (bound 210 MB); with
// the plant below at 253 MB.
const restoreRSSConstant = 70<<20 + restoreGCHeadroom

// TestRestoreMemory restores a simulated 512² × 16 frames × 2 channels
// burst in a child process and checks its peak resident memory (getrusage
// ru_maxrss, Linux kB) against 2 × the file's size + restoreRSSConstant.
// Not a timing test. Planted: the burst read whole and converted to
// float64 (Options.Float32 off, the field copied once more to float32)
// fails it.
func TestRestoreMemory(t *testing.T) {
	if testing.Short() {
		t.Skip("simulates and restores a 512² field")
	}
	dir := t.TempDir()
	repo, _ := filepath.Abs(filepath.Join("..", ".."))
	demo := filepath.Join(repo, "testdata", "demo-site.yaml")
	if code, _, stderr := runCLI(t, repo, "simulate", "--site", demo, "--out", filepath.Join(dir, "sim"), "--field", "512", "--frames", "16"); code != 0 {
		t.Fatalf("simulate: exit %d\n%s", code, stderr)
	}
	path := filepath.Join(dir, "sim", "burst-0001.fits")
	st, err := os.Stat(path)
	if err != nil {
		t.Fatal(err)
	}
	rss := childRSS(t, repo, "restore", path, "--site", demo, "--out", filepath.Join(dir, "r.fits"), "--quiet")
	bound := 2*st.Size() + restoreRSSConstant
	t.Logf("file %.1f MB, peak RSS %.1f MB, bound %.1f MB", float64(st.Size())/1e6, float64(rss)/1e6, float64(bound)/1e6)
	if rss > bound {
		t.Errorf("restore of a %d-byte burst peaked at %d bytes, more than 2 × the file + %d", st.Size(), rss, int64(restoreRSSConstant))
	}
}

// childRSS runs pdwave with args in a child process (as runCLI) and
// returns its peak resident memory in bytes.
func childRSS(t *testing.T, dir string, args ...string) int64 {
	t.Helper()
	self, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	c := exec.Command(self, args...)
	c.Dir = dir
	c.Env = append(os.Environ(), cliEnv+"=1")
	if out, err := c.CombinedOutput(); err != nil {
		t.Fatalf("pdwave %v: %v\n%s", args, err, out)
	}
	ru, ok := c.ProcessState.SysUsage().(*syscall.Rusage)
	if !ok {
		t.Skip("no resource usage of the child on this system")
	}
	return ru.Maxrss << 10 // kB on Linux
}
