package main

import (
	"errors"
	"fmt"
	"maps"
	"path/filepath"
	"slices"

	"github.com/spf13/cobra"

	"pdwave/infer"
	"pdwave/infer/compare"
	"pdwave/internal/provenance"
	"pdwave/model/burst"
	"pdwave/model/instrument"
	"pdwave/model/net"
	"pdwave/model/site"
	"pdwave/weights"
)

// compareFlags holds the flags of "pdwave compare".
type compareFlags struct {
	out         string
	site        string
	weights     string
	polish      int
	iterations  int
	turns       int
	patch       int
	overlap     int
	workers     int
	fromLearned bool
	modes       int
	basis       string
	dOverR0     float64
	prior       float64
}

// compareOpts holds the parsed flags of "pdwave compare".
var compareOpts compareFlags

var compareCmd = &cobra.Command{
	Use:   "compare BURST --out DIR",
	Short: "Compare learned, polished and fitted wavefronts patch by patch",
	Long: `compare runs three estimates on the patches restore would restore (the
same grid: --patch and --overlap as in restore): the learned
network prediction, the prediction polished with a few classical fit steps,
and the full classical fit. It writes into the folder DIR the coefficients,
their differences, the metric of each estimate and the learned/fitted ratio,
restored contrasts and timings as CSV and JSON, PNG figures, and one
self-contained HTML page (index.html) that opens offline.

The full fit starts from zero, independent of the network it judges;
--from-learned continues it from the polished coefficients instead (the
metric then can only fall from learned to polished to fitted). For simulated bursts of one patch the true coefficients are
compared as well. Without weights (no --weights and no built-in weights for
this telescope) the report holds the fit alone and says so.

The folder is built next to DIR under a temporary name and renamed into
place when complete; an existing DIR is replaced only if pdwave wrote
everything in it (listed in its .pdwave-files), any other non-empty folder
is refused.`,
	Args: cobra.ExactArgs(1),
	RunE: compareRun,
}

func init() {
	f := compareCmd.Flags()
	addBurstFlags(compareCmd)
	f.StringVar(&compareOpts.out, "out", "", "output folder (required)")
	f.StringVar(&compareOpts.site, "site", "", "site/telescope YAML file (fills optics the burst header lacks, expected seeing, sizes)")
	f.StringVar(&compareOpts.weights, "weights", "", "network weight file (default: the built-in weights, if they fit the telescope)")
	f.IntVar(&compareOpts.polish, "polish", 5, "L-BFGS iterations of the polish started from the learned coefficients (0 = no polished estimate)")
	f.IntVar(&compareOpts.iterations, "iterations", infer.DefaultConfig().Stop.Iterations, "maximum L-BFGS iterations of the full fit on the windowed metric (the exact-edge refinement follows, as in fit)")
	f.IntVar(&compareOpts.turns, "turns", infer.DefaultTurns, "average the network over 1, 4 or 8 symmetries of the square, as restore does")
	f.IntVar(&compareOpts.patch, "patch", 0, "patch side, pixels (default: from the weights, else the site file, else 64)")
	f.IntVar(&compareOpts.overlap, "overlap", -1, "overlap of neighbouring patches, pixels, as in restore (default: a quarter of the patch)")
	f.IntVar(&compareOpts.workers, "workers", 0, "patches processed in parallel (default: all cores)")
	f.BoolVar(&compareOpts.fromLearned, "from-learned", false, "continue the full fit from the polished coefficients (default: an independent fit from zero)")
	f.IntVar(&compareOpts.modes, "modes", 0, "number of modes (default: from the weights, else the site file, else 36)")
	f.StringVar(&compareOpts.basis, "basis", "", "modal basis zernike|kl (default: from the weights, else the site file, else kl)")
	f.Float64Var(&compareOpts.dOverR0, "d-over-r0", 0, "expected D/r0 at the observing wavelength for the prior (default: from the site seeing, else 5)")
	f.Float64Var(&compareOpts.prior, "prior", infer.DefaultConfig().Prior, "weight of the turbulence prior against the normalised metric")
	root.AddCommand(compareCmd)
}

// compareRun loads the burst, settings and estimator, runs the comparison
// and writes the folder.
func compareRun(cmd *cobra.Command, args []string) error {
	o := compareOpts
	if err := o.check(); err != nil {
		return err
	}
	if err := checkReplaceDir("compare", o.out, args[0], o.site, o.weights); err != nil {
		return err
	}
	b, err := readBurst(args[0], cmd.ErrOrStderr())
	if err != nil {
		return err
	}
	src, err := o.sources(cmd, b)
	if err != nil {
		return err
	}
	model, weightsFrom, err := o.loadWeights()
	if err != nil {
		return err
	}
	setup, err := compare.Resolve(src, b, compare.Weights{Model: model, Name: o.weights, Builtin: o.weights == "", Turns: o.turns}, o.iterations, o.prior)
	if err != nil {
		return err
	}
	fc, model, learned := setup.Fit, setup.Model, setup.Learned
	cfg := o.config(fc, args[0], setup.Notes)
	if err := o.provenance(&cfg, args[0], model, learned != nil); err != nil {
		return err
	}
	if learned != nil {
		cfg.Settings = append(cfg.Settings, compare.Setting{Key: "weights", Value: weightsFrom + compareWeightsMeta(model)})
	}
	if o.site != "" {
		cfg.Settings = append(cfg.Settings, compare.Setting{Key: "site file", Value: o.site})
	}
	fmt.Fprintf(cmd.ErrOrStderr(), "compare: %s, %d×%d px, %d frames, %d px patches, %s %d modes, learned estimator: %v\n",
		args[0], b.Nx, b.Ny, b.Frames, fc.Patch, fc.Basis, fc.Modes, learned != nil)
	r, err := compare.Run(b, cfg, learned)
	if err != nil {
		return err
	}
	return compareWrite(cmd, o.out, r)
}

