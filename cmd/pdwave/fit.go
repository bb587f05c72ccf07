package main

import (
	"fmt"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"pdwave/infer"
	"pdwave/model/burst"
	"pdwave/model/modes"
	"pdwave/model/site"
	"pdwave/simulate"
)

// fitFlags are the flags of "pdwave fit".
type fitFlags struct {
	site       string
	out        string
	basis      string
	modes      int
	iterations int
	prior      float64
	dOverR0    float64
	patch      int
	wall       time.Duration
}

// fitOpts holds the flags of "pdwave fit".
var fitOpts fitFlags

var fitCmd = &cobra.Command{
	Use:   "fit BURST --site FILE --out FILE.fits",
	Short: "Fit the wavefronts of one patch with the classical optimiser and restore it",
	Long: `fit estimates the wavefront of every frame of a phase-diversity burst with
the classical multi-frame fit (L-BFGS on the phase-diversity metric with a
Kolmogorov prior) and restores the patch.

The optics come from the site file, overridden by the burst's header
keywords where present. If the burst is larger than one patch, its central
patch is fitted (full fields are the job of "pdwave restore").

FILE.fits holds the restored patch (primary HDU) and a binary table COEFFS
with the coefficients of every frame in the native basis and as Noll
equivalents; the metric before and after and all settings are in the
header. The same numbers are written to FILE.csv next to it.`,
	Args: cobra.ExactArgs(1),
	RunE: fitRun,
}

// fitStudyOpts holds the flags of "pdwave fit study".
var fitStudyOpts struct {
	site    string
	out     string
	bursts  int
	seed    uint64
	workers int
	quick   bool
}

var fitStudyCmd = &cobra.Command{
	Use:   "study --site FILE --out DIR",
	Short: "Measure the accuracy of the fit on simulated bursts with known wavefronts",
	Long: `study simulates bursts with known wavefronts for the site's telescope,
seeing layers and camera, fits them from zero with the default settings, and writes
DIR/fit-study.csv: the fraction of the true wavefront variance left as error
(Noll 2–10 and 2–21, burst-mean tilt removed) against D/r0 (2…10), patch
size (48…128 px), frames (4…32) and diversity (0.5…2 waves), one setting
varied at a time around 64 px, 16 frames, 1 wave, D/r0 = 5.`,
	Args: cobra.NoArgs,
	RunE: fitStudyRun,
}

func init() {
	f := fitCmd.Flags()
	f.StringVar(&fitOpts.site, "site", "", "site/telescope YAML file (required)")
	f.StringVar(&fitOpts.out, "out", "", "output FITS file (required); a CSV is written next to it")
	f.StringVar(&fitOpts.basis, "basis", "", "modal basis zernike|kl (default: the site file's)")
	f.IntVar(&fitOpts.modes, "modes", 0, "number of modes, piston excluded (default: the site file's)")
	f.IntVar(&fitOpts.iterations, "iterations", infer.DefaultConfig().Stop.Iterations, "maximum L-BFGS iterations")
	f.Float64Var(&fitOpts.prior, "prior", infer.DefaultConfig().Prior, "weight of the turbulence prior against the normalised metric (0 = none)")
	f.Float64Var(&fitOpts.dOverR0, "d-over-r0", 0, "expected D/r0 at the observing wavelength, for the prior (default: from the site's median r0)")
	f.IntVar(&fitOpts.patch, "patch", 0, "patch side, pixels (default: the site file's, at most the burst size)")
	f.DurationVar(&fitOpts.wall, "wall", 0, "maximum fit time, e.g. 2s (default: no limit)")
	_ = fitCmd.MarkFlagRequired("site")
	_ = fitCmd.MarkFlagRequired("out")

	s := fitStudyCmd.Flags()
	s.StringVar(&fitStudyOpts.site, "site", "", "site/telescope YAML file (required)")
	s.StringVar(&fitStudyOpts.out, "out", "", "output folder (required)")
	s.IntVar(&fitStudyOpts.bursts, "bursts", 8, "simulated bursts per setting")
	s.Uint64Var(&fitStudyOpts.seed, "seed", 1, "random seed of the simulations")
	s.IntVar(&fitStudyOpts.workers, "workers", 0, "fits in parallel (default: all cores)")
	s.BoolVar(&fitStudyOpts.quick, "quick", false, "only the reference setting and the D/r0 scan")
	_ = fitStudyCmd.MarkFlagRequired("site")
	_ = fitStudyCmd.MarkFlagRequired("out")
	fitCmd.AddCommand(fitStudyCmd)
	root.AddCommand(fitCmd)
}

