package compare

import (
	"errors"
	"fmt"
	"math"
	"runtime"
	"sort"
	"strings"
	"time"

	"gonum.org/v1/gonum/mat"

	"pdwave/infer"
	"pdwave/infer/patchrun"
	"pdwave/infer/restore"
	"pdwave/model/burst"
	"pdwave/model/fft"
	"pdwave/model/modes"
	"pdwave/model/optics"
	"pdwave/model/pd"
)

// Config describes one comparison run.
type Config struct {
	// Fit is the classical fit (optics, patch size, frames, basis, prior,
	// metric settings); Fit.Stop is the budget of the full fit.
	Fit infer.Config
	// Polish is the number of L-BFGS iterations of the polish that starts
	// from the learned coefficients; 0 leaves out the polished estimate.
	Polish int
	// FromLearned continues the full fit from the polished (or, without
	// polish, the learned) coefficients. By default the fit starts from
	// zero, independent of the network it judges; from the learned start,
	// fitted ≤ polished ≤ learned holds by construction (every stage only
	// accepts points that lower the objective), and the fit is no longer
	// an independent reference.
	FromLearned bool
	// Overlap is the overlap of neighbouring patches, pixels, on the
	// tiling restore uses (infer.Grid): compare judges restore's own
	// patches. < 0 means restore's default (infer.DefaultOverlap); 0 gives
	// adjacent patches.
	Overlap int
	// Workers is the number of patches processed in parallel; ≤ 0 uses
	// one per core.
	Workers int
	// ExamplePatch and ExampleFrame select the patch and frame shown in
	// the wavefront/PSF figure; ExamplePatch < 0 picks the patch with the
	// median learned/fitted metric ratio.
	ExamplePatch int
	ExampleFrame int
	// Version, Source and Settings are copied into the report's
	// provenance; Notes are added to its notes.
	Version  string
	Source   string
	Settings []Setting
	Notes    []string
	// TruthAt, if set, gives the true coefficients at field pixel (x, y)
	// (simulated fields; for example simulate.Simulator.TruthAt). Run asks
	// for each patch centre (x0 + N/2, y0 + N/2) and ignores burst.Truth.
	TruthAt func(x, y float64) *burst.Truth
}

// Run compares the estimates on every patch of the burst and returns the
// summarised report (Summarise has run). learned may be nil: the report
// then holds the fit (and truth) only and says so in its notes. The
// burst's frame count must equal cfg.Fit.Frames and its field must hold at
// least one patch. The truth comes from cfg.TruthAt per patch, or else
// from burst.Truth when the burst is a single patch; it is converted to the
// report basis and, like every estimate,
// has the burst-mean tip/tilt removed when the metric constrains it.
// Patches on which the metric finds no signal are left out with a note;
// Run fails only if no patch succeeds or the settings are invalid.
func Run(b *burst.Burst, cfg Config, learned infer.Estimator) (*Report, error) {
	if err := checkRun(b, cfg); err != nil {
		return nil, err
	}
	fc := cfg.Fit
	n := fc.Patch
	fitter, polisher, err := newFitters(cfg, learned)
	if err != nil {
		return nil, err
	}
	basis := fitter.Basis()
	overlap := cfg.Overlap
	if overlap < 0 {
		overlap = infer.DefaultOverlap(n)
	}
	grid, err := infer.NewGrid(b.Nx, b.Ny, n, overlap)
	if err != nil {
		return nil, fmt.Errorf("compare: %w", err)
	}
	workers := cfg.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	r := newReport(b, cfg, basis)
	methods := estimateMethods(r, learned, polisher)

	// A constraint-only solver and the truth.
	div := fitter.Diversity()
	cons := pd.NewObjective(fitter.Pupil(), basis, div, fc.Frames, fitter.Config().Metric)
	constrain := constrainer(cons, basis.Count)
	truth, truthNote, methods := singlePatchTruth(r, b, cfg, basis, constrain, methods)
	r.Methods = methods
	addMetricNotes(r, cfg)

	jobs := patchrun.Patches(grid, 0, grid.Count())
	truths, truthNote, err := patchTruths(jobs, cfg, truth, truthNote, basis, constrain)
	if err != nil {
		return nil, err
	}
	if truthNote != "" {
		r.Notes = append(r.Notes, truthNote)
	}
	w, err := newPatchWork(r, b, cfg, learned, fitter, polisher, constrain)
	if err != nil {
		return nil, err
	}
	outs := w.runAll(b, grid, truths, workers)
	if tl, ok := learned.(interface{ Turns() int }); ok {
		r.Settings = append(r.Settings, Setting{"learned estimate", fmt.Sprintf("mean over %d symmetries of the square (turned back)", tl.Turns())})
	}
	if err := collectPatches(r, outs, jobs, methods, fc.Telescope.CutoffRadius(n)/float64(n)); err != nil {
		return nil, err
	}
	return finishReport(r, cfg, fitter, div, overlap, workers, len(jobs), b, w)
}

