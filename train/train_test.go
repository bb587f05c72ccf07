package train

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"pdwave/model/fft"
	"pdwave/model/instrument"
	"pdwave/model/modes"
	"pdwave/model/net"
	"pdwave/model/optics"
)

// testSetup is a small version of the invented demo telescope (0.5 m,
// 600 nm, 0.12 arcsec pixels, 1 wave PV diversity) on 32 px patches.
func testSetup() Setup {
	return Setup{Instrument: instrument.Instrument{
		Site: "test",
		Telescope: optics.Telescope{Diameter: 0.5, Obscuration: 0.15, FocalRatio: 40,
			Wavelength: 600e-9, PixelScale: 0.12 / optics.RadToArcsec},
		Diversity: []float64{0, 1}, DOverR0: 0.5 / 0.125, Patch: 32, Modes: 5, Basis: modes.KindKL,
	}, Frames: 4}
}

func testArch() *net.Arch {
	return &net.Arch{Channels: net.FeatureChannels, Size: 16, Conv: []int{4, 8}, Hidden: 16, Head: 16}
}

// toySource simulates periodic bursts for tests: a random 1/f² object,
// coefficients drawn from the prior of the setup's basis (σ = problem
// scale), images o ⊗ s_k plus Gaussian noise of 1 % of the mean level.
type toySource struct {
	prob *problem
	seed uint64
}

func (ts toySource) Get(i uint64) (*Sample, error) {
	p := ts.prob
	s := p.setup
	n := s.Patch
	rng := rand.New(rand.NewPCG(mix(ts.seed, i), 1))
	plan := fft.NewPlan(n, n)
	im := optics.NewImager(p.pupil)
	// Object spectrum: white noise shaped by 1/f², level 1000.
	obj := make([]complex128, n*n)
	for ky := 0; ky < n; ky++ {
		for kx := 0; kx < n; kx++ {
			u, v := float64(min(ky, n-ky)), float64(min(kx, n-kx))
			f2 := u*u + v*v
			if f2 == 0 {
				continue
			}
			obj[ky*n+kx] = complex(rng.NormFloat64(), rng.NormFloat64()) * complex(1/(1+f2/4), 0)
		}
	}
	plan.Inverse(obj, obj)
	o := make([]float64, n*n)
	var sd float64
	for k, v := range obj {
		o[k] = real(v)
		sd += o[k] * o[k]
	}
	sd = math.Sqrt(sd / float64(n*n))
	for k := range o {
		o[k] = 1000 * (1 + 0.1*o[k]/sd)
	}
	ospec := make([]complex128, n*n)
	plan.ForwardReal(ospec, o)
	smp := &Sample{}
	alpha := make([]float64, s.Modes)
	phase := make([]float64, n*n)
	otf := make([]complex128, n*n)
	work := make([]complex128, n*n)
	for j := 0; j < s.Frames; j++ {
		for k := range alpha {
			alpha[k] = p.scale[k] * rng.NormFloat64()
		}
		noll := make([]float64, s.Modes)
		p.basis.NollEquivalent(noll, alpha)
		smp.Noll = append(smp.Noll, noll)
		for c := 0; c < 2; c++ {
			p.basis.Phase(phase, alpha)
			if p.diversity[c] != nil {
				for k, d := range p.diversity[c] {
					phase[k] += d
				}
			}
			im.OTF(otf, phase)
			for k := range work {
				work[k] = ospec[k] * otf[k]
			}
			plan.Inverse(work, work)
			d := make([]float64, n*n)
			for k, v := range work {
				d[k] = real(v) + 10*rng.NormFloat64()
			}
			smp.Data[c] = append(smp.Data[c], d)
		}
	}
	return smp, nil
}

func newToyTrainer(t *testing.T, cfg Config) (*Trainer, toySource) {
	t.Helper()
	s := testSetup()
	cfg.Arch = testArch()
	tr, err := New(s, cfg, nil)
	if err != nil {
		t.Fatal(err)
	}
	src := toySource{prob: tr.prob, seed: 1}
	tr.src = src
	return tr, src
}

