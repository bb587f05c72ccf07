package infer

import (
	"fmt"
	"io"
	"maps"
	"path/filepath"
	"strconv"
	"strings"
	"time"

	"pdwave/model/burst"
	"pdwave/model/fits"
	"pdwave/model/instrument"
	"pdwave/model/modes"
	"pdwave/model/net"
)

// Central is the central N×N patch of a burst (origin X0, Y0, 0-based):
// the one patch "pdwave fit" and "pdwave predict" work on.
type Central struct{ X0, Y0, N int }

// CentralPatch returns the central n×n patch of b. It errors if b is
// smaller than n on either side.
func CentralPatch(b *burst.Burst, n int) (Central, error) {
	if b.Nx < n || b.Ny < n {
		return Central{}, fmt.Errorf("the burst is %d×%d px, smaller than one %d px patch", b.Nx, b.Ny, n)
	}
	return Central{X0: (b.Nx - n) / 2, Y0: (b.Ny - n) / 2, N: n}, nil
}

// Describe says where the patch lies, for provenance: "64 px at (x, y) of
// NX×NY".
func (c Central) Describe(b *burst.Burst) string {
	return fmt.Sprintf("%d px at (%d, %d) of %d×%d", c.N, c.X0, c.Y0, b.Nx, b.Ny)
}

// Note is the line telling the user that only the central patch of a
// larger burst is used (verb: "fitting", "reading"), or "" when the patch
// is the whole burst.
func (c Central) Note(b *burst.Burst, verb string) string {
	if b.Nx == c.N && b.Ny == c.N {
		return ""
	}
	return fmt.Sprintf("burst is %d×%d pixels: %s its central %d×%d patch at (%d, %d); restore full fields with \"pdwave restore\"",
		b.Nx, b.Ny, verb, c.N, c.N, c.X0, c.Y0)
}

// Cards returns the PATCHX0/PATCHY0 cards locating the patch.
func (c Central) Cards() []fits.Card {
	return []fits.Card{
		{Key: "PATCHX0", Value: c.X0, Comment: "first column of the patch in the burst (0-based)"},
		{Key: "PATCHY0", Value: c.Y0, Comment: "first row of the patch in the burst (0-based)"},
	}
}

// FitJob is "pdwave fit": the classical fit of the central patch of one
// burst, written as a restored patch with the coefficient table (FITS and
// CSV, one product set).
type FitJob struct {
	Burst      *burst.Burst
	Name       string             // the burst as the user named it (provenance)
	SiteName   string             // the site file's name (provenance)
	Sources    instrument.Sources // flags, header, site
	Iterations int                // L-BFGS iterations on the periodic metric
	ExactEdges int                // L-BFGS iterations of the exact-edge refinement (Config.ExactEdges; 0 = none)
	Wall       time.Duration      // wall time per fit; 0 = none
	Prior      float64            // prior weight
	Version    string
	Out        string            // the FITS product; the CSV goes beside it
	Log        io.Writer         // progress lines; nil = silent
	Provenance map[string]string // recorded with the settings (command line, input hashes)
}