// newPatchWork returns what every patch of the run shares: the stages
// (the learned estimate and polish when there is an estimator, the fit),
// r's methods, restore's setup for the learned-suspect figure and, when
// the burst carries its OBJECT, the diffraction-limited reference, noting
// how image errors are scored in r.
func newPatchWork(r *Report, b *burst.Burst, cfg Config, learned infer.Estimator, fitter, polisher *infer.Fitter,
	constrain func([][]float64) [][]float64) (*patchWork, error) {
	fc := cfg.Fit
	w := &patchWork{fitter: fitter, methods: r.Methods, win: pd.Window(fc.Patch, fc.Metric.Window),
		chain: patchrun.Chain{Fit: fitter, FitFromZero: !cfg.FromLearned, Constrain: constrain}}
	var err error
	if learned != nil {
		w.chain.Learned, w.chain.Polish = learned, polisher
		if w.suspect, err = restore.NewFieldSetup(fc, restore.Method{Start: learned, Name: Learned}); err != nil {
			return nil, fmt.Errorf("compare: %w", err)
		}
	}
	if b.Object != nil {
		if w.ref, err = infer.DiffractionLimited(b.Object, b.Nx, b.Ny, fc.Telescope); err != nil {
			return nil, fmt.Errorf("compare: %w", err)
		}
		w.refNx = b.Nx
		r.Notes = append(r.Notes, "Image errors compare each restored patch with the true object seen through the perfect telescope (diffraction-limited), after registration, over the patch's central half: rms of the difference of the mean-normalised images over the rms fluctuation of the reference (0 = exact, 1 = no better than a flat image; over-restoration counts).")
	}
	return w, nil
}

// checkRun rejects a missing burst and settings that cannot describe it:
// a frame count other than the fit's, a field smaller than one patch, or a
// negative polish budget.
func checkRun(b *burst.Burst, cfg Config) error {
	if b == nil {
		return errors.New("compare: no burst")
	}
	fc := cfg.Fit
	n := fc.Patch
	if b.Frames != fc.Frames {
		return fmt.Errorf("compare: burst has %d frames, the fit is set up for %d", b.Frames, fc.Frames)
	}
	if b.Nx < n || b.Ny < n {
		return fmt.Errorf("compare: field %d×%d is smaller than one %d px patch", b.Nx, b.Ny, n)
	}
	if cfg.Polish < 0 {
		return fmt.Errorf("compare: polish iterations must be ≥ 0, got %d", cfg.Polish)
	}
	return nil
}

// newFitters builds the full fit and, when there is a learned estimator
// and a polish budget, the polisher (the same fit stopped after
// cfg.Polish iterations; nil otherwise). It fails if the learned
// estimator's basis (kind, mode count, grid) differs from the fit's.
func newFitters(cfg Config, learned infer.Estimator) (fitter, polisher *infer.Fitter, err error) {
	fc := cfg.Fit
	if fitter, err = infer.NewFitter(fc); err != nil {
		return nil, nil, fmt.Errorf("compare: %w", err)
	}
	if learned != nil && cfg.Polish > 0 {
		pc := fc
		pc.Stop = infer.Stop{Iterations: cfg.Polish}
		pc.ExactEdges = 0 // a polish is the periodic metric's few steps
		if polisher, err = infer.NewFitter(pc); err != nil {
			return nil, nil, fmt.Errorf("compare: polish: %w", err)
		}
	}
	if learned != nil {
		basis := fitter.Basis()
		lb := learned.Basis()
		if lb.Kind != basis.Kind || lb.Count != basis.Count || lb.N != basis.N {
			return nil, nil, fmt.Errorf("compare: learned estimator uses %s %d modes on %d px, the fit %s %d modes on %d px", lb.Kind, lb.Count, lb.N, basis.Kind, basis.Count, basis.N)
		}
	}
	return fitter, polisher, nil
}

