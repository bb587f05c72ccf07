package infer

import (
	"bytes"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"pdwave/model/instrument"
	"pdwave/model/optics"
	"pdwave/model/site"
	"pdwave/simulate"
)

// demoTelescope is the invented demo telescope of the shared decisions
// (D = 0.50 m, obscuration 0.15, F# 40, λ = 600 nm, 0.120″ pixels).
func demoTelescope() optics.Telescope {
	return optics.Telescope{Diameter: 0.5, Obscuration: 0.15, FocalRatio: 40, Wavelength: 600e-9,
		PixelScale: 0.120 / 206264.806}
}

var _ Estimator = (*Fitter)(nil)

// demoSource is the simulator on the demo site file.
func demoSource(tb testing.TB) BurstSource {
	_, cfg := demoSite(tb)
	return SimulatedSource(cfg)
}

// demoSite loads testdata/demo-site.yaml and the simulator's configuration
// for it.
func demoSite(tb testing.TB) (*site.Site, simulate.Config) {
	tb.Helper()
	st, err := site.Load("../testdata/demo-site.yaml")
	if err != nil {
		tb.Fatal(err)
	}
	cfg, _, err := simulate.ConfigFromSite(st, instrument.Partial{})
	if err != nil {
		tb.Fatal(err)
	}
	return st, cfg
}

// BenchmarkFit: full fit from zero of one demo burst (64 px, 16 frames ×
// 2 channels, 36 KL modes, D/r0 = 5), on one goroutine.
func BenchmarkFit(b *testing.B) {
	cfg := DefaultConfig()
	cfg.Telescope = demoTelescope()
	f, err := NewFitter(cfg)
	if err != nil {
		b.Fatal(err)
	}
	data, _, err := demoSource(b)(StudyCase{DOverR0: 5, Patch: 64, Frames: 16, DiversityPV: 1}, rand.New(rand.NewPCG(1, 1)))
	if err != nil {
		b.Fatal(err)
	}
	var it int
	cpuLoop(b, func() {
		r, err := f.Fit(data, nil)
		if err != nil {
			b.Fatal(err)
		}
		it = r.Iterations
	})
	b.ReportMetric(float64(it), "iterations")
}

// TestStudySmall is the CI version of the accuracy study (cmd: pdwave fit
// study): the demo site's simulated bursts (von Kármán screens, three
// frozen-flow layers, granulation, 10⁴ photons per pixel: SNR 100, read
// noise) at D/r0 = 5, 64 px, 16 frames, 1 wave defocus. Targets from
// the issue: ≤ 10 % of the wavefront variance left as error over Noll 2–10
// and ≤ 20 % over 2–21, burst-mean tilt removed. The fit starts from zero
// with registered tilts and must gain at least a factor 3 over that start.
func TestStudySmall(t *testing.T) {
	bursts := 4
	if testing.Short() {
		bursts = 2
	}
	cfg := DefaultConfig()
	cfg.Telescope = demoTelescope()
	src := demoSource(t)
	cases := []StudyCase{{DOverR0: 5, Patch: 64, Frames: 16, DiversityPV: 1}}
	rows, err := Study(cfg, cases, bursts, src, 1, 0, nil)
	if err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	if err := WriteStudyCSV(&buf, rows); err != nil {
		t.Fatal(err)
	}
	t.Logf("\n%s", buf.String())
	r := rows[0]
	if r.Err10 > 0.10 {
		t.Errorf("error over Noll 2–10 = %.3f of the variance, want ≤ 0.10", r.Err10)
	}
	if r.Err21 > 0.20 {
		t.Errorf("error over Noll 2–21 = %.3f of the variance, want ≤ 0.20", r.Err21)
	}
	if r.Err10 > r.Err10Start/3 {
		t.Errorf("fit gained too little over its start: %.3f vs %.3f", r.Err10, r.Err10Start)
	}
}

// TestFitFromTruthStays: started at the truth (projected on the basis),
// the fit stays near it and does not end above its starting objective.
func TestFitFromTruthStays(t *testing.T) {
	cfg := DefaultConfig()
	cfg.Telescope = demoTelescope()
	cfg.Frames = 8
	cfg.Modes = 21
	f, err := NewFitter(cfg)
	if err != nil {
		t.Fatal(err)
	}
	s := Synthetic{N: 64, Frames: 8, Telescope: cfg.Telescope, DiversityPV: []float64{0, 1}, DOverR0: 3, JMax: 45, Photons: 1e4}
	b, err := s.Burst(rand.New(rand.NewPCG(4, 4)))
	if err != nil {
		t.Fatal(err)
	}
	bs := f.Basis()
	start := make([][]float64, cfg.Frames)
	for j := range start {
		start[j] = make([]float64, bs.Count)
		for k := 0; k < bs.Count; k++ {
			for i := 0; i < bs.Count; i++ {
				start[j][k] += bs.ToNoll.At(i, k) * b.Noll[j][i] // ToNoll orthogonal for KL
			}
		}
	}
	r, err := f.Fit(b.Data, start)
	if err != nil {
		t.Fatal(err)
	}
	if r.MetricEnd > r.MetricStart {
		t.Errorf("objective rose from %.4g to %.4g", r.MetricStart, r.MetricEnd)
	}
	e, err := ResidualFraction(r.Noll, b.Noll, 21)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("from truth: err 2–21 %.3f, E %.4g → %.4g, %d iterations", e, r.MetricStart, r.MetricEnd, r.Iterations)
	if e > 0.15 {
		t.Errorf("fit started at the truth drifted: error %.3f of the variance, want ≤ 0.15", e)
	}
	if len(r.Restored) != 64*64 {
		t.Fatalf("restored patch has %d pixels", len(r.Restored))
	}
}

