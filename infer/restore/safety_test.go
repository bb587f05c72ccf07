package restore

import (
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strconv"
	"strings"
	"testing"

	"pdwave/model/fits"
)

// TestProductAppearsTogether checks the FITS product and its sidecars are
// one set: when one sidecar cannot be put in place (a folder stands where
// the CSV goes), neither the FITS file nor the other sidecars appear, and
// no temporary is left. Planted: writing the four files one after the
// other left restored_preview.png behind and failed.
func TestProductAppearsTogether(t *testing.T) {
	f := fakeField(t, 96, 96, 2)
	opt := Options{Patch: 48, Overlap: 12, Workers: 1, NewEngine: func() (Engine, error) { return fakeEngine{}, nil }}
	p := runFull(t, f, opt)
	dir := t.TempDir()
	out := filepath.Join(dir, "restored.fits")
	if err := os.MkdirAll(filepath.Join(dir, "restored_patches.csv", "x"), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := p.Write(out, "test"); err == nil {
		t.Fatal("write over a folder succeeded")
	}
	ents, _ := os.ReadDir(dir)
	if len(ents) != 1 {
		var n []string
		for _, e := range ents {
			n = append(n, e.Name())
		}
		t.Errorf("left %v, want only the folder in the way", n)
	}
	os.RemoveAll(filepath.Join(dir, "restored_patches.csv"))
	if err := p.Write(out, "test"); err != nil {
		t.Fatal(err)
	}
	for _, q := range ProductPaths(out) {
		if _, err := os.Stat(q); err != nil {
			t.Errorf("%s missing: %v", q, err)
		}
	}
}

// TestDiffKeys checks what a key comparison reports: nothing when only the
// file names differ (moved inputs), and the item that differs otherwise.
// Planted: comparing the names as well refused the moved inputs and failed.
func TestDiffKeys(t *testing.T) {
	base := Identity{
		Files:    []FileID{{"burst", "a.fits", "sha256:" + strings.Repeat("1", 64)}, {"site", "s.yaml", "sha256:" + strings.Repeat("2", 64)}},
		Weights:  "sha256:" + strings.Repeat("3", 64),
		Settings: map[string]string{"patch": "64", "polish": "3"},
	}
	moved := base
	moved.Files = []FileID{{"burst", "/elsewhere/a.fits", base.Files[0].Hash}, {"site", "t.yaml", base.Files[1].Hash}}
	if d := DiffKeys(base.Key(), moved.Key(), "then", "now"); d != "" {
		t.Errorf("moved inputs reported as %q", d)
	}
	other := base
	other.Files = []FileID{{"burst", "a.fits", "sha256:" + strings.Repeat("4", 64)}, base.Files[1]}
	other.Settings = map[string]string{"patch": "48", "polish": "3"}
	other.Weights = "none"
	d := DiffKeys(base.Key(), other.Key(), "in the journal", "now")
	for _, want := range []string{"burst file's content differs", "a.fits (sha256 111111111111…) in the journal", "setting patch differs: 64 in the journal, 48 now", "the weights' content differs"} {
		if !strings.Contains(d, want) {
			t.Errorf("%q does not say %q", d, want)
		}
	}
	if d := DiffKeys(base.Key()+"range 0 10\n", base.Key()+"range 10 20\n", "a", "b"); !strings.Contains(d, "share of patches") {
		t.Errorf("range difference reported as %q", d)
	}
}

// needTool skips a test without the external checker path outside CI and
// fails it in CI.
func needTool(t *testing.T, path string, args ...string) {
	t.Helper()
	if err := exec.Command(path, args...).Run(); err != nil {
		if os.Getenv("CI") != "" {
			t.Fatalf("%s is required in CI: %v", path, err)
		}
		t.Skipf("%s not usable: %v", path, err)
	}
}

// testPart writes a part of two patches of a small fake field, with a
// failed patch (NaN metric, no coefficients, a non-ASCII message) and
// header cards of every kind, and returns its path and the patches.
func testPart(t *testing.T) (string, *Meta, []*PatchResult) {
	t.Helper()
	f := fakeField(t, 64, 40, 2)
	meta := fakeMeta(f, 32, 8)
	meta.Cards = []fits.Card{{Key: "TELESCOP", Value: "Été 1"}, {Key: "EXPTIME", Value: 0.1}, {Key: "NAXES", Value: 3}, {Key: "FLIP", Value: true}, {Key: "COMMENT", Comment: "hi"}}
	meta.Key = Identity{Files: []FileID{{"burst", "ä.fits", "sha256:00"}}, Weights: "none"}.Key()
	g, _ := NewGrid(meta.Nx, meta.Ny, meta.Patch, meta.Overlap)
	sh := Shard{1, 2}
	lo, hi := sh.Range(g.Count())
	path := filepath.Join(t.TempDir(), "r.part-1-of-2.fits")
	w, err := CreatePart(path, meta, sh, lo, hi)
	if err != nil {
		t.Fatal(err)
	}
	var rows []*PatchResult
	for id := lo; id < hi; id++ {
		x0, y0 := g.Origin(id)
		r := &PatchResult{ID: id, X0: x0, Y0: y0, Tile: make([]float64, 32*32), Metric: 1.5, MetricRatio: 2, CoeffRMS: 0.5,
			Contrast: 0.1, RawContrast: 0.05, Ringing: 1, Coeffs: []float64{1, 2, 3, 4}, Noll: []float64{-1, -2, -3, -4}}
		for i := range r.Tile {
			r.Tile[i] = float64(id) + 1/float64(i+3)
		}
		if id == lo {
			r.Coeffs, r.Noll, r.Metric, r.Flags, r.Err = nil, nil, math.NaN(), FlagFailed, "fit: ∞ «no»"
		}
		rows = append(rows, r)
		if err := w.Write(r); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return path, meta, rows
}

// TestPartFileRoundTrip checks a part file reads back bit for bit (patches,
// mean image, typed header cards, identity) and is refused when truncated.
// Planted: writing the tiles as float32 (the image writer's BITPIX −32)
// failed the bit comparison.
func TestPartFileRoundTrip(t *testing.T) {
	path, meta, rows := testPart(t)
	r, err := openPart(path)
	if err != nil {
		t.Fatal(err)
	}
	if r.shard != (Shard{1, 2}) || r.meta.Key != meta.Key || !reflect.DeepEqual(r.meta.Cards, meta.Cards) {
		t.Fatalf("header read back as shard %v, key %q, cards %v", r.shard, r.meta.Key, r.meta.Cards)
	}
	k := 0
	err = r.patches(func(p *PatchResult) error {
		w := rows[k]
		k++
		if p.ID != w.ID || p.X0 != w.X0 || p.Flags != w.Flags || p.Err != w.Err || len(p.Coeffs) != len(w.Coeffs) ||
			math.Float64bits(p.Metric) != math.Float64bits(w.Metric) {
			return fmt.Errorf("patch %d read back as %+v", w.ID, p)
		}
		for i := range w.Tile {
			if math.Float64bits(p.Tile[i]) != math.Float64bits(w.Tile[i]) {
				return fmt.Errorf("patch %d tile %d: %v, wrote %v", w.ID, i, p.Tile[i], w.Tile[i])
			}
		}
		for i := range w.Coeffs {
			if p.Coeffs[i] != w.Coeffs[i] || p.Noll[i] != w.Noll[i] {
				return fmt.Errorf("patch %d coefficient %d differs", w.ID, i)
			}
		}
		return nil
	})
	if err != nil || k != len(rows) {
		t.Fatalf("%d of %d patches: %v", k, len(rows), err)
	}
	for i, v := range meta.Mean {
		if math.Float64bits(r.meta.Mean[i]) != math.Float64bits(v) {
			t.Fatalf("mean pixel %d: %v, wrote %v", i, r.meta.Mean[i], v)
		}
	}
	b, _ := os.ReadFile(path)
	short := filepath.Join(t.TempDir(), "short.fits")
	os.WriteFile(short, b[:len(b)-2880], 0o644)
	if r, err := openPart(short); err == nil {
		if err := r.patches(func(*PatchResult) error { return nil }); err == nil {
			t.Error("truncated part accepted")
		}
	}
}

// TestPartFileStandard checks a part file passes fitsverify and reads in
// astropy (the reference reader) with the layout the package documents.
func TestPartFileStandard(t *testing.T) {
	path, meta, rows := testPart(t)
	needTool(t, "/usr/bin/fitsverify", "-h")
	out, err := exec.Command("/usr/bin/fitsverify", "-q", path).CombinedOutput()
	if err != nil || !strings.Contains(string(out), "verification OK") || strings.Contains(string(out), "warning") {
		full, _ := exec.Command("/usr/bin/fitsverify", path).CombinedOutput()
		t.Errorf("fitsverify: %v\n%s", err, full)
	}
	needTool(t, "/usr/bin/python3", "-c", "import astropy.io.fits")
	script := `
import sys, json, math
from astropy.io import fits
h = fits.open(sys.argv[1])
print([x.name for x in h])
print(h[0].header["PDSHARD"], h[0].header["PDLO"], h[0].header["PDHI"])
m = json.loads(h["META"].data["JSON"][0])
print(m["Nx"], m["Ny"], m["Patch"])
p = h["PATCHES"].data
print(len(p), p["TILE"].shape[1], repr(float(p["TILE"][1][5])), int(p["NCOEF"][0]), math.isnan(p["METRIC"][0]))
print(h["MEAN"].data["MEAN"].shape)
`
	got, err := exec.Command("/usr/bin/python3", "-c", script, path).CombinedOutput()
	if err != nil {
		t.Fatalf("astropy: %v\n%s", err, got)
	}
	want := fmt.Sprintf("['PRIMARY', 'META', 'MEAN', 'PATCHES']\n1/2 %d %d\n%d %d %d\n%d %d %s 0 True\n(%d, %d)\n",
		rows[0].ID, rows[len(rows)-1].ID+1, meta.Nx, meta.Ny, meta.Patch, len(rows), meta.Patch*meta.Patch,
		strconv.FormatFloat(rows[1].Tile[5], 'g', -1, 64), meta.Ny, meta.Nx)
	if string(got) != want {
		t.Errorf("astropy read\n%s\nwant\n%s", got, want)
	}
}

// TestShardFromEnv checks the job-array variables (as SLURM documents them:
// TASK_ID with TASK_COUNT, or TASK_MIN/TASK_MAX and TASK_STEP) and that
// --shard array needs them. Planted: ignoring TASK_STEP made task 7 of
// 3-9:2 shard 4 (of 4) and failed.
func TestShardFromEnv(t *testing.T) {
	cases := []struct {
		env  map[string]string
		want Shard
		ok   bool
	}{
		{map[string]string{"SLURM_ARRAY_TASK_ID": "7", "SLURM_ARRAY_TASK_COUNT": "4", "SLURM_ARRAY_TASK_MIN": "5"}, Shard{2, 4}, true},
		{map[string]string{"SLURM_ARRAY_TASK_ID": "4", "SLURM_ARRAY_TASK_MIN": "3", "SLURM_ARRAY_TASK_MAX": "4"}, Shard{1, 2}, true},
		{map[string]string{"SLURM_ARRAY_TASK_ID": "7", "SLURM_ARRAY_TASK_MIN": "3", "SLURM_ARRAY_TASK_MAX": "9", "SLURM_ARRAY_TASK_STEP": "2"}, Shard{2, 4}, true},
		{map[string]string{"SLURM_ARRAY_TASK_ID": "4", "SLURM_ARRAY_TASK_MIN": "3", "SLURM_ARRAY_TASK_MAX": "9", "SLURM_ARRAY_TASK_STEP": "2"}, Shard{}, false},
		{map[string]string{"SLURM_ARRAY_TASK_ID": "9", "SLURM_ARRAY_TASK_COUNT": "4", "SLURM_ARRAY_TASK_MIN": "5"}, Shard{}, false},
		{map[string]string{"SLURM_ARRAY_TASK_ID": "1"}, Shard{}, false},
		{map[string]string{"SLURM_ARRAY_TASK_ID": "x", "SLURM_ARRAY_TASK_COUNT": "4"}, Shard{}, false},
	}
	for i, c := range cases {
		sh, err := ParseShardFlag(ShardArray, func(k string) string { return c.env[k] })
		if (err == nil) != c.ok || sh != c.want {
			t.Errorf("case %d: %v, %v; want %v (ok %v)", i, sh, err, c.want, c.ok)
		}
	}
	if _, err := ParseShardFlag(ShardArray, func(string) string { return "" }); err == nil {
		t.Error("--shard array accepted outside a job array")
	}
	if got := PartPath("/d/r.fits", Shard{3, 12}); got != "/d/r.part-03-of-12.fits" {
		t.Errorf("PartPath = %s", got)
	}
}