// newReport starts the report of a run: provenance, basis and sizes; the
// methods, patches and summary are filled in later.
func newReport(b *burst.Burst, cfg Config, basis *modes.Basis) *Report {
	fc := cfg.Fit
	return &Report{
		Version: cfg.Version, Created: time.Now().UTC().Format(time.RFC3339), Source: cfg.Source,
		Basis:  BasisInfo{Kind: string(basis.Kind), Count: basis.Count, N: basis.N, Radius: basis.Radius},
		Frames: fc.Frames, Modes: basis.Count, PatchSize: fc.Patch, FieldNx: b.Nx, FieldNy: b.Ny,
	}
}

// estimateMethods lists the estimates every patch gets, in report order:
// learned and polished when available, then fitted. Without a learned
// estimator it adds a note to r saying the report holds the fit only.
func estimateMethods(r *Report, learned infer.Estimator, polisher *infer.Fitter) []string {
	var methods []string
	if learned != nil {
		methods = append(methods, Learned)
		if polisher != nil {
			methods = append(methods, Polished)
		}
	} else {
		r.Notes = append(r.Notes, "No learned estimator was available: the report holds the classical fit only (and the truth for simulated data).")
	}
	return append(methods, Fitted)
}

// constrainer returns a function that applies the metric's coefficient
// constraint (the burst-mean tip/tilt removal of cons) to frames × m
// coefficients; it returns new slices and leaves its argument alone.
func constrainer(cons *pd.Objective, m int) func([][]float64) [][]float64 {
	return func(c [][]float64) [][]float64 {
		flat := make([]float64, len(c)*m)
		for j := range c {
			copy(flat[j*m:], c[j])
		}
		cons.Constrain(flat)
		out := make([][]float64, len(c))
		for j := range out {
			out[j] = flat[j*m : (j+1)*m : (j+1)*m]
		}
		return out
	}
}

// singlePatchTruth decides where the truth comes from. With cfg.TruthAt it
// only adds Truth to the methods (the per-patch values come later). A
// burst whose field is exactly one patch and which carries a truth table
// gives the constrained native truth and its conversion note; a table that
// cannot be converted, or one on a field of several patches, is reported
// in r's notes and not compared.
func singlePatchTruth(r *Report, b *burst.Burst, cfg Config, basis *modes.Basis,
	constrain func([][]float64) [][]float64, methods []string) (truth [][]float64, note string, _ []string) {
	n := cfg.Fit.Patch
	switch {
	case cfg.TruthAt != nil:
		methods = append(methods, Truth)
	case b.Truth != nil && b.Nx == n && b.Ny == n:
		t, tn, err := truthNative(b.Truth, basis, cfg.Fit.Frames)
		if err != nil {
			r.Notes = append(r.Notes, "Truth not used: "+err.Error())
		} else {
			truth = constrain(t)
			note = tn
			methods = append(methods, Truth)
		}
	case b.Truth != nil:
		r.Notes = append(r.Notes, fmt.Sprintf("The burst carries a truth table, but its %d×%d field holds several %d px patches; the table describes one patch, so it is not compared.", b.Nx, b.Ny, n))
	}
	return truth, note, methods
}

// addMetricNotes notes how the estimates were made comparable (tip/tilt
// removal under the tilt constraint) and whether the fit started from zero.
func addMetricNotes(r *Report, cfg Config) {
	if cfg.Fit.Metric.TiltConstrain {
		r.Notes = append(r.Notes, "The metric cannot see a tip/tilt common to all frames; its burst mean is removed from every set of coefficients before they are compared.")
	}
	if !cfg.FromLearned {
		r.Notes = append(r.Notes, "The classical fit started from zero coefficients, independent of the network: the order flag marks patches where it ended above the polished estimate.")
	} else {
		r.Notes = append(r.Notes, "The classical fit continued from the network's coefficients: it is not an independent reference.")
	}
}

