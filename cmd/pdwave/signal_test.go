package main

import (
	"bytes"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"pdwave/infer/restore"
	"pdwave/model/net"
)

// lockedBuffer is a bytes.Buffer safe for a child's output and the test.
type lockedBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (l *lockedBuffer) Write(p []byte) (int, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.Write(p)
}

func (l *lockedBuffer) String() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.String()
}

// signalled runs pdwave with args in dir, sends it sig after delay, and
// returns its exit code and standard error.
func signalled(t *testing.T, dir string, delay time.Duration, sig syscall.Signal, args ...string) (int, string) {
	t.Helper()
	return runSignalled(t, cliCommand(t, dir, args...), delay, sig)
}

// runSignalled starts c, sends it sig after delay (none if delay is 0),
// waits and returns its exit code (-1 if a signal ended it) and standard
// error.
func runSignalled(t *testing.T, c *exec.Cmd, delay time.Duration, sig syscall.Signal) (int, string) {
	t.Helper()
	var stderr lockedBuffer
	c.Stderr = &stderr
	if err := c.Start(); err != nil {
		t.Fatal(err)
	}
	if delay > 0 {
		timer := time.AfterFunc(delay, func() { c.Process.Signal(sig) })
		defer timer.Stop()
	}
	err := c.Wait()
	if ee, ok := err.(*exec.ExitError); ok {
		return ee.ExitCode(), stderr.String()
	}
	if err != nil {
		t.Fatal(err)
	}
	return 0, stderr.String()
}

// resumeArgs returns the arguments of the "resume with: pdwave …" command
// on the last line of stderr (the test's paths need no shell quoting).
func resumeArgs(t *testing.T, stderr string) []string {
	t.Helper()
	lines := strings.Split(strings.TrimSpace(stderr), "\n")
	last := lines[len(lines)-1]
	_, cmd, ok := strings.Cut(last, "resume with: pdwave ")
	if !ok || !strings.HasPrefix(last, "pdwave: ") {
		t.Fatalf("last line %q does not say how to resume\n%s", last, stderr)
	}
	return strings.Fields(cmd)
}

// TestRestoreSignalResume stops a restore with SIGTERM (and one with
// SIGINT) in the middle of its patches, checks it exits with 128 + the
// signal number and a line giving the exact command to resume, runs that
// command and checks the result equals an uninterrupted run: the restored
// pixels bit for bit and the patch table byte for byte. Planted, each seen
// to fail: catching only SIGINT (the SIGTERM run died with status -1 and no
// resume line), not flushing the journal at the stop (the resumed run
// recomputed every patch and did not say "replayed 7").
func TestRestoreSignalResume(t *testing.T) {
	repo, _ := filepath.Abs(filepath.Join("..", ".."))
	site := filepath.Join(repo, "testdata", "demo-site.yaml")
	dir := t.TempDir()
	p := func(n string) string { return filepath.Join(dir, n) }
	if code, _, stderr := runCLI(t, repo, "simulate", "--site", site, "--out", p("b"), "--field", "192", "--frames", "4", "--seed", "5"); code != 0 {
		t.Fatal(stderr)
	}
	args := func(out string) []string {
		return []string{"restore", p("b/burst-0001.fits"), "--site", site, "--out", p(out), "--fit", "--workers", "1"}
	}
	t0 := time.Now()
	if code, _, stderr := runCLI(t, repo, args("clean.fits")...); code != 0 {
		t.Fatal(stderr)
	}
	clean := time.Since(t0)
	done := regexp.MustCompile(`interrupted after (\d+) of (\d+) patches`)
	for _, sig := range []syscall.Signal{syscall.SIGTERM, syscall.SIGINT} {
		out := "int-" + strconv.Itoa(int(sig)) + ".fits"
		delay := clean * 6 / 10
		var stderr string
		var code, k, n int
		for try := 0; try < 4; try++ {
			os.RemoveAll(p(out + ".journal"))
			code, stderr = signalled(t, repo, delay, sig, args(out)...)
			m := done.FindStringSubmatch(stderr)
			if m == nil {
				if code == 0 { // finished before the signal
					delay /= 2
					continue
				}
				t.Fatalf("%v: exit %d without the interruption line\n%s", sig, code, stderr)
			}
			k, _ = strconv.Atoi(m[1])
			n, _ = strconv.Atoi(m[2])
			if k > 0 {
				break
			}
			delay = delay * 3 / 2 // stopped before any patch: later
		}
		if !(k > 0 && k < n) {
			t.Fatalf("%v: could not stop the run between patches (%d of %d)\n%s", sig, k, n, stderr)
		}
		if code != 128+int(sig) {
			t.Errorf("%v: exit status %d, want %d", sig, code, 128+int(sig))
		}
		t.Logf("%v after %d of %d patches: %s", sig, k, n, strings.TrimSpace(stderr[strings.LastIndex(strings.TrimSpace(stderr), "\n")+1:]))
		rargs := resumeArgs(t, stderr)
		if sig == syscall.SIGTERM {
			refusedResumes(t, repo, p, args(out), rargs)
		}
		code, _, rerr := runCLI(t, repo, rargs...)
		if code != 0 {
			t.Fatalf("resume %v: exit %d\n%s", rargs, code, rerr)
		}
		if !strings.Contains(rerr, "replayed "+strconv.Itoa(k)) {
			t.Errorf("resume did not replay the %d finished patches:\n%s", k, rerr)
		}
		sameRestoration(t, p("clean.fits"), p(out))
	}

	// Killed outright: the lock stays behind and the next run takes it over.
	if code, _ := signalled(t, repo, clean/2, syscall.SIGKILL, args("kill.fits")...); code == 0 {
		t.Fatal("the killed run finished")
	}
	if _, err := os.Stat(p("kill.fits.lock")); err != nil {
		t.Fatalf("no lock left by the killed run: %v", err)
	}
	code, _, kerr := runCLI(t, repo, append(args("kill.fits"), "--resume")...)
	if code != 0 || !strings.Contains(kerr, "took over the lock") {
		t.Fatalf("run after a kill: exit %d\n%s", code, kerr)
	}
	sameRestoration(t, p("clean.fits"), p("kill.fits"))
	if _, err := os.Stat(p("kill.fits.lock")); !os.IsNotExist(err) {
		t.Errorf("lock left after a finished run: %v", err)
	}
}