// fitOverrides checks the flags of "pdwave fit" and returns the ones that
// override the site file and the burst header.
func fitOverrides(o fitFlags, n int) (infer.Overrides, error) {
	ov := infer.Overrides{Patch: n, Modes: o.modes, DOverR0: o.dOverR0}
	if o.modes < 0 {
		return ov, fmt.Errorf("--modes must not be negative, got %d", o.modes)
	}
	if o.basis != "" {
		k, err := modes.ParseKind(o.basis)
		if err != nil {
			return ov, err
		}
		ov.Basis = k
	}
	if o.dOverR0 != 0 && (!(o.dOverR0 > 0) || math.IsInf(o.dOverR0, 0)) {
		return ov, fmt.Errorf("--d-over-r0 must be positive, got %g", o.dOverR0)
	}
	if o.iterations < 1 {
		return ov, fmt.Errorf("--iterations must be at least 1, got %d", o.iterations)
	}
	if o.prior < 0 || math.IsNaN(o.prior) {
		return ov, fmt.Errorf("--prior must be ≥ 0, got %g", o.prior)
	}
	return ov, nil
}

func fitRun(cmd *cobra.Command, args []string) error {
	o := fitOpts
	if !strings.HasSuffix(strings.ToLower(o.out), ".fits") {
		return fmt.Errorf("--out %q: want a file name ending in .fits", o.out)
	}
	st, err := site.Load(o.site)
	if err != nil {
		return err
	}
	b, err := burst.Read(args[0])
	if err != nil {
		return err
	}
	n := st.Sizes.Patch
	if o.patch != 0 {
		n = o.patch
	}
	if n < 8 {
		return fmt.Errorf("--patch %d: need at least 8 pixels", n)
	}
	if m := min(b.Nx, b.Ny); n > m {
		n = m
	}
	x0, y0 := (b.Nx-n)/2, (b.Ny-n)/2
	stderr := cmd.ErrOrStderr()
	if b.Nx > n || b.Ny > n {
		fmt.Fprintf(stderr, "burst is %d×%d pixels: fitting its central %d×%d patch at (%d, %d); restore full fields with \"pdwave restore\"\n",
			b.Nx, b.Ny, n, n, x0, y0)
	}
	ov, err := fitOverrides(o, n)
	if err != nil {
		return err
	}
	cfg, err := infer.ConfigFor(st, b.Optics, b.Frames, ov)
	if err != nil {
		return fmt.Errorf("%s: %w", args[0], err)
	}
	cfg.Stop.Iterations = o.iterations
	cfg.Stop.WallTime = o.wall
	cfg.Prior = o.prior
	fitter, err := infer.NewFitter(cfg)
	if err != nil {
		return fmt.Errorf("%s: %w", args[0], err)
	}
	res, err := fitter.Fit(b.Patch(x0, y0, n), nil)
	if err != nil {
		return fmt.Errorf("%s: %w", args[0], err)
	}
	fmt.Fprintf(stderr, "fitted %d frames × %d %s modes in %d iterations (%v): metric %.5g → %.5g (%s)\n",
		b.Frames, cfg.Modes, cfg.Basis, res.Iterations, res.Elapsed.Round(time.Millisecond),
		res.MetricStart, res.MetricEnd, res.Status)

	settings := cfg.Settings()
	settings["command"] = "fit"
	settings["burst"] = filepath.Base(args[0])
	settings["site"] = filepath.Base(o.site)
	settings["patch"] = fmt.Sprintf("%d px at (%d, %d) of %d×%d", n, x0, y0, b.Nx, b.Ny)
	cards := burst.Provenance(version, settings)
	cards = append(cards,
		burst.Card{Key: "FITBASIS", Value: string(cfg.Basis), Comment: "modal basis of the coefficients"},
		burst.Card{Key: "FITMODES", Value: cfg.Modes, Comment: "modes per frame, piston excluded"},
		burst.Card{Key: "FITITER", Value: res.Iterations, Comment: "L-BFGS iterations"},
		burst.Card{Key: "FITSTAT", Value: fitStatus(res.Status), Comment: "why the optimiser stopped"},
		burst.Card{Key: "METRIC0", Value: res.MetricStart, Comment: "objective before the fit (metric/power + prior)"},
		burst.Card{Key: "METRIC1", Value: res.MetricEnd, Comment: "objective after the fit"},
		burst.Card{Key: "DATAM0", Value: res.DataStart, Comment: "normalised metric L/P before the fit"},
		burst.Card{Key: "DATAM1", Value: res.DataEnd, Comment: "normalised metric L/P after the fit"},
		burst.Card{Key: "PATCHX0", Value: x0, Comment: "first column of the patch in the burst (0-based)"},
		burst.Card{Key: "PATCHY0", Value: y0, Comment: "first row of the patch in the burst (0-based)"},
	)
	cards = append(cards, burst.CutoutCards(b.Cards, x0, y0)...)
	img := &burst.Image{Dims: []int{n, n}, Data: res.Restored, Cards: cards}
	table := &infer.CoefficientTable{
		Basis: cfg.Basis, Native: res.Coeffs, Noll: res.Noll,
		Title: "pdwave " + version + " fit", Settings: settings, Notes: res.Notes(),
	}
	csvPath, err := infer.WriteCoefficients(o.out, img, table)
	if err != nil {
		return err
	}
	fmt.Fprintf(stderr, "wrote %s and %s\n", o.out, csvPath)
	return nil
}