// patchTruths gives every job its truth: the single-patch truth when
// cfg.TruthAt is nil (note is returned unchanged), otherwise the
// constrained native truth at each patch centre, with the conversion note
// of the last patch. It runs before the parallel part because TruthAt need
// not be safe for concurrent use, and fails if a patch has no truth or it
// cannot be converted.
func patchTruths(jobs []patchrun.Patch, cfg Config, truth [][]float64, note string, basis *modes.Basis,
	constrain func([][]float64) [][]float64) ([][][]float64, string, error) {
	n := cfg.Fit.Patch
	truths := make([][][]float64, len(jobs))
	for i, jb := range jobs {
		if cfg.TruthAt == nil {
			truths[i] = truth
			continue
		}
		tt := cfg.TruthAt(float64(jb.X0+n/2), float64(jb.Y0+n/2))
		if tt == nil {
			return nil, "", fmt.Errorf("compare: no truth at patch %d (%d, %d)", i, jb.X0, jb.Y0)
		}
		t, tn, err := truthNative(tt, basis, cfg.Fit.Frames)
		if err != nil {
			return nil, "", fmt.Errorf("compare: truth of patch %d: %w", i, err)
		}
		truths[i] = constrain(t)
		note = tn
	}
	return truths, note, nil
}

// collectPatches moves the successful patches into r in job order, notes
// the failed ones, and sets r.Spectra to the patch-mean power spectra (raw,
// then each method but the truth) with the given cut-off, cycles/pixel. It
// fails if no patch succeeded.
func collectPatches(r *Report, outs []patchOut, jobs []patchrun.Patch, methods []string, cutoff float64) error {
	n := r.PatchSize
	var failed []string
	var spec [][]float64
	nspec := 0
	for i := range outs {
		o := &outs[i]
		if o.err != nil {
			failed = append(failed, fmt.Sprintf("patch %d at (%d, %d): %v", jobs[i].ID, jobs[i].X0, jobs[i].Y0, o.err))
			continue
		}
		r.Patches = append(r.Patches, o.patch)
		if spec == nil {
			spec = make([][]float64, len(o.spectra))
			for k := range spec {
				spec[k] = make([]float64, n/2+1)
			}
		}
		for k := range spec {
			for q, v := range o.spectra[k] {
				spec[k][q] += v
			}
		}
		nspec++
	}
	if len(r.Patches) == 0 {
		return fmt.Errorf("compare: no patch could be compared: %s", strings.Join(failed, "; "))
	}
	if len(failed) > 0 {
		r.Notes = append(r.Notes, fmt.Sprintf("%d of %d patches left out: %s", len(failed), len(jobs), strings.Join(failed, "; ")))
	}
	r.Spectra = meanSpectra(spec, nspec, methods, cutoff, n)
	return nil
}

// meanSpectra divides the summed spectra by the patch count nspec (in
// place) and labels them: "raw", then each method but the truth, on
// frequencies q/n for q = 0..n/2.
func meanSpectra(spec [][]float64, nspec int, methods []string, cutoff float64, n int) *Spectra {
	sp := &Spectra{Series: []string{"raw"}, Cutoff: cutoff}
	for _, m := range methods {
		if m != Truth {
			sp.Series = append(sp.Series, m)
		}
	}
	for q := 0; q <= n/2; q++ {
		sp.Freq = append(sp.Freq, float64(q)/float64(n))
	}
	for k := range spec {
		for q := range spec[k] {
			spec[k][q] /= float64(nspec)
		}
	}
	sp.Power = spec
	return sp
}

// finishReport adds the run's settings and the caller's settings and
// notes to r, summarises it and attaches the example figure data.
func finishReport(r *Report, cfg Config, fitter *infer.Fitter, div [][]float64, overlap, workers, patches int, b *burst.Burst, w *patchWork) (*Report, error) {
	r.Settings = append(r.Settings, runSettings(cfg, fitter, overlap, workers, patches)...)
	r.Settings = append(r.Settings, cfg.Settings...)
	r.Notes = append(r.Notes, cfg.Notes...)
	if err := Summarise(r); err != nil {
		return nil, err
	}
	ex, err := example(r, cfg, fitter, div)
	if err != nil {
		return nil, err
	}
	if err := exampleImages(ex, r, b, w); err != nil {
		return nil, err
	}
	r.Example = ex
	return r, nil
}

