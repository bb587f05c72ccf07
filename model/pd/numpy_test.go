package pd

import (
	"encoding/json"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"testing"

	"pdwave/model/modes"
)

// numpyCase is the JSON case read by testdata/pdref.py: everything the
// reference needs as plain arrays (grids row-major, N×N).
type numpyCase struct {
	N              int           `json:"n"`
	Frames         int           `json:"frames"`
	Channels       int           `json:"channels"`
	Modes          int           `json:"modes"`
	Radius         float64       `json:"radius"`
	Gamma          float64       `json:"gamma"`
	NoiseFilter    bool          `json:"noise_filter"`
	NoiseThreshold float64       `json:"noise_threshold"`
	Window         float64       `json:"window"`
	HighPass       float64       `json:"high_pass"`
	PriorWeight    float64       `json:"prior_weight"`
	InvVar         []float64     `json:"inv_var"`
	TiltConstrain  bool          `json:"tilt_constrain"`
	TiltDirs       [][]float64   `json:"tilt_dirs"`
	FitOffset      bool          `json:"fit_offset"`
	PupilAmp       []float64     `json:"pupil_amp"`
	ModesGrid      [][]float64   `json:"modes_grid"`
	Diversity      [][]float64   `json:"diversity"`
	Data           [][][]float64 `json:"data"`
	Alpha          []float64     `json:"alpha"`
	Exact          *numpyExact   `json:"exact,omitempty"`
}

// numpyResult is what pdref.py prints.
type numpyResult struct {
	Value, Metric, Prior float64
	Grad                 []float64
	Restored             []float64
	Noise, Level         float64
	DataPower            float64 `json:"data_power"`
	Mask                 []int
	FDRelErr             float64 `json:"fd_rel_err"`
}

// needNumpy returns the python interpreter with numpy, skipping the test if
// there is none outside CI and failing it in CI (CI installs python3-numpy).
func needNumpy(t *testing.T) string {
	t.Helper()
	py := "/usr/bin/python3"
	if _, err := os.Stat(py); err != nil {
		p, lerr := exec.LookPath("python3")
		if lerr != nil {
			if os.Getenv("CI") != "" {
				t.Fatalf("python3 is required in CI: %v", err)
			}
			t.Skip("python3 not installed")
		}
		py = p
	}
	if err := exec.Command(py, "-c", "import numpy").Run(); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("numpy is required in CI (%s): %v", py, err)
		}
		t.Skipf("numpy not installed for %s", py)
	}
	return py
}

// TestAgainstNumpy: the objective, its terms, the gradient (modes and
// channel offsets), the noise measurement, the mask and the object estimate
// agree with an independent numpy implementation (testdata/pdref.py: its
// own pre-processing, and a gradient by reverse-mode differentiation through
// ifft2 with the PSF normalisation kept) to 1e-10 relative on fixed small
// cases (independent implementation: common practice). The reference's own
// central-difference check must reach 1e-6.
func TestAgainstNumpy(t *testing.T) {
	py := needNumpy(t)
	cases := []struct {
		name      string
		n, frames int
		kind      modes.Kind
		count     int
		pv        []float64
		set       Settings
	}{
		{"zernike-24-prior-offset", 24, 3, modes.KindZernike, 8, []float64{0, 1},
			Settings{Gamma: 1e-3, PriorWeight: 0.05, FitChannelOffset: true}},
		{"kl-24-filter-tilt-offset", 24, 3, modes.KindKL, 8, []float64{0, 1},
			Settings{Gamma: 1e-4, PriorWeight: 0.02, NoiseFilter: true, TiltConstrain: true, Window: 0.2, FitChannelOffset: true}},
		{"zernike-25-3ch-filter", 25, 3, modes.KindZernike, 6, []float64{0, 1, -0.6},
			Settings{Gamma: 1e-3, NoiseFilter: true, NoiseThreshold: 2, FitChannelOffset: true}},
		{"kl-24-plain", 24, 2, modes.KindKL, 8, []float64{0, 0.8}, Settings{}},
		{"kl-24-highpass", 24, 3, modes.KindKL, 8, []float64{0, 1},
			Settings{Gamma: 1e-3, PriorWeight: 0.02, NoiseFilter: true, TiltConstrain: true, Window: 0.25, HighPass: 1.0 / 16}},
		{"zernike-25-highpass-wide", 25, 2, modes.KindZernike, 6, []float64{0, 1},
			Settings{Gamma: 1e-3, HighPass: 0.2, FitChannelOffset: true}},
	}
	for ci, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			pr := makeProblem(t, c.n, c.frames, c.pv, c.kind, c.count, 0.4, false, uint64(31+ci))
			rng := rand.New(rand.NewPCG(uint64(ci), 8))
			for k := range pr.data {
				for j := range pr.data[k] {
					for i := range pr.data[k][j] {
						pr.data[k][j][i] += 0.01 * rng.NormFloat64()
					}
				}
			}
			s := NewObjective(pr.pupil, pr.basis, pr.div, c.frames, c.set)
			sigma2 := KolmogorovPrior(pr.basis, 4)
			s.SetPrior(sigma2)
			if err := s.SetData(pr.data); err != nil {
				t.Fatal(err)
			}
			alpha := make([]float64, s.NumParams())
			for i := range alpha {
				alpha[i] = 0.3 * rng.NormFloat64()
			}
			in := numpyInput(s, pr, alpha)
			want := runNumpy(t, py, in)
			compareNumpy(t, s, alpha, want)
		})
	}
}

