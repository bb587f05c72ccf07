package restore

import (
	"context"
	"encoding/json"
	"errors"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"reflect"
	"sync/atomic"
	"testing"
)

// blobs evaluates a sum of Gaussian blobs at (x−dx, y−dy): an analytic,
// smooth test scene whose exact translation is known.
type blobs struct{ x, y, s, a []float64 }

func newBlobs(rng *rand.Rand, n int, w, h float64) blobs {
	var b blobs
	for i := 0; i < n; i++ {
		b.x = append(b.x, rng.Float64()*w)
		b.y = append(b.y, rng.Float64()*h)
		b.s = append(b.s, 2+4*rng.Float64())
		b.a = append(b.a, 0.5+rng.Float64())
	}
	return b
}

func (b blobs) image(nx, ny int, dx, dy float64) []float64 {
	im := make([]float64, nx*ny)
	for y := 0; y < ny; y++ {
		for x := 0; x < nx; x++ {
			v := 10.0
			for i := range b.x {
				ex, ey := float64(x)-dx-b.x[i], float64(y)-dy-b.y[i]
				v += b.a[i] * math.Exp(-(ex*ex+ey*ey)/(2*b.s[i]*b.s[i]))
			}
			im[y*nx+x] = v
		}
	}
	return im
}

func TestGridWeights(t *testing.T) {
	g, err := NewGrid(200, 170, 64, 16)
	if err != nil {
		t.Fatal(err)
	}
	if got := g.X0[len(g.X0)-1] + g.Patch; got != 200 {
		t.Fatalf("last patch ends at %d, want 200", got)
	}
	sum := make([]float64, g.Nx*g.Ny)
	w := make([]float64, g.Patch*g.Patch)
	for id := 0; id < g.Count(); id++ {
		g.Weight(w, id)
		x0, y0 := g.Origin(id)
		for y := 0; y < g.Patch; y++ {
			for x := 0; x < g.Patch; x++ {
				sum[(y0+y)*g.Nx+x0+x] += w[y*g.Patch+x]
			}
		}
	}
	for i, s := range sum {
		if !(s > 0) {
			t.Fatalf("pixel (%d,%d) gets no weight", i%g.Nx, i/g.Nx)
		}
	}
	// Between the first two columns of patches the overlap is the nominal
	// one, so the cos² ramps must sum to exactly one without normalisation.
	for y := 0; y < g.Y0[1]; y++ {
		for x := g.X0[1]; x < g.X0[0]+g.Patch; x++ {
			if s := sum[y*g.Nx+x]; math.Abs(s-1) > 1e-12 {
				t.Fatalf("weight sum at (%d,%d) = %v, want 1", x, y, s)
			}
		}
	}
	// A mosaic of exact tiles reproduces the field.
	field := make([]float64, g.Nx*g.Ny)
	rng := rand.New(rand.NewPCG(1, 2))
	for i := range field {
		field[i] = rng.Float64()
	}
	m := NewMosaic(g)
	tile := make([]float64, g.Patch*g.Patch)
	for id := 0; id < g.Count(); id++ {
		x0, y0 := g.Origin(id)
		for y := 0; y < g.Patch; y++ {
			copy(tile[y*g.Patch:(y+1)*g.Patch], field[(y0+y)*g.Nx+x0:])
		}
		m.Add(id, tile)
	}
	for i, v := range m.Image(nil) {
		if math.Abs(v-field[i]) > 1e-12 {
			t.Fatalf("mosaic of exact tiles differs at %d: %v vs %v", i, v, field[i])
		}
	}
	if _, err := NewGrid(50, 100, 64, 16); err == nil {
		t.Error("field smaller than a patch accepted")
	}
	if _, err := NewGrid(100, 100, 64, 40); err == nil {
		t.Error("overlap above half the patch accepted")
	}
}