// truthNative converts a truth table to frames × Count native coefficients
// of basis b: directly when the basis and mode count agree, otherwise
// through the Noll-equivalent coefficients (truncated or zero-padded to
// Noll j = 2..Count+1), solving ToNoll·native = noll. The note says when a
// conversion happened.
func truthNative(t *burst.Truth, b *modes.Basis, frames int) ([][]float64, string, error) {
	if len(t.Coeffs) != frames {
		return nil, "", fmt.Errorf("truth has %d frames, the burst %d", len(t.Coeffs), frames)
	}
	if strings.EqualFold(t.Basis, string(b.Kind)) && t.Modes == b.Count {
		out := make([][]float64, frames)
		for j, row := range t.Coeffs {
			if len(row) != b.Count {
				return nil, "", fmt.Errorf("truth frame %d has %d modes, want %d", j, len(row), b.Count)
			}
			out[j] = append([]float64(nil), row...)
		}
		return out, "", nil
	}
	if t.Noll == nil {
		return nil, "", fmt.Errorf("truth is in the %s basis with %d modes and carries no Noll equivalent; the comparison uses %s with %d", t.Basis, t.Modes, b.Kind, b.Count)
	}
	if len(t.Noll) != frames {
		return nil, "", fmt.Errorf("truth Noll table has %d frames, the burst %d", len(t.Noll), frames)
	}
	c := b.Count
	var lu mat.LU
	if b.ToNoll != nil {
		lu.Factorize(b.ToNoll)
	}
	out := make([][]float64, frames)
	for j, row := range t.Noll {
		v := mat.NewVecDense(c, nil)
		for i := 0; i < c && i < len(row); i++ {
			v.SetVec(i, row[i])
		}
		x := mat.NewVecDense(c, nil)
		if b.ToNoll != nil {
			if err := lu.SolveVecTo(x, false, v); err != nil {
				return nil, "", fmt.Errorf("converting the truth to the %s basis: %w", b.Kind, err)
			}
		} else {
			x.CopyVec(v)
		}
		out[j] = make([]float64, c)
		for i := range out[j] {
			out[j][i] = x.AtVec(i)
		}
	}
	note := fmt.Sprintf("The truth (%s basis, %d modes) was converted to the %s basis with %d modes through its Noll-equivalent coefficients; modes beyond Noll j = %d are dropped.", t.Basis, t.Modes, b.Kind, c, c+1)
	return out, note, nil
}

// runSettings lists the provenance of a run.
func runSettings(cfg Config, f *infer.Fitter, overlap, workers, patches int) []Setting {
	fc := f.Config()
	t := fc.Telescope
	start := "polished coefficients"
	if cfg.Polish == 0 {
		start = "learned coefficients"
	}
	if !cfg.FromLearned {
		start = "zero"
	}
	div := make([]string, len(fc.Diversity))
	for k, v := range fc.Diversity {
		div[k] = fmt.Sprintf("%g", v)
	}
	return []Setting{
		{"telescope", fmt.Sprintf("D = %g m, obscuration %g, λ = %g nm, pixel %.4g arcsec", t.Diameter, t.Obscuration, t.Wavelength*1e9, t.PixelScale*180/math.Pi*3600)},
		{"diversity (waves PV per channel)", strings.Join(div, ", ")},
		{"patch", fmt.Sprintf("%d px, overlap %d px (restore's grid), %d patches", fc.Patch, overlap, patches)},
		{"frames", fmt.Sprint(fc.Frames)},
		{"basis", fmt.Sprintf("%s, %d modes", fc.Basis, fc.Modes)},
		{"expected D/r0 (prior)", fmt.Sprintf("%g", fc.DOverR0)},
		{"prior weight", fmt.Sprintf("%g", fc.Prior)},
		{"metric", fmt.Sprintf("gamma %g, noise filter %v (threshold %g), tilt constraint %v, window %g", fc.Metric.Gamma, fc.Metric.NoiseFilter, fc.Metric.NoiseThreshold, fc.Metric.TiltConstrain, fc.Metric.Window)},
		{"fit", fmt.Sprintf("L-BFGS, at most %d iterations, relative change %g, wall time %v, started from %s", fc.Stop.Iterations, fc.Stop.RelChange, fc.Stop.WallTime, start)},
		{"polish", fmt.Sprintf("%d L-BFGS iterations from the learned coefficients", cfg.Polish)},
		{"workers", fmt.Sprint(workers)},
	}
}

