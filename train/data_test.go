package train

import (
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat"

	"pdwave/model/net"
	"pdwave/model/site"
	"pdwave/simulate"
)

// demoSim returns the demo site and a simulator for it with small bursts
// (patch, frames, modes) to keep tests fast.
func demoSim(t *testing.T, patch, frames, modes int) (*site.Site, *simulate.Simulator, Setup) {
	t.Helper()
	st, err := site.Load("../testdata/demo-site.yaml")
	if err != nil {
		t.Fatal(err)
	}
	st.Sizes.Patch, st.Sizes.Frames = patch, frames
	su, sc, err := FromSite(st, modes, "")
	if err != nil {
		t.Fatal(err)
	}
	sim, err := simulate.New(sc)
	if err != nil {
		t.Fatal(err)
	}
	return st, sim, su
}

// The per-burst draws follow the documented laws: contrast uniform in its
// range, photon factor log-uniform (ln factor uniform: mean at the centre,
// standard deviation width/√12, common practice), and ln r0 normal about
// ln of the site's median with 1.25 × the site's standard deviation
// ln(1.3) (the demo site's r0_spread).
func TestBurstDraws(t *testing.T) {
	st, sim, su := demoSim(t, 32, 2, 5)
	src, err := NewSimSource(sim, su, 1, nil)
	if err != nil {
		t.Fatal(err)
	}
	src.Contrast, src.Photons = DefaultContrast, DefaultPhotons
	rng := rand.New(rand.NewPCG(3, 4))
	const n = 20000
	cs, lp := make([]float64, n), make([]float64, n)
	for i := range cs {
		c, p := src.levels(rng)
		if c < 0.08 || c > 0.16 || p < 5000 || p > 20000 {
			t.Fatalf("draw %d: contrast %g, photons %g outside 0.08–0.16, 5000–20000", i, c, p)
		}
		cs[i], lp[i] = c, math.Log(p/10000)
	}
	check := func(what string, got, want, tol float64) {
		t.Helper()
		if math.Abs(got-want) > tol {
			t.Errorf("%s = %.4f, want %.4f ± %.4f", what, got, want, tol)
		}
	}
	check("mean contrast", stat.Mean(cs, nil), 0.12, 0.001)
	check("sd contrast", stat.StdDev(cs, nil), 0.08/math.Sqrt(12), 0.0005)
	check("mean ln photon factor", stat.Mean(lp, nil), 0, 0.01)
	check("sd ln photon factor", stat.StdDev(lp, nil), math.Log(4)/math.Sqrt(12), 0.008)
	for _, margin := range []float64{1, 1.25} {
		draw := SimData{R0Margin: margin}.r0Draw(st)
		lr := make([]float64, n)
		for i := range lr {
			lr[i] = math.Log(draw(rng))
		}
		want := margin * math.Log(1.3)
		check("median ln r0", stat.Mean(lr, nil), math.Log(st.R0Median()), 0.01)
		check(fmt.Sprintf("sd ln r0 (margin %g)", margin), stat.StdDev(lr, nil), want, 0.02*want)
	}
}

// expose records the same camera as the simulator's own: at the camera's
// level, the noise of both about the noiseless image has variance
// photons + read noise² per pixel (Poisson: variance = mean; gain 1 for
// 10 000 e⁻ at 16 bit), and at 4× the level it has 4× the photon part.
func TestExposeMatchesCamera(t *testing.T) {
	_, noisy, _ := demoSim(t, 32, 8, 5)
	c := noisy.Config()
	cam := c.Camera
	c.Camera.Photons = 0
	quiet, err := simulate.New(c)
	if err != nil {
		t.Fatal(err)
	}
	seed := func() *rand.Rand { return rand.New(rand.NewPCG(11, 12)) }
	ref, err := noisy.Patch(seed(), simulate.Options{})
	if err != nil {
		t.Fatal(err)
	}
	for _, level := range []float64{1, 4} {
		q, err := quiet.Patch(seed(), simulate.Options{})
		if err != nil {
			t.Fatal(err)
		}
		b := q.Burst
		scale := level * cam.Photons / stat.Mean(b.Object, nil)
		clean := [2][][]float64{}
		for ch := 0; ch < 2; ch++ {
			for _, im := range b.Data[ch] {
				e := make([]float64, len(im))
				for k, v := range im {
					e[k] = v * scale
				}
				clean[ch] = append(clean[ch], e)
			}
		}
		if err := expose(b, cam, level*cam.Photons, rand.New(rand.NewPCG(5, 6))); err != nil {
			t.Fatal(err)
		}
		got, mean := noiseVar(b.Data, clean)
		want := mean + cam.ReadNoise*cam.ReadNoise
		t.Logf("×%g: mean %.0f e-, noise variance %.0f, want %.0f", level, mean, got, want)
		if math.Abs(got/want-1) > 0.05 {
			t.Errorf("×%g: exposed noise variance %.0f e-², want photons + read noise² = %.0f", level, got, want)
		}
		if level == 1 {
			sg, sm := noiseVar(ref.Burst.Data, clean)
			if math.Abs(sg/got-1) > 0.05 || math.Abs(sm/mean-1) > 1e-3 {
				t.Errorf("simulator's camera: mean %.1f, variance %.0f; expose: mean %.1f, variance %.0f", sm, sg, mean, got)
			}
		}
	}
}