// numpyInput gathers the case for pdref.py from the solver's settings and
// the problem (pupil, basis and diversity on the full grid, raw data).
func numpyInput(s *Objective, pr *problem, alpha []float64) *numpyCase {
	set := s.Settings()
	n, frames, nch, count := s.Size()
	c := &numpyCase{
		N: n, Frames: frames, Channels: nch, Modes: count, Radius: pr.pupil.Radius,
		Gamma: set.Gamma, NoiseFilter: set.NoiseFilter, NoiseThreshold: set.NoiseThreshold,
		Window: set.Window, HighPass: set.HighPass, PriorWeight: set.PriorWeight, InvVar: s.invVar,
		TiltConstrain: set.TiltConstrain, TiltDirs: tiltDirections(pr.basis),
		FitOffset: set.FitChannelOffset, PupilAmp: pr.pupil.Amp, ModesGrid: pr.basis.Modes,
		Data: pr.data, Alpha: alpha,
	}
	for k := range pr.div {
		c.Diversity = append(c.Diversity, pr.div[k])
	}
	return c
}

func runNumpy(t *testing.T, py string, in *numpyCase) *numpyResult {
	t.Helper()
	path := filepath.Join(t.TempDir(), "case.json")
	buf, err := json.Marshal(in)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, buf, 0o644); err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(py, filepath.Join("testdata", "pdref.py"), path)
	cmd.Stderr = os.Stderr
	out, err := cmd.Output()
	if err != nil {
		t.Fatalf("pdref.py: %v", err)
	}
	var r numpyResult
	if err := json.Unmarshal(out, &r); err != nil {
		t.Fatalf("pdref.py output: %v", err)
	}
	return &r
}

// relDiff is |a − b| / |b| (|a − b| if b = 0).
func relDiff(a, b float64) float64 {
	if b == 0 {
		return math.Abs(a)
	}
	return math.Abs(a-b) / math.Abs(b)
}

// maxRel is max|a − b| / max|b − off|: the error relative to the size of
// the reference (less its offset off), so tiny entries are not judged alone.
func maxRel(a, b []float64, off float64) float64 {
	var e, m float64
	for i := range a {
		e = math.Max(e, math.Abs(a[i]-b[i]))
		m = math.Max(m, math.Abs(b[i]-off))
	}
	return e / m
}