// refusedResumes checks that an interrupted restore (run with args, resumed
// with rargs) is not continued with other inputs or settings, nor
// restarted without --resume: each refusal says what differs.
func refusedResumes(t *testing.T, repo string, p func(string) string, args, rargs []string) {
	t.Helper()
	burst := p("b/burst-0001.fits")
	orig, err := os.ReadFile(burst)
	if err != nil {
		t.Fatal(err)
	}
	if code, _, stderr := runCLI(t, repo, "simulate", "--site", args[3], "--out", p("c"), "--field", "192", "--frames", "4", "--seed", "6"); code != 0 {
		t.Fatal(stderr)
	}
	other, err := os.ReadFile(p("c/burst-0001.fits"))
	if err != nil {
		t.Fatal(err)
	}
	os.WriteFile(burst, other, 0o644)
	for _, c := range []struct {
		args []string
		want string
	}{
		{rargs, "the burst file's content differs"},
		{args, "add --resume"},
	} {
		code, _, stderr := runCLI(t, repo, c.args...)
		if code == 0 || !strings.Contains(stderr, c.want) {
			t.Errorf("pdwave %v: exit %d, want a refusal saying %q\n%s", c.args, code, c.want, stderr)
		}
		os.WriteFile(burst, orig, 0o644)
	}
	code, _, stderr := runCLI(t, repo, append(rargs, "--overlap", "12")...)
	if code == 0 || !strings.Contains(stderr, "setting overlap differs: 16 in the journal, 12 now") {
		t.Errorf("resume with another setting: exit %d\n%s", code, stderr)
	}
}

// sameRestoration compares two restorations: primary pixels bit for bit
// and the patch tables byte for byte.
func sameRestoration(t *testing.T, a, b string) {
	t.Helper()
	pa, nx, ny, err := restore.ReadFrame(a)
	if err != nil {
		t.Fatal(err)
	}
	pb, mx, my, err := restore.ReadFrame(b)
	if err != nil {
		t.Fatal(err)
	}
	if nx != mx || ny != my {
		t.Fatalf("%d×%d vs %d×%d", nx, ny, mx, my)
	}
	for i := range pa {
		if math.Float64bits(pa[i]) != math.Float64bits(pb[i]) {
			t.Fatalf("pixel %d: %v uninterrupted, %v resumed", i, pa[i], pb[i])
		}
	}
	ca, _ := os.ReadFile(restore.SidecarBase(a) + "_patches.csv")
	cb, _ := os.ReadFile(restore.SidecarBase(b) + "_patches.csv")
	if len(ca) == 0 || !bytes.Equal(ca, cb) {
		t.Error("patch tables differ")
	}
}