// Run resolves the configuration (the patch capped at the burst's side),
// fits the central patch and writes the product. It returns the CSV path.
func (j FitJob) Run() (string, error) {
	b := j.Burst
	cfg, err := ConfigFor(j.Sources, b.Frames)
	if err == nil && cfg.Patch > min(b.Nx, b.Ny) {
		j.Sources.Flags.Patch = instrument.Some(min(b.Nx, b.Ny)) // the burst caps the patch
		cfg, err = ConfigFor(j.Sources, b.Frames)
	}
	if err != nil {
		return "", fmt.Errorf("%s: %w", j.Name, err)
	}
	c, err := CentralPatch(b, cfg.Patch)
	if err != nil {
		return "", fmt.Errorf("%s: %w", j.Name, err)
	}
	j.logf("%s", c.Note(b, "fitting"))
	cfg.Stop.Iterations, cfg.Stop.WallTime, cfg.Prior = j.Iterations, j.Wall, j.Prior
	cfg.ExactEdges = j.ExactEdges
	fitter, err := NewFitter(cfg)
	if err != nil {
		return "", fmt.Errorf("%s: %w", j.Name, err)
	}
	res, err := fitter.Fit(b.Patch(c.X0, c.Y0, c.N), nil)
	if err != nil {
		return "", fmt.Errorf("%s: %w", j.Name, err)
	}
	j.logf("fitted %d frames × %d %s modes in %d iterations (%v): metric %.5g → %.5g (%s)",
		b.Frames, cfg.Modes, cfg.Basis, res.Iterations, res.Elapsed.Round(time.Millisecond), res.MetricStart, res.MetricEnd, res.Status)
	if res.Flags&FlagEdgesDropped != 0 {
		j.logf("the exact-edge refinement left an implausible wavefront and was undone (edges_dropped: the PSF likely varies across the patch; the windowed fit was continued)")
	}
	settings := cfg.Settings()
	settings["command"], settings["burst"], settings["site"] = "fit", filepath.Base(j.Name), filepath.Base(j.SiteName)
	settings["patch"] = c.Describe(b)
	maps.Copy(settings, j.Provenance)
	cards := append(fits.Provenance(j.Version, settings), fitCards(cfg, res)...)
	cards = append(append(cards, c.Cards()...), burst.CutoutCards(b.Cards, c.X0, c.Y0)...)
	img := &fits.Image{Dims: []int{c.N, c.N}, Data: res.Restored, Cards: cards}
	table := &CoefficientTable{Basis: cfg.Basis, Native: res.Coeffs, Noll: res.Noll,
		Title: "pdwave " + j.Version + " fit", Settings: settings, Notes: res.Notes()}
	return WriteCoefficients(j.Out, img, table)
}

// logf writes one line to the job's log, if any; an empty line is skipped.
func (j FitJob) logf(format string, args ...any) {
	if s := fmt.Sprintf(format, args...); j.Log != nil && s != "" {
		fmt.Fprintln(j.Log, s)
	}
}

// fitCards are the header cards describing a fit's result.
func fitCards(cfg Config, res *Result) []fits.Card {
	status := res.Status
	if len(status) > 60 {
		status = status[:60] // a FITS string card
	}
	guard := "none"
	if res.Flags != 0 {
		guard = res.Flags.String()
	}
	return []fits.Card{
		{Key: "FITBASIS", Value: string(cfg.Basis), Comment: "modal basis of the coefficients"},
		{Key: "FITMODES", Value: cfg.Modes, Comment: "modes per frame, piston excluded"},
		{Key: "FITITER", Value: res.Iterations, Comment: "L-BFGS iterations"},
		{Key: "FITSTAT", Value: status, Comment: "why the optimiser stopped"},
		{Key: "FITFLAGS", Value: guard, Comment: "implausible,refitted,rejected,edges_dropped"},
		{Key: "PRIORCHI", Value: res.Chi2, Comment: "mean coefficient^2 / Kolmogorov variance"},
		{Key: "METRIC0", Value: res.MetricStart, Comment: "objective before the fit (metric/power + prior)"},
		{Key: "METRIC1", Value: res.MetricEnd, Comment: "objective after the fit"},
		{Key: "DATAM0", Value: res.DataStart, Comment: "normalised metric L/P before the fit"},
		{Key: "DATAM1", Value: res.DataEnd, Comment: "normalised metric L/P after the fit"},
		{Key: "EXACTIT", Value: cfg.ExactEdges, Comment: "exact-edge refinement iterations (0 = none)"},
		{Key: "EDGEGATE", Value: cfg.EdgeGate, Comment: "exact-edge refinement gate (0 = none)"},
		{Key: "EXACT1", Value: res.ExactEnd, Comment: "exact-edge objective after the fit (0 = none)"},
	}
}

// PredictJob is "pdwave predict": the learned coefficients of the central
// patch of one burst, written as a coefficient table (FITS and CSV, or the
// CSV alone when Out ends in .csv).
type PredictJob struct {
	Burst   *burst.Burst
	Name    string             // the burst as the user named it (provenance)
	Sources instrument.Sources // header and site; the weights are checked against them
	Model   *net.Model
	From    string // where the weights came from (provenance)
	Version string
	Out     string
	Log     io.Writer
	// Turns is how many symmetries of the square the prediction averages
	// over (NetEstimator.SetTurns): 1, 4 or 8; 0 means 1.
	Turns int
	// Provenance is recorded with the settings (command line, input hashes).
	Provenance map[string]string
}