// TestRegistrationRecoversTilt: the cross-correlation start alone recovers
// most of the tip/tilt (frame-to-frame image motion), sign and scale
// included (a = −π s R/N; see tiltPerPixel).
func TestRegistrationRecoversTilt(t *testing.T) {
	cfg := DefaultConfig()
	cfg.Telescope = demoTelescope()
	cfg.Frames = 8
	cfg.Modes = 10
	f, err := NewFitter(cfg)
	if err != nil {
		t.Fatal(err)
	}
	s := Synthetic{N: 64, Frames: 8, Telescope: cfg.Telescope, DiversityPV: []float64{0, 1}, DOverR0: 5, JMax: 21, Photons: 1e4}
	b, err := s.Burst(rand.New(rand.NewPCG(8, 8)))
	if err != nil {
		t.Fatal(err)
	}
	cfg.Stop.Iterations = 1 // one step: the start dominates
	f1, _ := NewFitter(cfg)
	r, err := f1.Fit(b.Data, nil)
	if err != nil {
		t.Fatal(err)
	}
	// Tilt-only residual of the start.
	tiltOnly := func(c [][]float64) [][]float64 {
		o := make([][]float64, len(c))
		for j := range c {
			o[j] = []float64{c[j][0], c[j][1]}
		}
		return o
	}
	e, err := ResidualFraction(tiltOnly(r.StartNoll), tiltOnly(b.Noll), 3)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("registered tilt leaves %.3f of the tilt variance", e)
	if e > 0.3 {
		t.Errorf("registration leaves %.3f of the tip/tilt variance, want ≤ 0.3", e)
	}
	_ = f
}

// TestFitAllMatchesFit: the worker pool gives the same result as one call
// per patch (deterministic, one Objective per worker).
func TestFitAllMatchesFit(t *testing.T) {
	cfg := DefaultConfig()
	cfg.Telescope = demoTelescope()
	cfg.Patch, cfg.Frames, cfg.Modes = 48, 4, 10
	cfg.Stop.Iterations = 15
	f, err := NewFitter(cfg)
	if err != nil {
		t.Fatal(err)
	}
	s := Synthetic{N: 48, Frames: 4, Telescope: cfg.Telescope, DiversityPV: []float64{0, 1}, DOverR0: 3, JMax: 21, Photons: 1e4}
	var ps []Patch
	for i := range 3 {
		b, err := s.Burst(rand.New(rand.NewPCG(uint64(i), 2)))
		if err != nil {
			t.Fatal(err)
		}
		ps = append(ps, Patch{Data: b.Data})
	}
	all, err := f.FitAll(ps, 2)
	if err != nil {
		t.Fatal(err)
	}
	for i, p := range ps {
		r, err := f.Fit(p.Data, nil)
		if err != nil {
			t.Fatal(err)
		}
		for j := range r.Coeffs {
			for k := range r.Coeffs[j] {
				if r.Coeffs[j][k] != all[i].Coeffs[j][k] {
					t.Fatalf("patch %d frame %d mode %d: pool %g vs single %g", i, j, k, all[i].Coeffs[j][k], r.Coeffs[j][k])
				}
			}
		}
	}
}