func TestShardParsing(t *testing.T) {
	sh, err := ParseShard("2/5")
	if err != nil || sh != (Shard{2, 5}) {
		t.Fatalf("ParseShard(2/5) = %v, %v", sh, err)
	}
	for _, bad := range []string{"5/5", "-1/3", "x", "1/0", "1/3/4", "1/3x"} {
		if _, err := ParseShard(bad); err == nil {
			t.Errorf("ParseShard(%q) accepted", bad)
		}
	}
	env := map[string]string{"SLURM_ARRAY_TASK_ID": "7", "SLURM_ARRAY_TASK_COUNT": "4", "SLURM_ARRAY_TASK_MIN": "5"}
	sh, ok, err := ShardFromEnv(func(k string) string { return env[k] })
	if err != nil || !ok || sh != (Shard{2, 4}) {
		t.Fatalf("ShardFromEnv = %v %v %v, want 2/4", sh, ok, err)
	}
	env["SLURM_ARRAY_TASK_ID"] = "9"
	if _, _, err := ShardFromEnv(func(k string) string { return env[k] }); err == nil {
		t.Error("task id beyond the array accepted")
	}
	if _, ok, _ := ShardFromEnv(func(string) string { return "" }); ok {
		t.Error("shard found in an empty environment")
	}
	// The ranges of all shards tile the patches.
	at := 0
	for i := 0; i < 7; i++ {
		lo, hi := Shard{i, 7}.Range(23)
		if lo != at {
			t.Fatalf("shard %d starts at %d, want %d", i, lo, at)
		}
		at = hi
	}
	if at != 23 {
		t.Fatalf("shards end at %d, want 23", at)
	}
}

func TestMeasureShiftAndShifter(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	nx, ny := 192, 160
	b := newBlobs(rng, 150, float64(nx), float64(ny))
	ref := b.image(nx, ny, 0, 0)
	for _, d := range [][2]float64{{1.3, -0.7}, {-2.45, 0.2}, {0, 0}} {
		img := b.image(nx, ny, d[0], d[1])
		dx, dy, err := MeasureShift(ref, img, nx, ny)
		if err != nil {
			t.Fatal(err)
		}
		t.Logf("MeasureShift = (%.4f, %.4f), want (%.2f, %.2f)", dx, dy, d[0], d[1])
		// Edge effects of a non-periodic scene bias the estimate slightly;
		// 0.03 px is well below what matters for the fit (common practice).
		if math.Abs(dx-d[0]) > 0.03 || math.Abs(dy-d[1]) > 0.03 {
			t.Errorf("MeasureShift = (%.4f, %.4f), want (%.2f, %.2f)", dx, dy, d[0], d[1])
		}
		// Shifting back aligns the image with the reference away from the
		// edges.
		s := NewShifter(nx, ny)
		back := make([]float64, nx*ny)
		s.Shift(back, img, -d[0], -d[1])
		var worst float64
		for y := 8; y < ny-8; y++ {
			for x := 8; x < nx-8; x++ {
				worst = math.Max(worst, math.Abs(back[y*nx+x]-ref[y*nx+x]))
			}
		}
		if worst > 2e-3 {
			t.Errorf("shift (%.2f, %.2f): largest interior error after Shifter %.2g (blob amplitude ~1)", d[0], d[1], worst)
		}
	}
}

func TestCalibration(t *testing.T) {
	nx, ny := 16, 12
	rng := rand.New(rand.NewPCG(5, 6))
	obj, dark, flat := make([]float64, nx*ny), make([]float64, nx*ny), make([]float64, nx*ny)
	for i := range obj {
		obj[i] = 100 + 10*rng.Float64()
		dark[i] = 5 + rng.Float64()
		flat[i] = 2 * (0.8 + 0.4*rng.Float64()) // arbitrary overall scale
	}
	var mean float64
	for _, v := range flat {
		mean += v
	}
	mean /= float64(len(flat))
	frame := make([]float64, nx*ny)
	for i := range frame {
		frame[i] = obj[i]*flat[i]/mean + dark[i]
	}
	c, err := NewCalibration(nx, ny, dark, flat)
	if err != nil {
		t.Fatal(err)
	}
	c.Apply(frame)
	for i := range frame {
		if math.Abs(frame[i]-obj[i]) > 1e-9 {
			t.Fatalf("pixel %d: calibrated %v, want %v", i, frame[i], obj[i])
		}
	}
	if _, err := NewCalibration(nx, ny, dark[:10], nil); err == nil {
		t.Error("dark of the wrong size accepted")
	}
	if _, err := NewCalibration(nx, ny, nil, make([]float64, nx*ny)); err == nil {
		t.Error("zero flat accepted")
	}
}

// fakeEngine is a deterministic stand-in for the wavefront machinery: it
// sharpens the burst-mean focused patch and derives "coefficients" from the
// data, so shards, merges and journals can be checked without the fit.
type fakeEngine struct {
	calls *atomic.Int64
	hook  func(id int)
}

