package main

import (
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"pdwave/internal/atomicfile"
	"pdwave/internal/outpath"
)

// demoFlags holds the flags of "pdwave demo".
var demoFlags struct {
	site, out string
	field     int
	frames    int
	seed      uint64
	polish    int
}

var demoCmd = &cobra.Command{
	Use:   "demo --out DIR",
	Short: "Simulate a small field for the demo site, restore it and compare the estimates",
	Long: `demo runs the whole chain on the invented demo telescope and site
(testdata/demo-site.yaml) with the built-in weights, each step as the command
you would type yourself (they are printed as they run):

  1. pdwave simulate   a field burst with anisoplanatic seeing, seeded;
  2. pdwave restore    learned wavefronts, polished with a few classical steps,
                       deconvolved and mosaicked;
  3. pdwave compare    learned, polished and fitted wavefronts of every
                       patch, with figures and an offline HTML page.

DIR receives burst/ (the simulated burst), restored.fits with its preview PNG,
CSV and JSON, and report/ (open report/index.html). The folder is assembled
under a temporary name beside DIR and renamed into place when every step has
succeeded, so a failed demo leaves no half-written DIR. An existing DIR is
replaced only if pdwave wrote everything in it (it lists its files in
.pdwave-files); any other non-empty folder is refused.`,
	Args: cobra.NoArgs,
	RunE: demoRun,
}

func init() {
	f := demoCmd.Flags()
	o := &demoFlags
	f.StringVar(&o.site, "site", filepath.Join("testdata", "demo-site.yaml"), "site file (YAML)")
	f.StringVar(&o.out, "out", "demo-out", "output folder (a previous demo output is replaced; any other non-empty folder is refused)")
	f.IntVar(&o.field, "field", 256, "side of the simulated field, pixels")
	f.IntVar(&o.frames, "frames", 0, "frames per burst (0 = the site's)")
	f.Uint64Var(&o.seed, "seed", 2026, "random seed of the simulation")
	f.IntVar(&o.polish, "polish", 3, "classical polish iterations after the learned estimate")
	root.AddCommand(demoCmd)
}

// demoCheck refuses bad flags and an output folder pdwave may not replace.
func demoCheck() error {
	o := demoFlags
	if o.out == "" {
		return fmt.Errorf("demo: --out must not be empty")
	}
	if o.field < 64 || o.field > 4096 {
		return fmt.Errorf("demo: --field %d outside 64..4096", o.field)
	}
	if o.polish < 0 || o.frames < 0 {
		return fmt.Errorf("demo: --polish and --frames must not be negative")
	}
	if _, err := os.Stat(o.site); err != nil {
		return fmt.Errorf("demo: site file: %w (run from the repository root, or give --site)", err)
	}
	return checkReplaceDir("demo", o.out, o.site)
}

func demoRun(cmd *cobra.Command, _ []string) error {
	o := demoFlags
	if err := demoCheck(); err != nil {
		return err
	}
	self, err := os.Executable()
	if err != nil {
		return fmt.Errorf("demo: locating the pdwave executable: %w", err)
	}
	out := filepath.Clean(o.out)
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
	site, err := filepath.Abs(o.site)
	if err != nil {
		return fmt.Errorf("demo: %w", err)
	}
	burstFile := filepath.Join("burst", "burst-0001.fits")
	steps := [][]string{
		{"simulate", "--site", site, "--out", "burst", "--field", strconv.Itoa(o.field),
			"--frames", strconv.Itoa(o.frames), "--seed", strconv.FormatUint(o.seed, 10)},
		{"restore", burstFile, "--site", site, "--out", "restored.fits",
			"--polish", strconv.Itoa(o.polish), "--quiet"},
		{"compare", burstFile, "--site", site, "--out", "report",
			"--polish", strconv.Itoa(o.polish)},
	}
	log := cmd.ErrOrStderr()
	start := time.Now()
	for i, args := range steps {
		fmt.Fprintf(log, "demo step %d/%d (in %s): pdwave %s\n", i+1, len(steps), out, strings.Join(args, " "))
		t0 := time.Now()
		if err := demoExec(self, tmp, args, log); err != nil {
			return fmt.Errorf("demo step %d (pdwave %s): %w", i+1, args[0], err)
		}
		fmt.Fprintf(log, "demo step %d/%d: done in %.1f s\n", i+1, len(steps), time.Since(t0).Seconds())
	}
	if err := demoInstall(tmp, out); err != nil {
		return err
	}
	done = true
	fmt.Fprintf(log, "demo: finished in %.1f s; open %s\n", time.Since(start).Seconds(),
		filepath.Join(out, "report", "index.html"))
	return nil
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