// A short unsupervised run on simulated bursts must lower the
// phase-diversity objective on a held-out set: the network learns to read
// wavefronts from the images without truth.
func TestTrainingLowersLoss(t *testing.T) {
	// 60 steps also with -short: 40 steps (the former short run) lower the
	// loss by only 0.15 of the gap (3.678 → 3.271, truth 1.011) and fail.
	steps := 60
	tr, src := newToyTrainer(t, Config{Steps: steps, Batch: 4, LR: 1e-2, Warmup: 5, Seed: 1, Workers: 2})
	defer tr.Close()
	val, err := FetchSet(toySource{prob: src.prob, seed: 99}, 12)
	if err != nil {
		t.Fatal(err)
	}
	before, err := tr.Validate(val)
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	after, err := tr.Run(RunOptions{Out: dir, Validation: val, ValidateEvery: steps / 2})
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("before: %s", before.Summary())
	t.Logf("after:  %s", after.Summary())
	// The objective must drop by at least a fifth of the gap between the
	// uncorrected value and the value at the truth.
	if gap := before.Loss - before.LossTruth; !(gap > 0) || after.Loss > before.Loss-0.2*gap {
		t.Errorf("validation loss %.4f → %.4f; truth %.4f", before.Loss, after.Loss, before.LossTruth)
	}
	if !(after.ErrFrac(2, 6) < before.ErrFrac(2, 6)) {
		t.Errorf("wavefront error fraction %.3f → %.3f did not fall", before.ErrFrac(2, 6), after.ErrFrac(2, 6))
	}
	for _, f := range []string{WeightsFile, LossPlot, HistoryFile, CheckpointWeights, CheckpointState} {
		if fi, err := os.Stat(filepath.Join(dir, f)); err != nil || fi.Size() == 0 {
			t.Errorf("run did not write %s: %v", f, err)
		}
	}
	m, err := net.Load(filepath.Join(dir, WeightsFile))
	if err != nil {
		t.Fatal(err)
	}
	if m.Meta.Training["steps"] == "" || m.Meta.Training["val_loss"] == "" {
		t.Errorf("weights lack the training record: %v", m.Meta.Training)
	}
}

// Killing a run and resuming from its checkpoint gives bit-identical weights
// and optimiser state to an uninterrupted run, also with another worker count.
func TestResumeIsExact(t *testing.T) {
	cfg := Config{Steps: 6, Batch: 3, LR: 2e-3, Warmup: 2, Seed: 7, Workers: 2, WarmStart: 2, ClipNorm: 10}
	full, _ := newToyTrainer(t, cfg)
	defer full.Close()
	for !full.Done() {
		if _, err := full.Step(); err != nil {
			t.Fatal(err)
		}
	}
	part, src := newToyTrainer(t, cfg)
	for i := 0; i < 3; i++ {
		if _, err := part.Step(); err != nil {
			t.Fatal(err)
		}
	}
	dir := t.TempDir()
	if err := part.SaveCheckpoint(dir, nil, nil, 1); err != nil {
		t.Fatal(err)
	}
	part.Close()
	res, err := Resume(dir, src, 2)
	if err != nil {
		t.Fatal(err)
	}
	defer res.Close()
	if res.Steps() != 3 {
		t.Fatalf("resumed at step %d, want 3", res.Steps())
	}
	for !res.Done() {
		if _, err := res.Step(); err != nil {
			t.Fatal(err)
		}
	}
	for i, p := range full.Model().Params {
		q := res.Model().Params[i]
		for k := range p.Data {
			if p.Data[k] != q.Data[k] || full.adam.M[i][k] != res.adam.M[i][k] || full.adam.V[i][k] != res.adam.V[i][k] {
				t.Fatalf("%s[%d]: uninterrupted %v, resumed %v", p.Name, k, p.Data[k], q.Data[k])
			}
		}
	}
}

// A checkpoint written before the setup held the instrument (channel-1
// diversity "DiversityPV" and the median "R0" instead of "Diversity" and
// "DOverR0") resumes with the same setup. Planted: Resume without
// upgradeSetup fails with "0 channels, want 1 to 8".
func TestResumeLegacyCheckpoint(t *testing.T) {
	tr, src := newToyTrainer(t, Config{Steps: 2, Batch: 2, Seed: 3, Workers: 1})
	dir := t.TempDir()
	if err := tr.SaveCheckpoint(dir, nil, nil, 1); err != nil {
		t.Fatal(err)
	}
	tr.Close()
	path := filepath.Join(dir, CheckpointState)
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	var st map[string]any
	if err := json.Unmarshal(data, &st); err != nil {
		t.Fatal(err)
	}
	su := st["Setup"].(map[string]any)
	for _, k := range []string{"Diversity", "DOverR0", "OuterScale"} {
		if _, ok := su[k]; !ok {
			t.Fatalf("checkpoint setup has no %s: %v", k, su)
		}
		delete(su, k)
	}
	su["DiversityPV"], su["R0"] = 1.0, 0.125
	if data, err = json.Marshal(st); err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, data, 0o644); err != nil {
		t.Fatal(err)
	}
	res, err := Resume(dir, src, 1)
	if err != nil {
		t.Fatal(err)
	}
	defer res.Close()
	if got, want := res.prob.setup, testSetup(); !reflect.DeepEqual(got, want) {
		t.Errorf("resumed setup %+v, want %+v", got, want)
	}
}

