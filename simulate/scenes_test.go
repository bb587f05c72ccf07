package simulate

import (
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"gonum.org/v1/gonum/stat"
)

// shippedScenes loads the real images of testdata/scenes (five CC0 /
// public-domain photographs from scikit-image's data set, see its
// README), failing the test if they are missing.
func shippedScenes(t *testing.T) *ImageScene {
	t.Helper()
	dir, err := FindSceneDir()
	if err != nil {
		t.Fatal(err)
	}
	s, err := LoadSceneDir(dir)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

// orientAll returns the whole oriented image of window w.
func orientAll(w window) []float64 {
	W, H := w.dims()
	w.x0, w.y0 = 0, 0
	out := make([]float64, W*H)
	w.fill(out, W, H)
	return out
}

// TestWindowOrientations checks the eight orientations of a 3×2 image
// [a b c; d e f] against arrays written out by hand: a quarter turn is
// counter-clockwise as displayed with row 0 on top ([c f; b e; a d]), the
// flip mirrors left–right after the turn; all eight differ, and two
// quarter turns make a half turn.
func TestWindowOrientations(t *testing.T) {
	im := &SceneImage{Name: "t", Data: []float64{0, 1, 2, 3, 4, 5}, Nx: 3, Ny: 2}
	a, b, c, d, e, f := 0.0, 1.0, 2.0, 3.0, 4.0, 5.0
	want := map[[2]int][]float64{
		{0, 0}: {a, b, c, d, e, f},
		{1, 0}: {c, f, b, e, a, d},
		{2, 0}: {f, e, d, c, b, a},
		{3, 0}: {d, a, e, b, f, c},
		{0, 1}: {c, b, a, f, e, d},
		{1, 1}: {f, c, e, b, d, a},
	}
	seen := map[string]bool{}
	for rot := 0; rot < 4; rot++ {
		for fl := 0; fl < 2; fl++ {
			got := orientAll(window{im: im, rot: rot, flip: fl == 1})
			if w, ok := want[[2]int{rot, fl}]; ok && !slices.Equal(got, w) {
				t.Errorf("rot %d flip %d: %v, want %v", rot, fl, got, w)
			}
			s := slices.Clone(got)
			slices.Sort(s)
			if !slices.Equal(s, im.Data) {
				t.Errorf("rot %d flip %d: %v is not a permutation of the image", rot, fl, got)
			}
			seen[fmtFloats(got)] = true
		}
	}
	if len(seen) != 8 {
		t.Errorf("%d distinct orientations, want 8", len(seen))
	}
	once := orientAll(window{im: im, rot: 1})
	twice := orientAll(window{im: &SceneImage{Data: once, Nx: 2, Ny: 3}, rot: 1})
	if !slices.Equal(twice, orientAll(window{im: im, rot: 2})) {
		t.Errorf("two quarter turns %v, half turn %v", twice, orientAll(window{im: im, rot: 2}))
	}
}

// fmtFloats spells small non-negative integers as letters (0 = a).
func fmtFloats(v []float64) string {
	var b strings.Builder
	for _, x := range v {
		b.WriteString(" ")
		b.WriteString(string(rune('a' + int(x))))
	}
	return b.String()
}

// TestMirror checks the reflection about the edges (period 2n, edge pixel
// repeated) for negative and large indices.
func TestMirror(t *testing.T) {
	n := 4
	for i, want := range map[int]int{0: 0, 3: 3, 4: 3, 5: 2, 7: 0, 8: 0, 9: 1, -1: 0, -2: 1, -8: 0, 19: 3} {
		if got := mirror(i, n); got != want {
			t.Errorf("mirror(%d, %d) = %d, want %d", i, n, got, want)
		}
	}
}

// TestImageSceneWindows draws many windows from a synthetic image and
// checks that each is the block of the oriented image at its origin
// (inside it when the canvas fits, mirror-tiled when it does not), and
// that the drawn orientations and images are spread over all choices.
func TestImageSceneWindows(t *testing.T) {
	const nx, ny = 37, 23
	data := make([]float64, nx*ny)
	for i := range data {
		data[i] = float64(i)
	}
	s := &ImageScene{Images: []SceneImage{{Name: "a", Data: data, Nx: nx, Ny: ny}, {Name: "b", Data: data, Nx: nx, Ny: ny}}}
	rng := rand.New(rand.NewPCG(1, 2))
	orients := map[int]int{}
	images := map[string]int{}
	for _, c := range [][2]int{{16, 12}, {23, 23}, {50, 40}} {
		cw, ch := c[0], c[1]
		out := make([]float64, cw*ch)
		for k := 0; k < 200; k++ {
			w := s.drawWindow(rng, cw, ch)
			W, H := w.dims()
			if W >= cw && (w.x0 < 0 || w.x0+cw > W) || H >= ch && (w.y0 < 0 || w.y0+ch > H) {
				t.Fatalf("window %+v of %d×%d outside the %d×%d oriented image", w, cw, ch, W, H)
			}
			orients[4*btoi(w.flip)+w.rot]++
			images[w.im.Name]++
			w.fill(out, cw, ch)
			full := orientAll(w)
			for y := 0; y < ch; y++ {
				for x := 0; x < cw; x++ {
					if want := full[mirror(w.y0+y, H)*W+mirror(w.x0+x, W)]; out[y*cw+x] != want {
						t.Fatalf("canvas %d×%d, window %+v: pixel (%d, %d) = %g, want %g", cw, ch, w, x, y, out[y*cw+x], want)
					}
				}
			}
		}
	}
	// 600 draws: each of 8 orientations expected 75 times (σ ≈ 8.1), each
	// image 300 (σ ≈ 12).
	for o := 0; o < 8; o++ {
		if orients[o] < 40 || orients[o] > 110 {
			t.Errorf("orientation %d drawn %d times in 600, want about 75", o, orients[o])
		}
	}
	if images["a"] < 240 || images["a"] > 360 {
		t.Errorf("image a drawn %d times in 600, want about 300", images["a"])
	}
}

func btoi(b bool) int {
	if b {
		return 1
	}
	return 0
}

// TestImageSceneDraw draws windows of the shipped real scenes: positive,
// mean 1, rms contrast in the default range (clipping at 0.05 only lowers
// it), deterministic given the seed, described with the file name and
// orientation; a canvas larger than the images is mirror-tiled.
func TestImageSceneDraw(t *testing.T) {
	s := shippedScenes(t)
	if len(s.Images) != 5 {
		t.Fatalf("%d shipped scenes, want 5", len(s.Images))
	}
	names := map[string]bool{}
	for _, n := range []int{128, 700} {
		a := make([]float64, n*n)
		b := make([]float64, n*n)
		for seed := uint64(0); seed < 6; seed++ {
			na, err := s.Draw(a, n, n, 0.12, rand.New(rand.NewPCG(seed, 3)))
			if err != nil {
				t.Fatal(err)
			}
			nb, _ := s.Draw(b, n, n, 0.12, rand.New(rand.NewPCG(seed, 3)))
			if na != nb || !slices.Equal(a, b) {
				t.Fatalf("seed %d: two draws differ (%q, %q)", seed, na, nb)
			}
			if !strings.HasPrefix(na, "real:") || !strings.Contains(na, ".fits @") || !strings.Contains(na, " rot") {
				t.Errorf("description %q", na)
			}
			names[na] = true
			m, c := stat.Mean(a, nil), Contrast(a)
			if math.Abs(m-1) > 0.01 || slices.Min(a) < 0.05-1e-12 || c < 0.06-0.005 || c > 0.25+1e-9 {
				t.Errorf("%s: mean %.4f, min %.3f, contrast %.4f; want 1, ≥ 0.05, 0.06–0.25", na, m, slices.Min(a), c)
			}
		}
	}
	if len(names) < 10 {
		t.Errorf("only %d distinct descriptions in 12 draws", len(names))
	}
}

// constScene is a test scene that fills a constant and names itself.
type constScene string

func (c constScene) Draw(dst []float64, nx, ny int, _ float64, _ *rand.Rand) (string, error) {
	for i := range dst {
		dst[i] = 1
	}
	return string(c), nil
}

// TestMix checks the proportions of a weighted mix (binomial: 4000 draws
// at p = 0.25 have σ ≈ 0.0068; tolerance 4σ), its determinism, bad
// weights, and the default SceneMix (granulation or real, 0.5 each; 400
// draws, σ = 0.025, tolerance 0.1).
func TestMix(t *testing.T) {
	m := &Mix{Scenes: []Scene{constScene("a"), constScene("b"), constScene("never")}, Weights: []float64{1, 3, 0}}
	dst := make([]float64, 4)
	rng := rand.New(rand.NewPCG(5, 5))
	var seq []string
	count := map[string]int{}
	for i := 0; i < 4000; i++ {
		n, err := m.Draw(dst, 2, 2, 0.1, rng)
		if err != nil {
			t.Fatal(err)
		}
		count[n]++
		if i < 50 {
			seq = append(seq, n)
		}
	}
	if f := float64(count["a"]) / 4000; math.Abs(f-0.25) > 4*0.0068 || count["never"] > 0 {
		t.Errorf("mix drew a %.3f of the time (want 0.25), zero-weight scene %d times", f, count["never"])
	}
	rng = rand.New(rand.NewPCG(5, 5))
	for i, want := range seq {
		if n, _ := m.Draw(dst, 2, 2, 0.1, rng); n != want {
			t.Fatalf("draw %d: %s, first time %s", i, n, want)
		}
	}
	for _, w := range [][]float64{{0, 0, 0}, {1, -1, 0}, {1, math.NaN(), 0}, {1, 1}} {
		if _, err := (&Mix{Scenes: m.Scenes, Weights: w}).Draw(dst, 2, 2, 0.1, rng); err == nil {
			t.Errorf("weights %v: no error", w)
		}
	}
	def := SceneMix(GranulationParams{}, shippedScenes(t))
	const n = 16
	big := make([]float64, n*n)
	gran := 0
	for i := 0; i < 400; i++ {
		name, err := def.Draw(big, n, n, 0.12, rng)
		if err != nil {
			t.Fatal(err)
		}
		if name == "granulation" {
			gran++
		} else if !strings.HasPrefix(name, "real:") {
			t.Fatalf("default mix drew %q", name)
		}
	}
	if f := float64(gran) / 400; math.Abs(f-0.5) > 0.1 {
		t.Errorf("default mix: granulation %.3f of the time, want 0.5", f)
	}
}

// TestSceneSources runs the simulator with each kind of source: the
// description is recorded in Result.Scene, a real-image scene gets the same
// diffraction-limited contrast as granulation (r0 = 1 km, noiseless focused
// frame; 0.12 by default), and bad combinations fail.
func TestSceneSources(t *testing.T) {
	c := demoConfig()
	c.Frames = 1
	c.Camera.Photons = 0
	s := newSim(t, c)
	real := shippedScenes(t)
	for _, tc := range []struct {
		src    Scene
		prefix string
	}{{nil, "granulation"}, {GranulationScene{}, "granulation"}, {real, "real:"}, {SceneMix(GranulationParams{}, real), ""}} {
		r, err := s.Patch(rand.New(rand.NewPCG(2, 2)), Options{R0: 1000, Source: tc.src})
		if err != nil {
			t.Fatal(err)
		}
		if !strings.HasPrefix(r.Scene, tc.prefix) || r.Scene == "" {
			t.Errorf("source %T: Result.Scene %q, want prefix %q", tc.src, r.Scene, tc.prefix)
		}
		if got := Contrast(r.Burst.Data[0][0]); math.Abs(got-0.12) > 0.003 {
			t.Errorf("%s: diffraction-limited contrast %.4f, want 0.12", r.Scene, got)
		}
	}
	f, err := s.Field(rand.New(rand.NewPCG(3, 3)), 96, 96, Options{Source: real})
	if err != nil || !strings.HasPrefix(f.Scene, "real:") {
		t.Errorf("field over real scenes: %q, %v", f.Scene, err)
	}
	obj := make([]float64, 200*200)
	for i := range obj {
		obj[i] = 1 + float64(i%7)
	}
	r, err := s.Patch(rand.New(rand.NewPCG(2, 2)), Options{Object: obj, ObjectNx: 200, ObjectNy: 200})
	if err != nil || r.Scene != "object map" {
		t.Errorf("user map: Result.Scene %q, %v", r.Scene, err)
	}
	if _, err := s.Patch(rand.New(rand.NewPCG(2, 2)), Options{Object: obj, ObjectNx: 200, ObjectNy: 200, Source: real}); err == nil {
		t.Error("object map and source together: no error")
	}
	if _, err := s.Patch(rand.New(rand.NewPCG(2, 2)), Options{Source: &ImageScene{}}); err == nil {
		t.Error("image scene without images: no error")
	}
}

// TestSceneLoadErrors: folders without FITS files, unreadable files and a
// bad $PDWAVE_SCENES give errors that name the path.
func TestSceneLoadErrors(t *testing.T) {
	dir := t.TempDir()
	if _, err := LoadSceneDir(dir); err == nil || !strings.Contains(err.Error(), dir) {
		t.Errorf("empty folder: %v", err)
	}
	bad := filepath.Join(dir, "bad.fits")
	if err := os.WriteFile(bad, []byte("SIMPLE  = not really"), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := LoadSceneDir(dir); err == nil || !strings.Contains(err.Error(), "bad.fits") {
		t.Errorf("bad file: %v", err)
	}
	if _, err := LoadSceneDir(filepath.Join(dir, "missing")); err == nil {
		t.Error("missing folder: no error")
	}
	if _, err := NewImageScene(); err == nil {
		t.Error("no paths: no error")
	}
	if _, err := (&ImageScene{Images: shippedScenes(t).Images, Contrast: [2]float64{0.3, 0.1}}).Draw(make([]float64, 64), 8, 8, 0.1, rand.New(rand.NewPCG(1, 1))); err == nil {
		t.Error("inverted contrast range: no error")
	}
	t.Setenv(SceneDirEnv, bad)
	if _, err := FindSceneDir(); err == nil || !strings.Contains(err.Error(), SceneDirEnv) {
		t.Errorf("%s pointing at a file: %v", SceneDirEnv, err)
	}
	t.Setenv(SceneDirEnv, dir)
	if d, err := FindSceneDir(); err != nil || d != dir {
		t.Errorf("%s=%s: %q, %v", SceneDirEnv, dir, d, err)
	}
}