func (e fakeEngine) Restore(r *PatchResult, data [][][]float64) error {
	if e.calls != nil {
		e.calls.Add(1)
	}
	if e.hook != nil {
		e.hook(r.ID)
	}
	n := int(math.Sqrt(float64(len(r.Tile))))
	mean := make([]float64, n*n)
	for _, fr := range data[0] {
		for i, v := range fr {
			mean[i] += v / float64(len(data[0]))
		}
	}
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			s := 0.0
			for _, d := range [][2]int{{1, 0}, {-1, 0}, {0, 1}, {0, -1}} {
				xx, yy := min(max(x+d[0], 0), n-1), min(max(y+d[1], 0), n-1)
				s += mean[yy*n+xx]
			}
			r.Tile[y*n+x] = 2*mean[y*n+x] - s/4
		}
	}
	frames := len(data[0])
	r.Coeffs = make([]float64, frames*2)
	for j := 0; j < frames; j++ {
		r.Coeffs[2*j] = data[1][j][0] / 1e3
		r.Coeffs[2*j+1] = data[0][j][n*n-1] / 1e3
	}
	r.Noll = append([]float64(nil), r.Coeffs...)
	r.Metric = mean[n*n/2]
	r.MetricRatio, r.CoeffRMS = 1, 0.5
	return nil
}

func fakeField(t testing.TB, nx, ny, frames int) *Field {
	rng := rand.New(rand.NewPCG(7, 8))
	b := newBlobs(rng, nx*ny/200, float64(nx), float64(ny))
	var data [2][][]float64
	for c := 0; c < 2; c++ {
		for j := 0; j < frames; j++ {
			im := b.image(nx, ny, rng.Float64(), rng.Float64())
			for i := range im {
				im[i] += 0.05 * rng.NormFloat64()
			}
			data[c] = append(data[c], im)
		}
	}
	f, err := NewField(nx, ny, data)
	if err != nil {
		t.Fatal(err)
	}
	return f
}

func fakeMeta(f *Field, patch, overlap int) *Meta {
	return &Meta{Key: "fake", Nx: f.Nx, Ny: f.Ny, Frames: f.Frames, Patch: patch, Overlap: overlap,
		Basis: "kl", Modes: 2, Estimator: "fake", Mean: f.Mean, Settings: map[string]string{"patch": "64"}}
}

func runFull(t *testing.T, f *Field, opt Options) *Product {
	t.Helper()
	g, err := NewGrid(f.Nx, f.Ny, opt.Patch, opt.Overlap)
	if err != nil {
		t.Fatal(err)
	}
	c := NewCollector(g)
	if _, err := Run(context.Background(), f, opt, c.Add); err != nil {
		t.Fatal(err)
	}
	return c.Product(fakeMeta(f, opt.Patch, opt.Overlap))
}

func sameProducts(t *testing.T, what string, a, b *Product) {
	t.Helper()
	if len(a.Image) != len(b.Image) {
		t.Fatalf("%s: image sizes differ", what)
	}
	for i := range a.Image {
		if math.Float64bits(a.Image[i]) != math.Float64bits(b.Image[i]) {
			t.Fatalf("%s: pixel %d differs: %v vs %v", what, i, a.Image[i], b.Image[i])
		}
	}
	if len(a.Patches) != len(b.Patches) {
		t.Fatalf("%s: %d vs %d patches", what, len(a.Patches), len(b.Patches))
	}
	for i := range a.Patches {
		p, q := a.Patches[i], b.Patches[i]
		if p.ID != q.ID || p.X0 != q.X0 || p.Y0 != q.Y0 || p.Flags != q.Flags || math.Float64bits(p.Metric) != math.Float64bits(q.Metric) || math.Float64bits(p.Contrast) != math.Float64bits(q.Contrast) {
			t.Fatalf("%s: patch %d differs: %+v vs %+v", what, i, p, q)
		}
		for k := range p.Coeffs {
			if math.Float64bits(p.Coeffs[k]) != math.Float64bits(q.Coeffs[k]) {
				t.Fatalf("%s: patch %d coefficient %d differs", what, i, k)
			}
		}
	}
}