// The step size rises linearly over the warm-up, peaks at LR and decays by a
// half cosine to MinLR·LR at the last step.
func TestLRSchedule(t *testing.T) {
	c := Config{Steps: 110, Batch: 1, LR: 1e-3, Warmup: 10, MinLR: 0.1}
	if err := c.fill(); err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		step int
		want float64
	}{{0, 1e-4}, {9, 1e-3}, {10, 1e-3}, {59, 0.55e-3 + 0.45e-3*math.Cos(math.Pi*49/99)}, {109, 1e-4}} {
		if got := c.LRAt(tc.step); math.Abs(got-tc.want) > 1e-12 {
			t.Errorf("LRAt(%d) = %g, want %g", tc.step, got, tc.want)
		}
	}
}

// The whole chain — phase-diversity objective of model/pd, its gradient
// w.r.t. the coefficients, the output scale, and back-propagation through
// the network — gives the gradient of the batch loss w.r.t. the weights:
// checked against central differences of the loss itself.
func TestLossGradientMatchesFiniteDifferences(t *testing.T) {
	for _, supervised := range []bool{false, true} {
		ws := 0
		if supervised {
			ws = 1
		}
		tr, _ := newToyTrainer(t, Config{Steps: 1, Batch: 2, Seed: 3, Workers: 2, WarmStart: ws})
		// Move away from the near-zero start so every layer matters.
		for _, p := range tr.model.Params {
			for i := range p.Data {
				p.Data[i] *= 3
			}
		}
		_, grads, err := tr.lossGrad(0)
		if err != nil {
			t.Fatal(err)
		}
		g := make([][]float64, len(grads))
		for i := range grads {
			g[i] = append([]float64(nil), grads[i]...)
		}
		loss := func() float64 {
			st, _, err := tr.lossGrad(0)
			if err != nil {
				t.Fatal(err)
			}
			return st.Loss
		}
		const h = 1e-5
		checked := 0
		worst := 0.0
		for ti, p := range tr.model.Params {
			for i := 0; i < len(p.Data); i += 1 + len(p.Data)/3 {
				old := p.Data[i]
				p.Data[i] = old + h
				lp := loss()
				p.Data[i] = old - h
				lm := loss()
				p.Data[i] = old
				fd := (lp - lm) / (2 * h)
				worst = math.Max(worst, math.Abs(fd-g[ti][i])/(1e-8+math.Abs(fd)))
				if math.Abs(fd-g[ti][i]) > 1e-5*(1+math.Abs(fd)) {
					t.Errorf("supervised=%v %s[%d]: back-propagated %.8g, central difference %.8g", supervised, p.Name, i, g[ti][i], fd)
				}
				checked++
			}
		}
		if checked < 20 {
			t.Fatalf("only %d weights checked", checked)
		}
		t.Logf("supervised=%v: %d weights, worst relative difference %.2g", supervised, checked, worst)
		tr.Close()
	}
}

