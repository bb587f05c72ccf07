package main

import (
	"fmt"
	"os"
	"path/filepath"

	"github.com/spf13/cobra"

	"pdwave/infer"
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

// demoRun turns the flags into an infer.DemoJob and runs it.
func demoRun(cmd *cobra.Command, _ []string) error {
	o := demoFlags
	if err := demoCheck(); err != nil {
		return err
	}
	self, err := os.Executable()
	if err != nil {
		return fmt.Errorf("demo: locating the pdwave executable: %w", err)
	}
	job := infer.DemoJob{Exe: self, Site: o.site, Out: o.out, Field: o.field, Frames: o.frames,
		Seed: o.seed, Polish: o.polish, Log: cmd.ErrOrStderr()}
	return job.Run()
}