// exampleImages adds to ex the images of its patch side by side: the
// frame-averaged focused data ("raw"), each method's restoration (truth:
// the restoration with the true wavefront) and, when the burst carries its
// OBJECT, the diffraction-limited object ("object").
func exampleImages(ex *Example, r *Report, b *burst.Burst, w *patchWork) error {
	var p *Patch
	for i := range r.Patches {
		if r.Patches[i].Index == ex.Patch {
			p = &r.Patches[i]
		}
	}
	n := ex.N
	data := b.Patch(p.X, p.Y, n)
	raw := make([]float64, n*n)
	for _, im := range data[0] {
		for i, v := range im {
			raw[i] += v / float64(len(data[0]))
		}
	}
	ex.ImageSeries, ex.Images = []string{"raw"}, [][]float64{raw}
	for _, m := range ex.Series {
		img, err := w.fitter.Restore(data, p.Find(m).Coeffs)
		if err != nil {
			return fmt.Errorf("compare: example restoration %s: %w", m, err)
		}
		ex.ImageSeries, ex.Images = append(ex.ImageSeries, m), append(ex.Images, img)
	}
	if w.ref != nil {
		cut := make([]float64, n*n)
		for y := 0; y < n; y++ {
			copy(cut[y*n:y*n+n], w.ref[(p.Y+y)*w.refNx+p.X:])
		}
		ex.ImageSeries, ex.Images = append(ex.ImageSeries, "object"), append(ex.Images, cut)
	}
	return nil
}

// example computes the wavefront/PSF figure data of one patch and frame.
func example(r *Report, cfg Config, f *infer.Fitter, div [][]float64) (*Example, error) {
	pi := cfg.ExamplePatch
	if pi < 0 || pi >= len(r.Patches) {
		pi = 0
		if cfg.ExamplePatch < 0 && len(r.Summary.Ratios) > 0 {
			rs := append([]Ratio(nil), r.Summary.Ratios[0]...)
			sort.SliceStable(rs, func(i, j int) bool { return rs[i].Value < rs[j].Value })
			want := rs[len(rs)/2].Patch
			for i, p := range r.Patches {
				if p.Index == want {
					pi = i
				}
			}
		}
	}
	fr := cfg.ExampleFrame
	if fr < 0 || fr >= r.Frames {
		fr = 0
	}
	basis, pupil := f.Basis(), f.Pupil()
	n := basis.N
	p := &r.Patches[pi]
	ex := &Example{Patch: p.Index, Frame: fr, N: n, Pupil: append([]float64(nil), pupil.Amp...)}
	// Truth first when present, so the eye starts from the reference.
	order := append([]string(nil), r.Methods...)
	if r.has(Truth) {
		order = append([]string{Truth}, order[:len(order)-1]...)
	}
	im := optics.NewImager(pupil)
	phase := make([]float64, n*n)
	tot := make([]float64, n*n)
	psf := make([]float64, n*n)
	for _, m := range order {
		e := p.Find(m)
		basis.Phase(phase, e.Coeffs[fr])
		ex.Series = append(ex.Series, m)
		ex.Phase = append(ex.Phase, append([]float64(nil), phase...))
		for ch := 0; ch < 2; ch++ {
			copy(tot, phase)
			if ch < len(div) && div[ch] != nil {
				for i, v := range div[ch] {
					tot[i] += v
				}
			}
			im.PSF(psf, tot)
			sh := make([]float64, n*n)
			fft.Shift(sh, psf, n, n)
			ex.PSF[ch] = append(ex.PSF[ch], sh)
		}
	}
	return ex, nil
}