// TestTrainSignalResume stops a training run with SIGTERM after a few
// steps, checks the exit status and the resume line, resumes and checks
// the weights equal those of an uninterrupted run. Planted: ignoring
// RunOptions.Stop (every run finished with status 0 and no resume line:
// "could not stop the run").
func TestTrainSignalResume(t *testing.T) {
	repo, _ := filepath.Abs(filepath.Join("..", ".."))
	site := filepath.Join(repo, "testdata", "demo-site.yaml")
	dir := t.TempDir()
	p := func(n string) string { return filepath.Join(dir, n) }
	args := func(out string) []string {
		return []string{"train", "--site", site, "--out", p(out), "--steps", "12", "--batch", "1", "--validation", "-1",
			"--conv", "4,4,4", "--hidden", "8", "--head", "8", "--modes", "6", "--workers", "1", "--reuse", "1"}
	}
	t0 := time.Now()
	if code, _, stderr := runCLI(t, repo, args("clean")...); code != 0 {
		t.Fatal(stderr)
	}
	clean := time.Since(t0)
	var code int
	var stderr string
	step := regexp.MustCompile(`interrupted at step (\d+) of 12`)
	delay := clean / 2
	var m []string
	for try := 0; try < 4; try++ {
		os.RemoveAll(p("int"))
		code, stderr = signalled(t, repo, delay, syscall.SIGTERM, args("int")...)
		if m = step.FindStringSubmatch(stderr); m != nil {
			break
		}
		if code != 0 {
			t.Fatalf("exit %d without the interruption line\n%s", code, stderr)
		}
		delay /= 2
	}
	if m == nil {
		t.Fatalf("could not stop the run before its end\n%s", stderr)
	}
	if code != 128+int(syscall.SIGTERM) {
		t.Errorf("exit status %d, want %d", code, 128+int(syscall.SIGTERM))
	}
	t.Logf("stopped at step %s of 12", m[1])
	if code, _, rerr := runCLI(t, repo, resumeArgs(t, stderr)...); code != 0 {
		t.Fatalf("resume: exit %d\n%s", code, rerr)
	}
	a, err := net.Load(p("clean/weights.safetensors"))
	if err != nil {
		t.Fatal(err)
	}
	b, err := net.Load(p("int/weights.safetensors"))
	if err != nil {
		t.Fatal(err)
	}
	for i, q := range a.Params {
		for k, v := range q.Data {
			if math.Float64bits(v) != math.Float64bits(b.Params[i].Data[k]) {
				t.Fatalf("%s[%d]: %v uninterrupted, %v resumed", q.Name, k, v, b.Params[i].Data[k])
			}
		}
	}
}

// TestTrainResumeSteps checks "train --resume --steps N" continues a
// finished run to step N and says so, and refuses a target already
// passed. Planted: resuming with the checkpoint's plan whatever --steps
// says (the former behaviour) stopped at step 3 and failed.
func TestTrainResumeSteps(t *testing.T) {
	repo, _ := filepath.Abs(filepath.Join("..", ".."))
	site := filepath.Join(repo, "testdata", "demo-site.yaml")
	out := filepath.Join(t.TempDir(), "run")
	args := []string{"train", "--site", site, "--out", out, "--batch", "1", "--validation", "-1",
		"--conv", "4,4,4", "--hidden", "8", "--head", "8", "--modes", "6", "--workers", "1", "--reuse", "1"}
	if code, _, stderr := runCLI(t, repo, append(args, "--steps", "3")...); code != 0 {
		t.Fatal(stderr)
	}
	resume := []string{"train", "--site", site, "--out", out, "--resume", "--workers", "1", "--validation", "-1"}
	code, _, stderr := runCLI(t, repo, append(resume, "--steps", "5")...)
	if code != 0 || !strings.Contains(stderr, "continuing to step 5 as --steps asks (the checkpoint planned 3") {
		t.Fatalf("resume to 5 steps: exit %d\n%s", code, stderr)
	}
	hist, err := os.ReadFile(filepath.Join(out, "history.csv"))
	if err != nil {
		t.Fatal(err)
	}
	if rows := strings.Count(string(hist), "\n") - 1; rows != 5 {
		t.Errorf("history holds %d steps, want 5", rows)
	}
	code, _, stderr = runCLI(t, repo, append(resume, "--steps", "4")...)
	if code == 0 || !strings.Contains(stderr, "already at step 5") {
		t.Errorf("resume to a step already passed: exit %d\n%s", code, stderr)
	}
	code, _, stderr = runCLI(t, repo, append(resume, "--steps", "6", "--hidden", "16")...)
	if code == 0 || !strings.Contains(stderr, "--hidden 16 differs from the checkpoint's network") {
		t.Errorf("resume with another architecture: exit %d\n%s", code, stderr)
	}
}