// Fine-tuning: a run started from saved weights (Config.Init) scores exactly
// as those weights do before its first step, continues to learn, and weights
// made for other optics are refused.
func TestInitContinuesFromWeights(t *testing.T) {
	first, src := newToyTrainer(t, Config{Steps: 40, Batch: 4, LR: 1e-2, Warmup: 5, Seed: 1, Workers: 2})
	defer first.Close()
	val, err := FetchSet(toySource{prob: src.prob, seed: 99}, 12)
	if err != nil {
		t.Fatal(err)
	}
	untrained, err := first.Validate(val)
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	if _, err := first.Run(RunOptions{Out: dir}); err != nil {
		t.Fatal(err)
	}
	trained, err := first.Validate(val)
	if err != nil {
		t.Fatal(err)
	}
	init, err := net.Load(filepath.Join(dir, WeightsFile))
	if err != nil {
		t.Fatal(err)
	}
	cfg := Config{Steps: 20, Batch: 4, LR: 3e-3, Warmup: 2, Seed: 4, Workers: 2, Init: init}
	second, err := New(testSetup(), cfg, toySource{prob: src.prob, seed: 5})
	if err != nil {
		t.Fatal(err)
	}
	defer second.Close()
	start, err := second.Validate(val)
	if err != nil {
		t.Fatal(err)
	}
	if start.Loss != trained.Loss {
		t.Fatalf("fine-tuning starts at loss %v, the saved weights score %v", start.Loss, trained.Loss)
	}
	if untrained.Loss == trained.Loss {
		t.Fatal("fresh weights score like the trained ones; the test cannot tell them apart")
	}
	end, err := second.Run(RunOptions{Out: t.TempDir(), Validation: val})
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("fresh %.4f, after 40 steps %.4f, after 20 more %.4f", untrained.Loss, trained.Loss, end.Loss)
	if !(end.Loss < untrained.Loss) {
		t.Errorf("fine-tuned loss %.4f not below fresh weights' %.4f", end.Loss, untrained.Loss)
	}

	other := testSetup()
	other.Telescope.Wavelength = 700e-9
	if _, err := New(other, Config{Steps: 1, Batch: 1, Init: init}, nil); err == nil || !strings.Contains(err.Error(), "wavelength") {
		t.Errorf("weights for 600 nm accepted for a 700 nm setup (err %v)", err)
	}
}

// The metric's noise-filter regulariser reaches the loss: the same batch
// scores differently under Gamma 1e-6 and 1e-2.
func TestGammaReachesLoss(t *testing.T) {
	var loss [2]float64
	for i, g := range []float64{1e-6, 1e-2} {
		tr, _ := newToyTrainer(t, Config{Steps: 1, Batch: 4, Seed: 2, Workers: 1, Gamma: g})
		val, err := FetchSet(toySource{prob: tr.prob, seed: 9}, 4)
		if err != nil {
			t.Fatal(err)
		}
		v, err := tr.Validate(val)
		tr.Close()
		if err != nil {
			t.Fatal(err)
		}
		loss[i] = v.Loss
	}
	if loss[0] == loss[1] || math.IsNaN(loss[0]) || math.IsNaN(loss[1]) {
		t.Errorf("loss %v under Gamma 1e-6 and %v under 1e-2", loss[0], loss[1])
	}
}

// truthReferee stands in for the classical fit: it "fits" a burst by
// returning its true coefficients and scores with the training metric, so
// that its ratios can be checked against Validation.Loss / LossTruth.
type truthReferee struct {
	t    *Trainer
	set  []*Sample
	w    *worker
	flat []float64
}

func (r *truthReferee) Fit(data [][][]float64) ([][]float64, error) {
	for _, s := range r.set {
		if &s.Data[0][0][0] != &data[0][0][0] {
			continue
		}
		if err := r.w.truthNative(r.t.prob, s.Noll); err != nil {
			return nil, err
		}
		nm := r.t.prob.setup.Modes
		out := make([][]float64, len(s.Noll))
		for j := range out {
			out[j] = append([]float64(nil), r.w.target[j*nm:(j+1)*nm]...)
		}
		return out, nil
	}
	return nil, fmt.Errorf("burst not in the set")
}

func (r *truthReferee) Objective(data [][][]float64, coeffs [][]float64) (float64, error) {
	r.flat = r.flat[:0]
	for _, c := range coeffs {
		r.flat = append(r.flat, c...)
	}
	if err := r.w.solver.SetData(data); err != nil {
		return 0, err
	}
	return r.w.solver.ValueGrad(nil, r.flat), nil
}