func compareNumpy(t *testing.T, s *Objective, alpha []float64, want *numpyResult) {
	t.Helper()
	const tol = 1e-10
	grad := make([]float64, len(alpha))
	e := s.ValueGrad(grad, alpha)
	metric, prior := s.LastTerms()
	rest := make([]float64, s.npix)
	s.Restore(rest, alpha)
	if len(want.Mask) != s.MaskSize() {
		t.Fatalf("mask: %d frequencies here, %d in numpy", s.MaskSize(), len(want.Mask))
	}
	for q, u := range s.mask { // both in increasing index order
		if want.Mask[q] != u {
			t.Fatalf("mask differs at entry %d: %d here, %d in numpy", q, u, want.Mask[q])
		}
	}
	if len(want.Grad) != len(grad) || len(want.Restored) != len(rest) {
		t.Fatalf("numpy returned %d gradient entries and %d pixels, want %d and %d", len(want.Grad), len(want.Restored), len(grad), len(rest))
	}
	checks := []struct {
		what string
		err  float64
	}{
		{"objective E", relDiff(e, want.Value)},
		{"metric L/P̄", relDiff(metric, want.Metric)},
		{"prior term", relDiff(prior, want.Prior)},
		{"gradient", maxRel(grad, want.Grad, 0)},
		{"object estimate", maxRel(rest, want.Restored, want.Level)},
		{"noise power", relDiff(s.Noise(), want.Noise)},
		{"data power P̄", relDiff(s.DataPower(), want.DataPower)},
		{"mean level", relDiff(s.level, want.Level)},
	}
	if nt := len(alpha) - s.nOff; s.nOff > 0 {
		checks = append(checks, struct {
			what string
			err  float64
		}{"offset gradient", maxRel(grad[nt:], want.Grad[nt:], 0)})
	}
	for _, c := range checks {
		if !(c.err <= tol) {
			t.Errorf("%s differs from numpy by %.3g relative, want ≤ %g", c.what, c.err, tol)
		}
	}
	if !(want.FDRelErr <= 1e-6) {
		t.Errorf("numpy's own gradient fails its central-difference check: %.3g", want.FDRelErr)
	}
	t.Logf("E = %.6g (Δ %.1g), gradient Δ %.1g, estimate Δ %.1g, noise Δ %.1g; mask %d; numpy fd check %.1g",
		e, checks[0].err, checks[3].err, checks[4].err, checks[5].err, s.MaskSize(), want.FDRelErr)
}

// TestExactEdgesAgainstNumpy: the exact-edge objective and its gradient
// (modes and channel offsets) agree with testdata/pdref.py, which builds
// every image's crop-of-convolution operator as a dense matrix, solves the
// regularised normal equations directly and differentiates the value by
// central differences (independent implementation: common practice).
// Tolerance 1e-9 on the value (the conjugate-gradient solve converged to
// 1e-12) and 1e-6 on the gradient (the reference's step 1e-6).
func TestExactEdgesAgainstNumpy(t *testing.T) {
	py := needNumpy(t)
	pr := makeProblem(t, 12, 3, []float64{0, 1}, modes.KindZernike, 8, 0.4, false, 41)
	rng := rand.New(rand.NewPCG(41, 8))
	for k := range pr.data {
		for j := range pr.data[k] {
			for i := range pr.data[k][j] {
				pr.data[k][j][i] += 0.01*rng.NormFloat64() + 0.2*float64(i%12)/12
			}
		}
	}
	s := NewObjective(pr.pupil, pr.basis, pr.div, 3, Settings{Gamma: 1e-3, PriorWeight: 0.05, TiltConstrain: true, FitChannelOffset: true})
	s.SetPrior(KolmogorovPrior(pr.basis, 4))
	if err := s.SetData(pr.data); err != nil {
		t.Fatal(err)
	}
	if err := s.SetExactEdges(pr.data); err != nil {
		t.Fatal(err)
	}
	s.edge.tol = 1e-12
	alpha := make([]float64, s.NumParams())
	for i := range alpha {
		alpha[i] = 0.3 * rng.NormFloat64()
	}
	grad := make([]float64, len(alpha))
	e := converged(t, s, grad, alpha)
	in := numpyInput(s, pr, alpha)
	in.Exact = &numpyExact{M: s.edge.m, Pad: s.edge.pad, Mu: s.edge.edgeMuAbs(s)}
	want := runNumpy(t, py, in)
	ev, eg := relDiff(e, want.Value), maxRel(grad, want.Grad, 0)
	t.Logf("E = %.8g (numpy %.8g, Δ %.1g), gradient Δ %.1g; M = %d", e, want.Value, ev, eg, s.edge.m)
	if !(ev <= 1e-9) {
		t.Errorf("exact-edge objective differs from numpy by %.3g relative, want ≤ 1e-9", ev)
	}
	if !(eg <= 1e-6) {
		t.Errorf("exact-edge gradient differs from numpy's central differences by %.3g relative, want ≤ 1e-6", eg)
	}
}

// numpyExact asks pdref.py for the exact-edge objective on an M×M grid
// with the data at offset Pad and the ridge Mu (normal-equation units).
type numpyExact struct {
	M   int     `json:"m"`
	Pad int     `json:"pad"`
	Mu  float64 `json:"mu"`
}