// TestFitErrors: malformed input gives errors, not panics.
func TestFitErrors(t *testing.T) {
	cfg := DefaultConfig()
	cfg.Telescope = demoTelescope()
	cfg.Patch, cfg.Frames, cfg.Modes = 32, 2, 5
	f, err := NewFitter(cfg)
	if err != nil {
		t.Fatal(err)
	}
	good := [][][]float64{{make([]float64, 1024), make([]float64, 1024)}, {make([]float64, 1024), make([]float64, 1024)}}
	bad := [][][]float64{{make([]float64, 1000), make([]float64, 1024)}, {make([]float64, 1024), make([]float64, 1024)}}
	if _, err := f.Fit(bad, nil); err == nil {
		t.Error("wrong image size accepted")
	}
	nan := [][][]float64{{make([]float64, 1024), make([]float64, 1024)}, {make([]float64, 1024), make([]float64, 1024)}}
	nan[1][1][5] = math.NaN()
	if _, err := f.Fit(nan, nil); err == nil || !strings.Contains(err.Error(), "non-finite") {
		t.Errorf("NaN accepted or unclear error: %v", err)
	}
	if _, err := f.Fit(good, nil); err == nil {
		t.Error("flat images (no signal) accepted")
	}
	if _, err := f.Fit(good, [][]float64{{1}}); err == nil {
		t.Error("wrong start shape accepted")
	}
	c2 := cfg
	c2.Telescope.PixelScale *= 3 // coarser than Nyquist
	if _, err := NewFitter(c2); err == nil {
		t.Error("under-sampled telescope accepted")
	}
}

// TestResidualFraction checks the error measure on a hand-made case:
// fit = truth + common tilt has zero error; fit = 0 has error 1.
func TestResidualFraction(t *testing.T) {
	truth := [][]float64{{1, -1, 0.5}, {3, 1, -0.5}}
	shifted := [][]float64{{1.7, -1.2, 0.5}, {3.7, 0.8, -0.5}}
	if e, err := ResidualFraction(shifted, truth, 4); err != nil || e > 1e-15 {
		t.Errorf("common tilt counted as error: %g, %v", e, err)
	}
	zero := [][]float64{{0, 0, 0}, {0, 0, 0}}
	if e, err := ResidualFraction(zero, truth, 4); err != nil || math.Abs(e-1) > 1e-15 {
		t.Errorf("zero fit: error %g (want 1), %v", e, err)
	}
	if _, err := ResidualFraction(zero, truth, 10); err == nil {
		t.Error("jmax beyond the truth accepted")
	}
}

// TestRestoreSharpens: on a simulated demo burst (D/r0 = 5) the restored
// patch resembles the true object more than the average of the focused
// frames does: its correlation with the object over the flat part of the
// window, at the best shift, is higher. (Correlation as the check: the restoration is band-
// limited by the noise filter, so a pixel-wise difference would mostly
// measure the missing high frequencies.)
func TestRestoreSharpens(t *testing.T) {
	st, err := site.Load("../testdata/demo-site.yaml")
	if err != nil {
		t.Fatal(err)
	}
	scfg, _, err := simulate.ConfigFromSite(st, instrument.Partial{})
	if err != nil {
		t.Fatal(err)
	}
	scfg.Turbulence.R0 = scfg.Telescope.Diameter / 5
	scfg.Basis, scfg.Modes = "zernike", 20
	sim, err := simulate.New(scfg)
	if err != nil {
		t.Fatal(err)
	}
	r, err := sim.Patch(rand.New(rand.NewPCG(12, 12)), simulate.Options{Workers: 1})
	if err != nil {
		t.Fatal(err)
	}
	b := r.Burst
	cfg := DefaultConfig()
	cfg.Telescope = demoTelescope()
	f, err := NewFitter(cfg)
	if err != nil {
		t.Fatal(err)
	}
	res, err := f.Fit([][][]float64{b.Data[0], b.Data[1]}, nil)
	if err != nil {
		t.Fatal(err)
	}
	n := 64
	avg := make([]float64, n*n)
	for _, im := range b.Data[0] {
		for i, v := range im {
			avg[i] += v / float64(b.Frames)
		}
	}
	// Correlation with the object at the best integer shift within ±8 px:
	// the restoration sits where the burst-mean tilt (invisible to the
	// metric) put it.
	corr := func(a []float64) float64 {
		best := -1.0
		for dy := -8; dy <= 8; dy++ {
			for dx := -8; dx <= 8; dx++ {
				var sa, so, sab, saa, soo, cnt float64
				for y := n / 4; y < 3*n/4; y++ {
					for x := n / 4; x < 3*n/4; x++ {
						va, vo := a[y*n+x], b.Object[(y+dy)*n+x+dx]
						sa += va
						so += vo
						sab += va * vo
						saa += va * va
						soo += vo * vo
						cnt++
					}
				}
				cov := sab/cnt - sa*so/cnt/cnt
				c := cov / math.Sqrt((saa/cnt-sa*sa/cnt/cnt)*(soo/cnt-so*so/cnt/cnt))
				best = math.Max(best, c)
			}
		}
		return best
	}
	cr, ca := corr(res.Restored), corr(avg)
	t.Logf("correlation with the object: restored %.3f, frame average %.3f, first frame %.3f", cr, ca, corr(b.Data[0][0]))
	if cr <= ca || cr < 0.85 {
		t.Errorf("restored patch correlates %.3f with the object, frame average %.3f; want higher and ≥ 0.85", cr, ca)
	}
}