// compareWrite writes the report folder and prints the median metric
// ratios and where the page is.
func compareWrite(cmd *cobra.Command, out string, r *compare.Report) error {
	if err := compare.WriteDir(out, r); err != nil {
		return err
	}
	for k, m := range r.Summary.RatioMethods {
		fmt.Fprintf(cmd.ErrOrStderr(), "compare: median metric ratio %s/fitted = %.4g\n", m, r.Summary.MedianRatio[k])
	}
	fmt.Fprintf(cmd.ErrOrStderr(), "compare: %d patches written to %s\n", len(r.Patches), filepath.Join(out, compare.FileHTML))
	return nil
}

// check rejects a missing --out and negative or zero budgets and sizes
// before anything is read.
func (o compareFlags) check() error {
	if o.out == "" {
		return errors.New("compare: --out DIR is required")
	}
	if o.polish < 0 || o.iterations < 1 {
		return fmt.Errorf("compare: --polish must be ≥ 0 and --iterations ≥ 1 (got %d, %d)", o.polish, o.iterations)
	}
	if o.patch < 0 || o.overlap < -1 || o.modes < 0 {
		return errors.New("compare: --patch, --overlap and --modes must not be negative")
	}
	if err := checkWorkers("compare", o.workers); err != nil {
		return err
	}
	return nil
}

// sources collects what the flags, the burst header and the --site file
// (if any) say about the instrument.
func (o compareFlags) sources(cmd *cobra.Command, b *burst.Burst) (instrument.Sources, error) {
	src := instrument.Sources{Header: infer.HeaderInstrument(b.Optics)}
	var err error
	if src.Flags, err = flagInstrument(cmd.Flags()); err != nil {
		return src, fmt.Errorf("compare: %w", err)
	}
	if o.site != "" {
		st, err := site.Load(o.site)
		if err != nil {
			return src, fmt.Errorf("compare: %s: %w", o.site, err)
		}
		src.Site = st.Instrument()
	}
	return src, nil
}

// loadWeights returns the network to compare and where it came from: the
// --weights file (an error if it cannot be loaded), else the built-in
// weights.
func (o compareFlags) loadWeights() (*net.Model, string, error) {
	if o.weights == "" {
		m, err := weights.Default()
		return m, "built-in " + weights.DefaultName, err
	}
	m, err := net.Load(o.weights)
	return m, o.weights, err
}

// config assembles the comparison settings: the fit, the flags, the
// provenance (the burst path as given, command line) and the notes.
func (o compareFlags) config(fc infer.Config, burstPath string, notes []string) compare.Config {
	return compare.Config{
		Fit: fc, Polish: o.polish, FromLearned: o.fromLearned, Overlap: o.overlap, Workers: o.workers,
		ExamplePatch: -1, Version: version, Source: burstPath, Notes: notes,
	}
}

// provenance adds the run's command line and the SHA-256 of the burst,
// site and weights files (runProvenance; the built-in weights' when they
// are used) to the settings, in key order.
func (o compareFlags) provenance(cfg *compare.Config, burstRef string, m *net.Model, learned bool) error {
	in := append(burstInputs(burstRef), provenance.Input{Role: "site", Path: o.site})
	if learned {
		in = append(in, provenance.Input{Role: "weights", Path: o.weights})
	} else {
		m = nil
	}
	prov, err := runProvenance(m, in...)
	if err != nil {
		return err
	}
	for _, k := range slices.Sorted(maps.Keys(prov)) {
		cfg.Settings = append(cfg.Settings, compare.Setting{Key: k, Value: prov[k]})
	}
	return nil
}

// compareWeightsMeta describes what the weights were made for.
func compareWeightsMeta(m *net.Model) string {
	mt := m.Meta
	s := fmt.Sprintf(" (%s %d modes, %d px", mt.Basis, m.Arch.Modes, mt.Patch)
	if mt.Wavelength > 0 {
		s += fmt.Sprintf(", λ %.0f nm", mt.Wavelength*1e9)
	}
	if mt.Site != "" {
		s += ", site " + mt.Site
	}
	if mt.Version != "" {
		s += ", pdwave " + mt.Version
	}
	return s + ")"
}