// noiseVar returns the variance of data − clean and the mean of data over
// all pixels, frames and channels.
func noiseVar(data, clean [2][][]float64) (variance, mean float64) {
	var d, v []float64
	for ch := 0; ch < 2; ch++ {
		for f, im := range data[ch] {
			for k, x := range im {
				d = append(d, x-clean[ch][f][k])
				v = append(v, x)
			}
		}
	}
	return stat.Variance(d, nil), stat.Mean(v, nil)
}

// A source over the scene mix draws both granulation and windows of the
// real images (under flips and rotations), each burst with its own photon
// level inside the range, and gives the same burst for the same index.
func TestSimSourceSceneMix(t *testing.T) {
	_, sim, su := demoSim(t, 32, 2, 5)
	sc, ids, err := SimData{Scenes: ScenesMix}.scene("")
	if err != nil {
		t.Fatal(err)
	}
	if len(ids) != 5 || !strings.HasPrefix(ids[0], "brick.fits sha256:") {
		t.Fatalf("scene images %v, want the five of testdata/scenes", ids)
	}
	src, err := NewSimSource(sim, su, 9, nil)
	if err != nil {
		t.Fatal(err)
	}
	src.Scene, src.Photons, src.Contrast = sc, DefaultPhotons, DefaultContrast
	groups := map[string]int{}
	photons := map[float64]bool{}
	for i := uint64(0); i < 10; i++ {
		s, err := src.Get(i)
		if err != nil {
			t.Fatal(err)
		}
		groups[SceneGroup(s.Scene)]++
		photons[s.Photons] = true
		if s.Photons < 5000 || s.Photons > 20000 || !(s.R0 > 0) || s.Contrast < 0.08 || s.Contrast > 0.16 {
			t.Errorf("burst %d: photons %g, r0 %g, contrast %g", i, s.Photons, s.R0, s.Contrast)
		}
		if i < 2 {
			again, err := src.Get(i)
			if err != nil {
				t.Fatal(err)
			}
			if again.Scene != s.Scene || again.Data[1][1][100] != s.Data[1][1][100] || again.Noll[0][2] != s.Noll[0][2] {
				t.Errorf("burst %d differs when drawn again", i)
			}
		}
		t.Logf("burst %d: %s, %.0f e-/px, r0 %.3f m", i, s.Scene, s.Photons, s.R0)
	}
	if groups["granulation"] == 0 || groups["real"] == 0 || len(groups) != 2 || len(photons) != 10 {
		t.Errorf("scene groups %v, %d photon levels in 10 bursts", groups, len(photons))
	}
}

// A job refuses an unknown scene choice, and mixed or real scenes without
// the scene folder, saying what is missing and how to do without.
func TestJobSceneErrors(t *testing.T) {
	base := Job{Site: "../testdata/demo-site.yaml", Out: filepath.Join(t.TempDir(), "run"), Steps: 1, Batch: 1, Validation: -1, Modes: 5, Workers: 1}
	j := base
	j.Scenes = "cartoon"
	if _, err := j.Run(); err == nil || !strings.Contains(err.Error(), `scenes "cartoon"`) {
		t.Errorf("unknown scene choice: %v", err)
	}
	for _, sc := range []string{"", ScenesReal} {
		j = base
		j.Scenes, j.SceneDir = sc, filepath.Join(t.TempDir(), "none")
		if _, err := j.Run(); err == nil || !strings.Contains(err.Error(), "none") {
			t.Errorf("scenes %q from a missing folder: %v", sc, err)
		}
	}
	t.Setenv(simulate.SceneDirEnv, filepath.Join(t.TempDir(), "nowhere"))
	j = base
	_, err := j.Run()
	if err == nil || !strings.Contains(err.Error(), "granulation only") {
		t.Errorf("default (mixed) scenes without a scene folder: %v", err)
	}
	if _, err := os.Stat(base.Out); err == nil {
		t.Error("a refused job left its output folder behind")
	}
}

