package compare

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"pdwave/infer"
	"pdwave/infer/patchrun"
	"pdwave/model/burst"
	"pdwave/model/fft"
	"pdwave/model/modes"
	"pdwave/model/net"
	"pdwave/model/optics"
	"pdwave/model/pd"
)

// testTelescope is the invented demo telescope (testdata/demo-site.yaml):
// D = 0.5 m, obscuration 0.15, λ = 600 nm, 0.12 arcsec pixels (Nyquist at
// 600 nm is 0.1238 arcsec).
func testTelescope() optics.Telescope {
	return optics.Telescope{Diameter: 0.5, Obscuration: 0.15, FocalRatio: 40, Wavelength: 600e-9, PixelScale: 0.12 / 206264.806}
}

func testConfig(n, frames, nmodes int) Config {
	fc := infer.DefaultConfig()
	fc.Telescope = testTelescope()
	fc.Patch, fc.Frames, fc.Modes = n, frames, nmodes
	fc.DOverR0 = 3
	fc.Stop = infer.Stop{Iterations: 60, RelChange: 1e-9}
	return Config{Fit: fc, Polish: 4, Workers: 2, ExamplePatch: -1, Version: "test", Source: "synthetic burst"}
}

// synthBurst makes a periodic phase-diversity burst of nx×ny pixels: a
// random positive object seen through one Kolmogorov wavefront per frame
// (drawn from the basis variances at D/r0, Noll 1976 eq. 25 through the
// basis) and the channel diversities, plus white noise of relative level
// noise. The convolution is periodic over the whole field and every patch
// sees the same wavefront; it returns the burst and the true coefficients.
func synthBurst(t testing.TB, cfg Config, nx, ny int, seed uint64, noise float64) (*burst.Burst, [][]float64) {
	t.Helper()
	fc := cfg.Fit
	rng := rand.New(rand.NewPCG(seed, 7))
	if nx != ny {
		t.Fatal("synthBurst: square fields only")
	}
	n := nx
	pupil, err := optics.NewPupil(fc.Telescope, n)
	if err != nil {
		t.Fatal(err)
	}
	// Basis on the field grid for image formation, on the patch grid for
	// the coefficients: the same pupil radius in pupil-plane pixels only if
	// the field is one patch, so the field case uses the patch basis scaled.
	bField, err := modes.New(fc.Basis, fc.Modes, n, pupil.Radius)
	if err != nil {
		t.Fatal(err)
	}
	plan := fft.NewPlan(n, n)
	// Object: smoothed noise, positive, about 10 % contrast.
	o := make([]float64, n*n)
	for i := range o {
		o[i] = rng.NormFloat64()
	}
	oz := make([]complex128, n*n)
	plan.ForwardReal(oz, o)
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			fx, fy := float64(x), float64(y)
			if x > n/2 {
				fx -= float64(n)
			}
			if y > n/2 {
				fy -= float64(n)
			}
			f2 := (fx*fx + fy*fy) / float64(n*n)
			oz[y*n+x] *= complex(math.Exp(-f2*2*math.Pi*math.Pi*2.0*2.0), 0)
		}
	}
	oz[0] = 0
	plan.InverseReal(o, oz)
	var s2 float64
	for _, v := range o {
		s2 += v * v
	}
	sd := math.Sqrt(s2 / float64(n*n))
	for i := range o {
		o[i] = 1 + 0.1*o[i]/sd
	}
	plan.ForwardReal(oz, o)

	fac := math.Pow(fc.DOverR0, 5.0/3)
	truth := make([][]float64, fc.Frames)
	b := burst.New(nx, ny, fc.Frames)
	im := optics.NewImager(pupil)
	phase := make([]float64, n*n)
	otf := make([]complex128, n*n)
	img := make([]complex128, n*n)
	for j := range truth {
		truth[j] = make([]float64, fc.Modes)
		for m := range truth[j] {
			truth[j][m] = math.Sqrt(bField.Variance[m]*fac) * rng.NormFloat64()
		}
		for c, pv := range fc.Diversity {
			bField.Phase(phase, truth[j])
			if pv != 0 {
				d := make([]float64, n*n)
				pupil.Defocus(d, pv)
				for i := range phase {
					phase[i] += d[i]
				}
			}
			im.OTF(otf, phase)
			for i := range img {
				img[i] = oz[i] * otf[i]
			}
			out := make([]float64, n*n)
			plan.InverseReal(out, img)
			for i := range out {
				out[i] += noise * rng.NormFloat64()
			}
			b.Data[c][j] = out
		}
	}
	b.Truth = &burst.Truth{Basis: string(fc.Basis), Modes: fc.Modes, Coeffs: truth}
	return b, truth
}

// truthEstimator stands in for a network: the truth plus Gaussian errors
// of relative size rel (per mode, scaled by the truth's rms).
type truthEstimator struct {
	basis *modes.Basis
	c     [][]float64
}