// The score against a referee is the per-burst objective ratio: on a single
// burst it equals the validation loss over the loss at the truth, and it
// falls as the network learns.
func TestRefereeScore(t *testing.T) {
	tr, src := newToyTrainer(t, Config{Steps: 40, Batch: 4, LR: 1e-2, Warmup: 5, Seed: 1, Workers: 2})
	defer tr.Close()
	set, err := FetchSet(toySource{prob: src.prob, seed: 99}, 6)
	if err != nil {
		t.Fatal(err)
	}
	one := set[:1]
	ref := &truthReferee{t: tr, set: set, w: &worker{solver: tr.prob.newSolver(), target: make([]float64, len(tr.work[0].target))}}
	rs, err := newRefereeSet(ref, one, 8)
	if err != nil {
		t.Fatal(err)
	}
	v, err := tr.Validate(one)
	if err != nil {
		t.Fatal(err)
	}
	if err := rs.score(tr, &v); err != nil {
		t.Fatal(err)
	}
	if want := v.Loss / v.LossTruth; v.FitBursts != 1 || math.Abs(v.FitRatioMedian-want) > 1e-12*want {
		t.Fatalf("ratio on one burst %v (%d bursts), want Loss/LossTruth = %v", v.FitRatioMedian, v.FitBursts, want)
	}
	after, err := tr.Run(RunOptions{Out: t.TempDir(), Validation: set, Referee: ref, RefereeBursts: 4, ValidateEvery: 40})
	if err != nil {
		t.Fatal(err)
	}
	if after.FitBursts != 4 {
		t.Fatalf("referee scored %d bursts, want 4", after.FitBursts)
	}
	t.Logf("after training: objective ×%.3f of the truth's (median), %.0f %% within ×1.5", after.FitRatioMedian, 100*after.FitWithin)
	untrained, _ := newToyTrainer(t, Config{Steps: 1, Batch: 4, Seed: 1, Workers: 2})
	defer untrained.Close()
	u, err := untrained.Validate(set)
	if err != nil {
		t.Fatal(err)
	}
	rs4, err := newRefereeSet(ref, set, 4)
	if err != nil {
		t.Fatal(err)
	}
	if err := rs4.score(untrained, &u); err != nil {
		t.Fatal(err)
	}
	t.Logf("untrained: objective ×%.3f of the truth's (median)", u.FitRatioMedian)
	if !(after.FitRatioMedian < u.FitRatioMedian) {
		t.Errorf("median objective ratio %.3f after training, %.3f before", after.FitRatioMedian, u.FitRatioMedian)
	}
}

// A job with --conv/--hidden/--head trains and saves that architecture.
func TestJobArchitecture(t *testing.T) {
	dir := t.TempDir()
	j := Job{Site: "../testdata/demo-site.yaml", Out: dir, Steps: 1, Batch: 1, Validation: -1,
		Conv: []int{4, 6, 8}, Hidden: 12, Head: 10, Modes: 10, Workers: 1}
	if _, err := j.Run(); err != nil {
		t.Fatal(err)
	}
	m, err := net.Load(filepath.Join(dir, WeightsFile))
	if err != nil {
		t.Fatal(err)
	}
	a := m.Arch
	if fmt.Sprint(a.Conv) != "[4 6 8]" || a.Hidden != 12 || a.Head != 10 || a.Modes != 10 {
		t.Errorf("saved architecture %+v", a)
	}
	j.Out, j.Conv = filepath.Join(dir, "bad"), []int{4, 0}
	if _, err := j.Run(); err == nil {
		t.Error("a convolution with 0 channels was accepted")
	}
	if _, err := os.Stat(j.Out); err == nil {
		t.Error("the refused job left its output folder behind")
	}
}

// TestCheckpointIsOneSet checks that the checkpoint's weights and state are
// replaced together: when the state cannot be renamed into place (here a
// folder stands where it goes), the weights of the previous checkpoint
// stay. Planted: saving the weights and the state as two separate atomic
// writes left step-2 weights beside no state and failed.
func TestCheckpointIsOneSet(t *testing.T) {
	tr, _ := newToyTrainer(t, Config{Steps: 4, Batch: 2, LR: 1e-2, Seed: 3, Workers: 1})
	defer tr.Close()
	dir := t.TempDir()
	if _, err := tr.Step(); err != nil {
		t.Fatal(err)
	}
	if err := tr.SaveCheckpoint(dir, nil, nil, 1); err != nil {
		t.Fatal(err)
	}
	before, _ := os.ReadFile(filepath.Join(dir, CheckpointWeights))
	if _, err := tr.Step(); err != nil {
		t.Fatal(err)
	}
	state := filepath.Join(dir, CheckpointState)
	if err := os.Remove(state); err != nil {
		t.Fatal(err)
	}
	if err := os.MkdirAll(filepath.Join(state, "x"), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := tr.SaveCheckpoint(dir, nil, nil, 2); err == nil {
		t.Fatal("checkpoint over a folder succeeded")
	}
	after, _ := os.ReadFile(filepath.Join(dir, CheckpointWeights))
	if len(before) == 0 || !bytes.Equal(before, after) {
		t.Error("the checkpoint weights were replaced although the state was not")
	}
	ents, _ := os.ReadDir(dir)
	if len(ents) != 2 {
		t.Errorf("%d entries left, want the weights and the folder", len(ents))
	}
}
