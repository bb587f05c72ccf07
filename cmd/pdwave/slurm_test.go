package main

import (
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"syscall"
	"testing"
	"time"
)

// script runs a testdata/slurm batch script with bash, pdwave being this
// test binary, the array variables set by hand, and sends it sig after
// delay (0: no signal). It returns the exit code and standard error.
func script(t *testing.T, repo, name string, env []string, delay time.Duration, sig syscall.Signal, args ...string) (int, string) {
	t.Helper()
	self, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	c := exec.Command("bash", append([]string{filepath.Join(repo, "testdata", "slurm", name)}, args...)...)
	c.Dir = repo
	c.Env = append(append(os.Environ(), cliEnv+"=1", "PDWAVE="+self, "SLURM_CPUS_PER_TASK=1"), env...)
	return runSignalled(t, c, delay, sig) // bash execs pdwave: the signal reaches it
}

// TestSlurmScripts runs the documented batch scripts of testdata/slurm as
// SLURM would, with the array variables set by hand. Shards of one field:
// every task is killed with SIGKILL five times at random moments (ten
// kills in all, a fixed seed) and once with SIGTERM, and run again after
// each (the script resumes); the merge must then equal one uninterrupted
// run, pixels and patch table. Series: one burst per task, and a task run
// again skips its finished burst. Planted: dropping --resume from the shard
// script (the rerun after a kill is refused: "add --resume").
func TestSlurmScripts(t *testing.T) {
	if testing.Short() {
		t.Skip("runs the batch scripts with ten kills (about 30 s)")
	}
	if _, err := exec.LookPath("bash"); err != nil {
		t.Skip("no bash")
	}
	repo, _ := filepath.Abs(filepath.Join("..", ".."))
	site := filepath.Join(repo, "testdata", "demo-site.yaml")
	dir := t.TempDir()
	p := func(n string) string { return filepath.Join(dir, n) }
	if code, _, stderr := runCLI(t, repo, "simulate", "--site", site, "--out", p("b"), "--field", "448", "--frames", "4", "--seed", "8", "--bursts", "2"); code != 0 {
		t.Fatal(stderr)
	}
	field := p("b/burst-0001.fits")
	t0 := time.Now()
	if code, _, stderr := runCLI(t, repo, "restore", field, "--site", site, "--out", p("single.fits"), "--quiet", "--workers", "1"); code != 0 {
		t.Fatal(stderr)
	}
	clean := time.Since(t0)
	rng := rand.New(rand.NewPCG(3, 4))
	stops, replays := 0, 0
	for task := 0; task < 2; task++ {
		env := []string{"SLURM_ARRAY_TASK_ID=" + string(rune('0'+task)), "SLURM_ARRAY_TASK_COUNT=2"}
		for k := 0; k < 6; k++ {
			sig, delay := syscall.SIGKILL, time.Duration(float64(clean)*(0.03+0.35*rng.Float64()))
			if k == 5 {
				sig = syscall.SIGTERM
			}
			code, stderr := script(t, repo, "restore-shards.sbatch", env, delay, sig, field, site, p("merged.fits"))
			if code != 0 && code != 128+int(syscall.SIGTERM) && code != -1 {
				t.Fatalf("task %d, stop %d (%v): exit %d\n%s", task, k, sig, code, stderr)
			}
			if code != 0 {
				stops++
			}
			if strings.Contains(stderr, "replayed") {
				replays++
			}
		}
		if code, stderr := script(t, repo, "restore-shards.sbatch", env, 0, 0, field, site, p("merged.fits")); code != 0 {
			t.Fatalf("task %d to the end: exit %d\n%s", task, code, stderr)
		}
	}
	t.Logf("clean run %v; %d of 12 signals stopped a run before its end; %d runs replayed journaled patches", clean, stops, replays)
	if stops < 8 || replays < 1 {
		t.Fatalf("%d of 12 signals arrived before the runs ended and %d runs resumed from a journal: the kills test nothing", stops, replays)
	}
	if code, _, stderr := runCLI(t, repo, "restore", "merge", "--out", p("merged.fits")); code != 0 {
		t.Fatal(stderr)
	}
	sameRestoration(t, p("single.fits"), p("merged.fits"))

	bursts := []string{p("b/burst-0001.fits"), p("b/burst-0002.fits")}
	for task := 0; task < 2; task++ {
		env := []string{"SLURM_ARRAY_TASK_ID=" + string(rune('0'+task)), "SLURM_ARRAY_TASK_MIN=0"}
		if code, stderr := script(t, repo, "restore-series.sbatch", env, 0, 0, append([]string{site, p("series")}, bursts...)...); code != 0 {
			t.Fatalf("series task %d: exit %d\n%s", task, code, stderr)
		}
	}
	for _, name := range []string{"burst-0001_restored.fits", "burst-0002_restored.fits"} {
		if _, err := os.Stat(p("series/" + name)); err != nil {
			t.Errorf("series product %s missing: %v", name, err)
		}
	}
	sameRestoration(t, p("single.fits"), p("series/burst-0001_restored.fits"))
	code, stderr := script(t, repo, "restore-series.sbatch", []string{"SLURM_ARRAY_TASK_ID=0"}, 0, 0, append([]string{site, p("series")}, bursts...)...)
	t.Logf("series task run again: %s", strings.TrimSpace(stderr))
	if code != 0 || !strings.Contains(stderr, "skip") && !strings.Contains(stderr, "already") {
		t.Errorf("series task run again: exit %d, want it to skip the finished burst\n%s", code, stderr)
	}
}
