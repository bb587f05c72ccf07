package main

import (
	"bufio"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"
	"time"

	"github.com/spf13/cobra"

	"pdwave/infer"
	"pdwave/model/burst"
	"pdwave/model/modes"
	"pdwave/model/site"
	"pdwave/simulate"
)

// fitOpts holds the flags of "pdwave fit".
var fitOpts struct {
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

// fitConfig builds the fit configuration from the site file, the burst's
// optics (header values override the site) and the flags.
func fitConfig(st *site.Site, b *burst.Burst, n int) (infer.Config, error) {
	o := b.Optics.Fill(st.Optics())
	tel := st.Telescope()
	tel.Wavelength, tel.PixelScale, tel.Diameter, tel.Obscuration = o.Wavelength, o.PixelScale, o.Diameter, o.Obscuration
	cfg := infer.DefaultConfig()
	cfg.Telescope = tel
	cfg.DiversityPV = []float64{0, o.DiversityPV}
	cfg.Patch, cfg.Frames = n, b.Frames
	cfg.Modes = st.Sizes.Modes
	if fitOpts.modes != 0 {
		cfg.Modes = fitOpts.modes
	}
	cfg.Basis = st.Sizes.Basis
	if fitOpts.basis != "" {
		k, err := modes.ParseKind(fitOpts.basis)
		if err != nil {
			return cfg, err
		}
		cfg.Basis = k
	}
	cfg.DOverR0 = tel.Diameter / st.R0Median()
	if fitOpts.dOverR0 != 0 {
		cfg.DOverR0 = fitOpts.dOverR0
	}
	if !(cfg.DOverR0 > 0) || math.IsInf(cfg.DOverR0, 0) {
		return cfg, fmt.Errorf("--d-over-r0 must be positive, got %g", cfg.DOverR0)
	}
	if fitOpts.iterations < 1 {
		return cfg, fmt.Errorf("--iterations must be at least 1, got %d", fitOpts.iterations)
	}
	cfg.Stop.Iterations = fitOpts.iterations
	cfg.Stop.WallTime = fitOpts.wall
	if fitOpts.prior < 0 || math.IsNaN(fitOpts.prior) {
		return cfg, fmt.Errorf("--prior must be ≥ 0, got %g", fitOpts.prior)
	}
	cfg.Prior = fitOpts.prior
	return cfg, nil
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
	cfg, err := fitConfig(st, b, n)
	if err != nil {
		return err
	}
	fitter, err := infer.NewFitter(cfg)
	if err != nil {
		return fmt.Errorf("%s: %w", args[0], err)
	}
	data := make([][][]float64, 2)
	for c := range data {
		data[c] = make([][]float64, b.Frames)
		for j := range data[c] {
			p := make([]float64, n*n)
			src := b.Data[c][j]
			for y := 0; y < n; y++ {
				copy(p[y*n:(y+1)*n], src[(y+y0)*b.Nx+x0:(y+y0)*b.Nx+x0+n])
			}
			data[c][j] = p
		}
	}
	res, err := fitter.Fit(data, nil)
	if err != nil {
		return fmt.Errorf("%s: %w", args[0], err)
	}
	fmt.Fprintf(stderr, "fitted %d frames × %d %s modes in %d iterations (%v): metric %.5g → %.5g (%s)\n",
		b.Frames, cfg.Modes, cfg.Basis, res.Iterations, res.Elapsed.Round(time.Millisecond),
		res.MetricStart, res.MetricEnd, res.Status)

	settings := map[string]string{
		"command":     "fit",
		"burst":       filepath.Base(args[0]),
		"site":        filepath.Base(o.site),
		"basis":       string(cfg.Basis),
		"modes":       strconv.Itoa(cfg.Modes),
		"patch":       fmt.Sprintf("%d px at (%d, %d) of %d×%d", n, x0, y0, b.Nx, b.Ny),
		"frames":      strconv.Itoa(cfg.Frames),
		"iterations":  strconv.Itoa(cfg.Stop.Iterations),
		"prior":       strconv.FormatFloat(cfg.Prior, 'g', -1, 64),
		"d_over_r0":   strconv.FormatFloat(cfg.DOverR0, 'g', 6, 64),
		"diversity":   strconv.FormatFloat(cfg.DiversityPV[1], 'g', 6, 64) + " waves PV",
		"wavelength":  strconv.FormatFloat(cfg.Telescope.Wavelength*1e9, 'g', 6, 64) + " nm",
		"pixel_scale": strconv.FormatFloat(cfg.Telescope.PixelScale*206264.806, 'g', 6, 64) + " arcsec",
		"diameter":    strconv.FormatFloat(cfg.Telescope.Diameter, 'g', 6, 64) + " m",
		"obscuration": strconv.FormatFloat(cfg.Telescope.Obscuration, 'g', 6, 64),
	}
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
	cards = append(cards, fitCarriedCards(b.Cards, x0, y0)...)
	frames := make([]int64, b.Frames)
	for j := range frames {
		frames[j] = int64(j + 1)
	}
	table := &burst.Table{
		Name: "COEFFS",
		Columns: []burst.Column{
			{Name: "FRAME", Int: frames},
			{Name: "NATIVE", Unit: "rad", Float: res.Coeffs},
			{Name: "NOLL", Unit: "rad", Float: res.Noll},
		},
		Cards: []burst.Card{
			{Key: "FITBASIS", Value: string(cfg.Basis), Comment: "basis of NATIVE"},
			{Key: "NOLLJ0", Value: 2, Comment: "Noll index of the first NOLL element"},
		},
	}
	img := &burst.Image{Dims: []int{n, n}, Data: res.Restored, Cards: cards}
	if err := burst.WriteFile(o.out, img, table); err != nil {
		return err
	}
	csvPath := strings.TrimSuffix(o.out, filepath.Ext(o.out)) + ".csv"
	if err := fitWriteCSV(csvPath, settings, res); err != nil {
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

// fitCarriedCards returns the burst's carried header cards with the
// reference pixel moved to the patch (CRPIXi − offset).
func fitCarriedCards(cards []burst.Card, x0, y0 int) []burst.Card {
	out := make([]burst.Card, 0, len(cards))
	for _, c := range cards {
		switch c.Key {
		case "CRPIX1", "CRPIX2":
			v, ok := fitNumber(c.Value)
			if !ok {
				continue
			}
			if c.Key == "CRPIX1" {
				v -= float64(x0)
			} else {
				v -= float64(y0)
			}
			c.Value = v
		case "CRPIX3", "CRPIX4", "CTYPE3", "CTYPE4", "CDELT3", "CDELT4", "CRVAL3", "CRVAL4", "CUNIT3", "CUNIT4", "NAXIS3", "NAXIS4":
			continue // the product is 2-D
		}
		out = append(out, c)
	}
	return out
}

func fitNumber(v any) (float64, bool) {
	switch x := v.(type) {
	case float64:
		return x, true
	case float32:
		return float64(x), true
	case int:
		return float64(x), true
	case int64:
		return float64(x), true
	case int32:
		return float64(x), true
	}
	return 0, false
}

// fitWriteCSV writes the coefficients as CSV (one row per frame: native
// coefficients, then Noll equivalents), preceded by "# key: value" lines
// with the provenance and the metric; written to a temporary file in the
// same folder and renamed.
func fitWriteCSV(path string, settings map[string]string, r *infer.Result) (err error) {
	dir := filepath.Dir(path)
	f, err := os.CreateTemp(dir, filepath.Base(path)+".tmp-*")
	if err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	defer func() {
		if err != nil {
			f.Close()
			os.Remove(f.Name())
		}
	}()
	w := bufio.NewWriter(f)
	fmt.Fprintf(w, "# pdwave %s fit\n", version)
	keys := make([]string, 0, len(settings))
	for k := range settings {
		keys = append(keys, k)
	}
	sortStrings(keys)
	for _, k := range keys {
		fmt.Fprintf(w, "# %s: %s\n", k, settings[k])
	}
	fmt.Fprintf(w, "# metric_before: %.8g\n# metric_after: %.8g\n# data_metric_before: %.8g\n# data_metric_after: %.8g\n# iterations: %d\n# seconds: %.3f\n",
		r.MetricStart, r.MetricEnd, r.DataStart, r.DataEnd, r.Iterations, r.Elapsed.Seconds())
	m := 0
	if len(r.Coeffs) > 0 {
		m = len(r.Coeffs[0])
	}
	fmt.Fprint(w, "frame")
	for k := 0; k < m; k++ {
		fmt.Fprintf(w, ",native_%d", k+1)
	}
	for k := 0; k < m; k++ {
		fmt.Fprintf(w, ",noll_%d", k+2)
	}
	fmt.Fprintln(w)
	for j := range r.Coeffs {
		fmt.Fprintf(w, "%d", j+1)
		for _, v := range r.Coeffs[j] {
			fmt.Fprintf(w, ",%.6g", v)
		}
		for _, v := range r.Noll[j] {
			fmt.Fprintf(w, ",%.6g", v)
		}
		fmt.Fprintln(w)
	}
	if err := w.Flush(); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	if err := f.Sync(); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	if err := os.Rename(f.Name(), path); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	return nil
}

func sortStrings(s []string) {
	for i := 1; i < len(s); i++ {
		for j := i; j > 0 && s[j] < s[j-1]; j-- {
			s[j], s[j-1] = s[j-1], s[j]
		}
	}
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
	cfg := infer.DefaultConfig()
	cfg.Telescope = st.Telescope()
	cfg.Basis = st.Sizes.Basis
	cfg.Modes = st.Sizes.Modes
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
	tmp, err := os.CreateTemp(o.out, "fit-study.csv.tmp-*")
	if err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
	}
	werr := infer.WriteStudyCSV(tmp, rows)
	cerr := tmp.Close()
	if err := errors.Join(werr, cerr); err != nil {
		os.Remove(tmp.Name())
		return fmt.Errorf("writing %s: %w", path, err)
	}
	if err := os.Rename(tmp.Name(), path); err != nil {
		return fmt.Errorf("writing %s: %w", path, err)
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