// fitStatus shortens the optimiser status to fit a FITS string card.
func fitStatus(s string) string {
	if len(s) > 60 {
		return s[:60]
	}
	return s
}

func fitStudyRun(cmd *cobra.Command, args []string) error {
	o := fitStudyOpts
	if o.bursts < 1 {
		return fmt.Errorf("--bursts must be at least 1, got %d", o.bursts)
	}
	st, err := site.Load(o.site)
	if err != nil {
		return err
	}
	if err := os.MkdirAll(o.out, 0o755); err != nil {
		return fmt.Errorf("creating %s: %w", o.out, err)
	}
	// The study sets patch, frames, diversity and D/r0 per case.
	cfg, err := infer.ConfigFor(st, burst.Optics{}, 0, infer.Overrides{})
	if err != nil {
		return err
	}
	src := fitStudySource(st)
	cases := infer.StudyGrid()
	if o.quick {
		cases = cases[:5]
	}
	workers := o.workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	stderr := cmd.ErrOrStderr()
	rows, err := infer.Study(cfg, cases, o.bursts, src, o.seed, workers, func(r infer.StudyRow) {
		fmt.Fprintf(stderr, "D/r0 %4.1f  %3d px  %2d frames  %.1f waves: error %.3f (2–10), %.3f (2–21), %.2f s per fit\n",
			r.DOverR0, r.Patch, r.Frames, r.DiversityPV, r.Err10, r.Err21, r.Seconds)
	})
	if err != nil {
		return err
	}
	path := filepath.Join(o.out, "fit-study.csv")
	if err := infer.WriteStudyFile(path, rows); err != nil {
		return err
	}
	fmt.Fprintf(stderr, "wrote %s\n", path)
	return nil
}

// fitStudySource returns the study's burst source for the site: the
// simulator with the site's telescope, layers, outer scale and camera
// (r0, patch, frames and diversity set per case).
func fitStudySource(st *site.Site) infer.BurstSource {
	return infer.SimulatedSource(simulate.ConfigFromSite(st))
}
