package infer

import (
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"pdwave/internal/atomicfile"
	"pdwave/internal/outpath"
)

// DemoJob is "pdwave demo": the whole chain (simulate, restore, compare) on
// one site, each step run as the pdwave command a user would type, in a
// folder assembled under a temporary name beside Out and renamed into place
// when every step has succeeded.
type DemoJob struct {
	Exe    string // the pdwave executable the steps run
	Site   string // site file; made absolute for the steps
	Out    string // output folder; replaced only if pdwave wrote all of it
	Field  int    // side of the simulated field, pixels
	Frames int    // frames per burst (0 = the site's)
	Seed   uint64 // random seed of the simulation
	Polish int    // classical polish iterations after the learned estimate
	Log    io.Writer
}

// demoBurst is the burst the demo simulates, relative to its folder.
var demoBurst = filepath.Join("burst", "burst-0001.fits")

// Steps returns the arguments of the pdwave commands the demo runs, in
// order, with paths relative to the output folder; site is the site file
// as the steps name it.
func (j DemoJob) Steps(site string) [][]string {
	return [][]string{
		{"simulate", "--site", site, "--out", "burst", "--field", strconv.Itoa(j.Field),
			"--frames", strconv.Itoa(j.Frames), "--seed", strconv.FormatUint(j.Seed, 10)},
		{"restore", demoBurst, "--site", site, "--out", "restored.fits",
			"--polish", strconv.Itoa(j.Polish), "--quiet"},
		{"compare", demoBurst, "--site", site, "--out", "report",
			"--polish", strconv.Itoa(j.Polish)},
	}
}

// Run runs the steps in a temporary folder beside Out, printing each
// command and its output to Log, and installs the folder as Out. On an
// error the temporary folder is removed and Out is left as it was.
func (j DemoJob) Run() error {
	out := filepath.Clean(j.Out)
	parent := filepath.Dir(out)
	if err := os.MkdirAll(parent, 0o755); err != nil {
		return fmt.Errorf("demo: %w", err)
	}
	tmp, err := os.MkdirTemp(parent, "."+filepath.Base(out)+".tmp-")
	if err != nil {
		return fmt.Errorf("demo: %w", err)
	}
	done := false
	defer func() {
		if !done {
			os.RemoveAll(tmp)
		}
	}()
	// The steps run inside the folder being assembled, with paths relative
	// to it, so that what they print holds for the final folder too.
	site, err := filepath.Abs(j.Site)
	if err != nil {
		return fmt.Errorf("demo: %w", err)
	}
	start := time.Now()
	if err := j.runSteps(j.Steps(site), tmp, out); err != nil {
		return err
	}
	if err := demoInstall(tmp, out); err != nil {
		return err
	}
	done = true
	fmt.Fprintf(j.log(), "demo: finished in %.1f s; open %s\n", time.Since(start).Seconds(),
		filepath.Join(out, "report", "index.html"))
	return nil
}

// runSteps runs every step in dir, announcing it as run in out.
func (j DemoJob) runSteps(steps [][]string, dir, out string) error {
	log := j.log()
	for i, args := range steps {
		fmt.Fprintf(log, "demo step %d/%d (in %s): pdwave %s\n", i+1, len(steps), out, strings.Join(args, " "))
		t0 := time.Now()
		if err := demoExec(j.Exe, dir, args, log); err != nil {
			return fmt.Errorf("demo step %d (pdwave %s): %w", i+1, args[0], err)
		}
		fmt.Fprintf(log, "demo step %d/%d: done in %.1f s\n", i+1, len(steps), time.Since(t0).Seconds())
	}
	return nil
}

// log is the job's log, io.Discard if none.
func (j DemoJob) log() io.Writer {
	if j.Log == nil {
		return io.Discard
	}
	return j.Log
}

// demoInstall lists the assembled folder tmp in its manifest and puts it in
// place of out, which must still be replaceable (written by pdwave alone).
func demoInstall(tmp, out string) error {
	if err := outpath.WriteManifest(tmp); err != nil {
		return fmt.Errorf("demo: %w", err)
	}
	if err := os.Chmod(tmp, atomicfile.DirMode()); err != nil {
		return fmt.Errorf("demo: %w", err)
	}
	// Checked again: something may have been put there since the start.
	if err := outpath.Replaceable("demo", out); err != nil {
		return err
	}
	if err := os.RemoveAll(out); err != nil {
		return fmt.Errorf("demo: replacing %s: %w", out, err)
	}
	if err := os.Rename(tmp, out); err != nil {
		return fmt.Errorf("demo: %w", err)
	}
	return nil
}

// demoExec runs one pdwave step as a child process in dir, passing its
// output through, and reports its last error line if it fails.
func demoExec(self, dir string, args []string, log io.Writer) error {
	c := exec.Command(self, args...)
	c.Dir = dir
	c.Stdout = log
	var errBuf strings.Builder
	c.Stderr = io.MultiWriter(log, &errBuf)
	if err := c.Run(); err != nil {
		lines := strings.Split(strings.TrimSpace(errBuf.String()), "\n")
		return fmt.Errorf("%v: %s", err, lines[len(lines)-1])
	}
	return nil
}