// A job on the default data (scene mix, widened r0, photon and contrast
// ranges) records them in the weights and lists its validation bursts'
// scenes; stopped after one step and resumed, it ends with the same
// weights as an uninterrupted run, even when the resumed job asks for
// other scenes (the checkpoint's data settings rule).
func TestJobSceneMixResumes(t *testing.T) {
	dir := t.TempDir()
	base := Job{Site: "../testdata/demo-site.yaml", Steps: 2, Batch: 2, Modes: 10, Workers: 2, Seed: 3, Validation: -1}
	full := base
	full.Out, full.Validation = filepath.Join(dir, "full"), 2
	if _, err := full.Run(); err != nil {
		t.Fatal(err)
	}
	part := base
	part.Out, part.MaxWall = filepath.Join(dir, "part"), 1 // stops after the first step
	if _, err := part.Run(); err != nil {
		t.Fatal(err)
	}
	part.MaxWall, part.Resume, part.Scenes, part.Photons = 0, true, ScenesGranulation, [2]float64{1, 1}
	if _, err := part.Run(); err != nil {
		t.Fatal(err)
	}
	a, err := net.Load(filepath.Join(full.Out, WeightsFile))
	if err != nil {
		t.Fatal(err)
	}
	b, err := net.Load(filepath.Join(part.Out, WeightsFile))
	if err != nil {
		t.Fatal(err)
	}
	if b.Meta.Training["steps"] != "2" {
		t.Fatalf("resumed run ended at step %s", b.Meta.Training["steps"])
	}
	for i, p := range a.Params {
		for k, v := range p.Data {
			if b.Params[i].Data[k] != v {
				t.Fatalf("%s[%d]: uninterrupted %v, resumed %v", p.Name, k, v, b.Params[i].Data[k])
			}
		}
	}
	tr := a.Meta.Training
	if tr["val_bursts_real"] == "" && tr["val_bursts_granulation"] == "" {
		t.Errorf("training record has no validation per scene group: %v", tr)
	}
	for k, want := range map[string]string{"scenes": "mix: granulation 0.5, real 0.5: windows of brick.fits sha256:",
		"r0_draw": "× ln(1.3)", "photons": "×0.5–×2 of 10000", "contrast": "0.08–0.16", "validation": "validation.csv"} {
		if !strings.Contains(tr[k], want) {
			t.Errorf("training record %s = %q, want it to contain %q", k, tr[k], want)
		}
	}
	list, err := os.ReadFile(filepath.Join(full.Out, ValidationFile))
	if err != nil {
		t.Fatal(err)
	}
	if lines := strings.Split(strings.TrimSpace(string(list)), "\n"); len(lines) != 3 || !strings.Contains(lines[1], ",\"") {
		t.Errorf("validation list:\n%s", list)
	}
	t.Logf("training record: scenes %q; r0 %q; photons %q; validation:\n%s", tr["scenes"], tr["r0_draw"], tr["photons"], list)
}

// Validation sums the errors per scene group: the groups' sums add up to
// the total, and each group's error fraction is its own.
func TestValidationByScene(t *testing.T) {
	tr, src := newToyTrainer(t, Config{Steps: 1, Batch: 2, Seed: 1, Workers: 2})
	defer tr.Close()
	set, err := FetchSet(toySource{prob: src.prob, seed: 5}, 6)
	if err != nil {
		t.Fatal(err)
	}
	for i, s := range set {
		s.Scene = []string{"granulation", "real:brick.fits @1,2 rot90", "real:grass.fits @3,4 rot0"}[i%3]
	}
	v, err := tr.Validate(set)
	if err != nil {
		t.Fatal(err)
	}
	g, r := v.ByScene["granulation"], v.ByScene["real"]
	if len(v.ByScene) != 2 || g.Bursts != 2 || r.Bursts != 4 {
		t.Fatalf("groups %v", v.ByScene)
	}
	for k := range v.SqErr {
		if e, tt := g.SqErr[k]+r.SqErr[k], g.SqTrue[k]+r.SqTrue[k]; math.Abs(e-v.SqErr[k]) > 1e-12*v.SqErr[k] || math.Abs(tt-v.SqTrue[k]) > 1e-12*v.SqTrue[k] {
			t.Fatalf("mode %d: groups sum to %g/%g, total %g/%g", k, e, tt, v.SqErr[k], v.SqTrue[k])
		}
	}
	if g.ErrFrac(2, 6) == r.ErrFrac(2, 6) {
		t.Errorf("both groups score %g", g.ErrFrac(2, 6))
	}
	if s := v.Summary(); !strings.Contains(s, "granulation (2 bursts)") || !strings.Contains(s, "real (4 bursts)") {
		t.Errorf("summary %q lacks the scene groups", s)
	}
}