func newTruthEstimator(t testing.TB, cfg Config, truth [][]float64, rel float64, seed uint64) *truthEstimator {
	f, err := infer.NewFitter(cfg.Fit)
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(seed, 9))
	fac := math.Pow(cfg.Fit.DOverR0, 5.0/3)
	c := make([][]float64, len(truth))
	for j := range truth {
		c[j] = make([]float64, len(truth[j]))
		for m := range c[j] {
			c[j][m] = truth[j][m] + rel*math.Sqrt(f.Basis().Variance[m]*fac)*rng.NormFloat64()
		}
	}
	return &truthEstimator{basis: f.Basis(), c: c}
}

func (e *truthEstimator) Basis() *modes.Basis { return e.basis }
func (e *truthEstimator) Estimate(data [][][]float64) ([][]float64, error) {
	out := make([][]float64, len(e.c))
	for j := range e.c {
		out[j] = append([]float64(nil), e.c[j]...)
	}
	return out, nil
}

func rmsDiff(a, b [][]float64) float64 {
	var s float64
	var n int
	for j := range a {
		for m := range a[j] {
			d := a[j][m]
			if b != nil {
				d -= b[j][m]
			}
			s += d * d
			n++
		}
	}
	return math.Sqrt(s / float64(n))
}

// TestRunSimulatedBurst runs the comparison on a simulated single-patch
// burst with a stand-in learned estimator (truth + 50 % errors) and checks
// that the truth is in the outputs, the metric order holds on every patch,
// the written numbers recompute, and the fit moves towards the truth.
func TestRunSimulatedBurst(t *testing.T) {
	cfg := testConfig(32, 4, 10)
	b, truth := synthBurst(t, cfg, 32, 32, 1, 1e-3)
	est := newTruthEstimator(t, cfg, truth, 0.5, 2)
	r, err := Run(b, cfg, est)
	if err != nil {
		t.Fatal(err)
	}
	want := []string{Learned, Polished, Fitted, Truth}
	if strings.Join(r.Methods, ",") != strings.Join(want, ",") {
		t.Fatalf("methods %v, want %v", r.Methods, want)
	}
	if len(r.Patches) != 1 {
		t.Fatalf("%d patches, want 1", len(r.Patches))
	}
	p := &r.Patches[0]
	l, po, f, tr := p.Find(Learned), p.Find(Polished), p.Find(Fitted), p.Find(Truth)
	t.Logf("metric learned %.6g polished %.6g fitted %.6g truth %.6g; iterations polish %d fit %d", l.Metric, po.Metric, f.Metric, tr.Metric, po.Iterations, f.Iterations)
	if !(f.Metric <= po.Metric && po.Metric <= l.Metric) {
		t.Errorf("metric order broken: fitted %g, polished %g, learned %g", f.Metric, po.Metric, l.Metric)
	}
	if !(po.Metric < l.Metric) {
		t.Errorf("polish did not lower the metric (%g → %g)", l.Metric, po.Metric)
	}
	for _, fl := range p.Flags {
		if fl == FlagOrder {
			t.Error("order flag raised")
		}
	}
	// The truth in the report is the simulated truth with the burst-mean
	// tilt removed (pd constraint); compare through the same projection.
	fit, err := infer.NewFitter(cfg.Fit)
	if err != nil {
		t.Fatal(err)
	}
	s := pd.NewObjective(fit.Pupil(), fit.Basis(), [][]float64{nil, nil}, cfg.Fit.Frames, fit.Config().Metric)
	flat := make([]float64, 0, cfg.Fit.Frames*cfg.Fit.Modes)
	for _, row := range truth {
		flat = append(flat, row...)
	}
	s.Constrain(flat)
	for j := range tr.Coeffs {
		for m, v := range tr.Coeffs[j] {
			if w := flat[j*cfg.Fit.Modes+m]; math.Abs(v-w) > 1e-12 {
				t.Fatalf("truth frame %d mode %d = %g, want %g", j, m, v, w)
			}
		}
	}
	// Independent check of the fit: started 50 % off, it ends closer to
	// the truth than the start (the MAP estimate is biased towards zero by
	// the prior, so no exact recovery is expected).
	el, ef := rmsDiff(l.Coeffs, tr.Coeffs), rmsDiff(f.Coeffs, tr.Coeffs)
	t.Logf("rms error learned %.4g, fitted %.4g, truth rms %.4g rad", el, ef, rmsDiff(tr.Coeffs, nil))
	if !(ef < el) {
		t.Errorf("fit error %g not below the learned error %g", ef, el)
	}
	files, err := Outputs(r)
	if err != nil {
		t.Fatal(err)
	}
	checkOutputs(t, files)
	checkSelfContained(t, files[FileHTML])
	col, rows := readCSV(t, files[FileCoeffsCSV])
	for _, name := range []string{Truth, "learned_minus_truth", "fitted_minus_truth"} {
		if _, ok := col[name]; !ok {
			t.Errorf("coefficients.csv lacks column %s", name)
		}
	}
	for _, row := range rows {
		j, m := int(num(t, row[col["frame"]]))-1, int(num(t, row[col["mode"]]))-1
		if got := num(t, row[col[Truth]]); got != tr.Coeffs[j][m] {
			t.Fatalf("coefficients.csv truth frame %d mode %d = %g, want %g", j, m+1, got, tr.Coeffs[j][m])
		}
	}
	for _, name := range []string{FigCoeffs, FigScatter, FigRMSDiff, FigWavefront, FigSpectra, FigRestored} {
		checkPNG(t, name, files[name])
	}
	if _, ok := files[FigRatioMap]; ok {
		t.Error("a one-patch report draws a ratio map")
	}
	if _, ok := files[FigFlagMap]; ok {
		t.Error("a one-patch report draws a flag map")
	}
}