func TestShardMergeEqualsSingleRun(t *testing.T) {
	f := fakeField(t, 200, 150, 3)
	opt := Options{Patch: 48, Overlap: 12, Workers: 3, NewEngine: func() (Engine, error) { return fakeEngine{}, nil }}
	single := runFull(t, f, opt)
	opt.Workers = 1
	serial := runFull(t, f, opt)
	sameProducts(t, "3 workers vs 1", single, serial)

	dir := t.TempDir()
	g, _ := NewGrid(f.Nx, f.Ny, opt.Patch, opt.Overlap)
	var parts []string
	const n = 4
	for _, i := range []int{2, 0, 3, 1} { // any order
		sh := Shard{i, n}
		lo, hi := sh.Range(g.Count())
		path := filepath.Join(dir, "part"+sh.String()[:1]+".part")
		w, err := CreatePart(path, fakeMeta(f, opt.Patch, opt.Overlap), sh, lo, hi)
		if err != nil {
			t.Fatal(err)
		}
		o := opt
		o.Shard = sh
		o.Workers = 2
		if _, err := Run(context.Background(), f, o, w.Write); err != nil {
			t.Fatal(err)
		}
		if err := w.Close(); err != nil {
			t.Fatal(err)
		}
		parts = append(parts, path)
	}
	var c *Collector
	meta, total, err := Merge(parts, func(_ *Meta, gm *Grid) (Sink, error) {
		c = NewCollector(gm)
		return c.Add, nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if total != g.Count() {
		t.Fatalf("merge saw %d patches, want %d", total, g.Count())
	}
	sameProducts(t, "merge vs single run", single, c.Product(meta))

	// A missing part is an error, not a silent hole.
	if _, _, err := Merge(parts[:3], func(*Meta, *Grid) (Sink, error) { return func(*PatchResult) error { return nil }, nil }); err == nil {
		t.Error("merge with a missing shard succeeded")
	}

	// The merged product writes the same files as the single run.
	outA, outB := filepath.Join(dir, "a.fits"), filepath.Join(dir, "b.fits")
	if err := single.Write(outA, "test"); err != nil {
		t.Fatal(err)
	}
	if err := c.Product(meta).Write(outB, "test"); err != nil {
		t.Fatal(err)
	}
	for _, suffix := range []string{"_patches.csv", "_preview.png"} {
		a, _ := os.ReadFile(SidecarBase(outA) + suffix)
		b, _ := os.ReadFile(SidecarBase(outB) + suffix)
		if len(a) == 0 || string(a) != string(b) {
			t.Errorf("%s differs between single run and merge", suffix)
		}
	}
	// The summaries differ only by the shards' commands the merge records.
	var sa, sb Summary
	for _, s := range []struct {
		suffix string
		dst    *Summary
	}{{outA, &sa}, {outB, &sb}} {
		b, _ := os.ReadFile(SidecarBase(s.suffix) + "_summary.json")
		if err := json.Unmarshal(b, s.dst); err != nil {
			t.Fatal(err)
		}
	}
	for i := range n {
		k := "command shard " + Shard{i, n}.String()
		if _, ok := sb.Settings[k]; !ok {
			t.Errorf("merged summary lacks %q", k)
		}
		delete(sb.Settings, k)
	}
	if !reflect.DeepEqual(sa, sb) {
		t.Errorf("summaries differ:\n%+v\n%+v", sa, sb)
	}
}

func TestResumeEqualsUninterruptedRun(t *testing.T) {
	f := fakeField(t, 180, 180, 2)
	mk := func() (Engine, error) { return fakeEngine{}, nil }
	opt := Options{Patch: 40, Overlap: 10, Workers: 2, NewEngine: mk}
	full := runFull(t, f, opt)

	dir := t.TempDir()
	journal := filepath.Join(dir, "out.journal")
	g, _ := NewGrid(f.Nx, f.Ny, opt.Patch, opt.Overlap)
	// First attempt: killed when patch 20 starts.
	ctx, cancel := context.WithCancel(context.Background())
	o := opt
	o.Journal, o.Key, o.BatchSize = journal, "k1", 4
	o.NewEngine = func() (Engine, error) {
		return fakeEngine{hook: func(id int) {
			if id == 20 {
				cancel()
			}
		}}, nil
	}
	_, err := Run(ctx, f, o, func(*PatchResult) error { return nil })
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("interrupted run returned %v, want cancellation", err)
	}
	// Resume: recorded patches are replayed, not recomputed.
	var calls atomic.Int64
	o.Resume = true
	o.NewEngine = func() (Engine, error) { return fakeEngine{calls: &calls}, nil }
	c := NewCollector(g)
	if _, err := Run(context.Background(), f, o, c.Add); err != nil {
		t.Fatal(err)
	}
	// Patches 0..19 had started before the kill; patches already handed to
	// a worker (Run keeps at most 4 per worker in flight) may have finished
	// and been journalled too. Everything else is recomputed.
	redone := int(calls.Load())
	if held := 20 + 4*opt.Workers; redone >= g.Count() || redone < g.Count()-held {
		t.Errorf("resume computed %d of %d patches; the journal held up to %d", redone, g.Count(), held)
	}
	t.Logf("resume recomputed %d of %d patches", redone, g.Count())
	sameProducts(t, "resumed vs uninterrupted", full, c.Product(fakeMeta(f, opt.Patch, opt.Overlap)))

	// A journal written under other settings is refused.
	o.Key = "k2"
	if _, err := Run(context.Background(), f, o, func(*PatchResult) error { return nil }); err == nil {
		t.Error("resume accepted a journal with another key")
	}
}