// Run checks the weights against the data (ConfigWithWeights), predicts the
// central patch and writes the table.
func (j PredictJob) Run() error {
	b, m := j.Burst, j.Model
	if _, _, _, err := ConfigWithWeights(j.Sources, b.Frames, m, false); err != nil {
		return fmt.Errorf("predict: %s: %w; add the header keywords or give --site", j.Name, err)
	}
	c, err := CentralPatch(b, m.Meta.Patch)
	if err != nil {
		return fmt.Errorf("predict: %s: %w the weights read", j.Name, err)
	}
	if note := c.Note(b, "reading"); note != "" && j.Log != nil {
		fmt.Fprintln(j.Log, note)
	}
	est, err := net.NewEstimator(m)
	if err != nil {
		return err
	}
	p := b.Patch(c.X0, c.Y0, c.N)
	start := time.Now()
	native, noll, err := j.predict(est, p)
	if err != nil {
		return fmt.Errorf("predict: %s: %w", j.Name, err)
	}
	elapsed := time.Since(start)
	settings := map[string]string{"verb": "predict", "burst": filepath.Base(j.Name), "weights": j.From,
		"site": m.Meta.Site, "basis": m.Meta.Basis, "seconds": fmt.Sprintf("%.6f", elapsed.Seconds()), "patch": c.Describe(b),
		"turns": strconv.Itoa(max(j.Turns, 1))}
	maps.Copy(settings, j.Provenance)
	table := &CoefficientTable{Basis: modes.Kind(m.Meta.Basis), Native: native, Noll: noll,
		Title: "pdwave " + j.Version + " predict", Settings: settings}
	if err := j.write(table, c, len(native[0]), settings); err != nil {
		return err
	}
	if j.Log != nil {
		fmt.Fprintf(j.Log, "predicted %d frames × %d %s modes in %s (one burst, set-up included) with weights %s\n",
			len(native), len(native[0]), m.Meta.Basis, elapsed.Round(time.Microsecond), j.From)
	}
	return nil
}

// predict returns the native and Noll coefficients of patch p (burst mean
// of tip and tilt removed): est's prediction, or with Turns > 1 the mean
// over the turned bursts in est's basis.
func (j PredictJob) predict(est *net.Estimator, p [][][]float64) (native, noll [][]float64, err error) {
	if j.Turns <= 1 {
		return est.Burst([2][][]float64{p[0], p[1]})
	}
	ne, err := NewNetEstimator(j.Model, est.Basis())
	if err != nil {
		return nil, nil, err
	}
	if err := ne.SetTurns(j.Turns); err != nil {
		return nil, nil, err
	}
	if native, err = ne.Estimate(p); err != nil {
		return nil, nil, err
	}
	noll, err = RemoveMeanTilt(est.Basis(), native)
	return native, noll, err
}

// write writes the prediction's table: the CSV alone, or FITS and CSV.
func (j PredictJob) write(table *CoefficientTable, c Central, nmodes int, settings map[string]string) error {
	if strings.EqualFold(filepath.Ext(j.Out), ".csv") {
		return table.WriteCSV(j.Out)
	}
	hdu := table.HDU()
	hdu.Cards = append(append(hdu.Cards,
		fits.Card{Key: "NMODES", Value: nmodes, Comment: "modes per frame, piston excluded"},
		fits.Card{Key: "ESTIMATR", Value: "network", Comment: "learned estimate (no fit)"}), c.Cards()...)
	// The burst's cards, as fit carries them for its patch, then provenance.
	primary := &fits.Image{Cards: append(burst.CutoutCards(j.Burst.Cards, c.X0, c.Y0), fits.Provenance(j.Version, settings)...)}
	_, err := WriteProduct(j.Out, []fits.HDU{primary, hdu}, table)
	return err
}