// TestRunFieldWithoutLearned checks a 2×2-patch field with no learned
// estimator: the fit alone, a note saying so, truth left out.
func TestRunFieldWithoutLearned(t *testing.T) {
	cfg := testConfig(32, 3, 8)
	cfg.Fit.Stop = infer.Stop{Iterations: 20}
	b, _ := synthBurst(t, cfg, 64, 64, 3, 1e-3)
	r, err := Run(b, cfg, nil)
	if err != nil {
		t.Fatal(err)
	}
	if strings.Join(r.Methods, ",") != Fitted {
		t.Errorf("methods %v, want only fitted", r.Methods)
	}
	if len(r.Patches) != 4 {
		t.Errorf("%d patches, want 4", len(r.Patches))
	}
	notes := strings.Join(r.Notes, " ")
	if !strings.Contains(notes, "No learned estimator") || !strings.Contains(notes, "truth table") {
		t.Errorf("notes do not explain the missing estimator and truth: %q", notes)
	}
	files, err := Outputs(r)
	if err != nil {
		t.Fatal(err)
	}
	checkSelfContained(t, files[FileHTML])
	if !strings.Contains(string(files[FileHTML]), "No learned estimator") {
		t.Error("HTML does not say the learned estimator is missing")
	}
}

// TestRunNetEstimator runs an untrained network through NetEstimator on a
// 2×2 field: the plumbing works and the ordering holds on every patch.
func TestRunNetEstimator(t *testing.T) {
	cfg := testConfig(32, 3, 8)
	cfg.Fit.Stop = infer.Stop{Iterations: 25}
	cfg.Polish = 3
	cfg.FromLearned = true // the chained fit: the order must hold
	b, _ := synthBurst(t, cfg, 64, 64, 4, 1e-3)
	fit, err := infer.NewFitter(cfg.Fit)
	if err != nil {
		t.Fatal(err)
	}
	arch := net.DefaultArch(cfg.Fit.Modes)
	scale := make([]float64, cfg.Fit.Modes)
	for m := range scale {
		scale[m] = math.Sqrt(fit.Basis().Variance[m] * math.Pow(cfg.Fit.DOverR0, 5.0/3))
	}
	model, err := net.New(arch, net.Meta{Basis: string(cfg.Fit.Basis), Modes: cfg.Fit.Modes, Patch: 32}, scale, 5)
	if err != nil {
		t.Fatal(err)
	}
	est, err := NewNetEstimator(model, fit.Basis())
	if err != nil {
		t.Fatal(err)
	}
	r, err := Run(b, cfg, est)
	if err != nil {
		t.Fatal(err)
	}
	if len(r.Patches) != 4 {
		t.Fatalf("%d patches, want 4", len(r.Patches))
	}
	for _, p := range r.Patches {
		l, po, f := p.Find(Learned), p.Find(Polished), p.Find(Fitted)
		if !(f.Metric <= po.Metric && po.Metric <= l.Metric) {
			t.Errorf("patch %d: order broken: fitted %g, polished %g, learned %g", p.Index, f.Metric, po.Metric, l.Metric)
		}
		if l.Seconds <= 0 || po.Total < l.Total || f.Total < po.Total {
			t.Errorf("patch %d: timing learned %g, totals %g %g %g", p.Index, l.Seconds, l.Total, po.Total, f.Total)
		}
	}
	// A model for another patch size is refused.
	model.Meta.Patch = 64
	if _, err := NewNetEstimator(model, fit.Basis()); err == nil {
		t.Error("weights for 64 px patches accepted for 32 px")
	}
}

// TestPatchesAreRestores checks that compare judges restore's own patches:
// its jobs are the origins of infer.Grid with the same patch and overlap,
// in the same order. Planted: compare's former tiling (stride = patch,
// no overlap) gives 9 patches instead of 16 on a 200 px field.
func TestPatchesAreRestores(t *testing.T) {
	g, err := infer.NewGrid(200, 150, 64, 16)
	if err != nil {
		t.Fatal(err)
	}
	jobs := patchrun.Patches(g, 0, g.Count())
	if len(jobs) != g.Count() || len(jobs) != 4*3 {
		t.Fatalf("%d jobs, want the grid's %d (4×3)", len(jobs), g.Count())
	}
	for id, jb := range jobs {
		x, y := g.Origin(id)
		if jb.ID != id || jb.X0 != x || jb.Y0 != y {
			t.Errorf("job %d at (%d, %d), restore's patch %d is at (%d, %d)", jb.ID, jb.X0, jb.Y0, id, x, y)
		}
	}
}
