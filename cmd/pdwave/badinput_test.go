package main

import (
	"bytes"
	"crypto/sha256"
	"encoding/binary"
	"fmt"
	"io/fs"
	"math"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"pdwave/internal/outpath"
)

// The command line is tested as a user meets it: the test binary re-executes
// itself as pdwave (TestMain below) so that a panic, a stack trace or an exit
// code are seen exactly as in a shell.

const cliEnv = "PDWAVE_CLI_MAIN"

func TestMain(m *testing.M) {
	if os.Getenv(cliEnv) == "1" {
		os.Args = append([]string{"pdwave"}, os.Args[1:]...)
		main()
		os.Exit(0)
	}
	os.Exit(m.Run())
}

// cliCommand returns the command that runs this test binary as pdwave
// with args in dir (TestMain turns it into the command line).
func cliCommand(t *testing.T, dir string, args ...string) *exec.Cmd {
	t.Helper()
	self, err := os.Executable()
	if err != nil {
		t.Fatal(err)
	}
	c := exec.Command(self, args...)
	c.Dir = dir
	c.Env = append(os.Environ(), cliEnv+"=1")
	return c
}

// runCLI runs pdwave with args in dir and returns its exit code and output.
func runCLI(t *testing.T, dir string, args ...string) (code int, stdout, stderr string) {
	t.Helper()
	c := cliCommand(t, dir, args...)
	var o, e bytes.Buffer
	c.Stdout, c.Stderr = &o, &e
	err := c.Run()
	if err != nil {
		if ee, ok := err.(*exec.ExitError); ok {
			return ee.ExitCode(), o.String(), e.String()
		}
		t.Fatalf("running pdwave %v: %v", args, err)
	}
	return 0, o.String(), e.String()
}

// fitsCard formats one 80-character header card.
func fitsCard(key string, value any) string {
	var v string
	switch x := value.(type) {
	case string:
		v = fmt.Sprintf("'%-8s'", x)
	case bool:
		v = "F"
		if x {
			v = "T"
		}
	case int:
		v = fmt.Sprintf("%d", x)
	case float64:
		v = fmt.Sprintf("%.10G", x)
	}
	return fmt.Sprintf("%-8s= %20s", key, v)
}

// writeFITS writes a primary-HDU-only FITS file of float32 pixels with the
// given axes and extra cards, laid out by the FITS Standard 4.0 (2880-byte
// blocks, big-endian IEEE floats). truncate > 0 cuts the file to that many
// bytes.
func writeFITS(t *testing.T, path string, axes []int, pix []float32, extra [][2]any, truncate int) {
	t.Helper()
	cards := []string{fitsCard("SIMPLE", true), fitsCard("BITPIX", -32), fitsCard("NAXIS", len(axes))}
	for i, n := range axes {
		cards = append(cards, fitsCard(fmt.Sprintf("NAXIS%d", i+1), n))
	}
	for _, kv := range extra {
		cards = append(cards, fitsCard(kv[0].(string), kv[1]))
	}
	cards = append(cards, "END")
	var buf bytes.Buffer
	for _, c := range cards {
		buf.WriteString(fmt.Sprintf("%-80s", c))
	}
	for buf.Len()%2880 != 0 {
		buf.WriteByte(' ')
	}
	for _, p := range pix {
		binary.Write(&buf, binary.BigEndian, p)
	}
	for buf.Len()%2880 != 0 {
		buf.WriteByte(0)
	}
	b := buf.Bytes()
	if truncate > 0 {
		b = b[:truncate]
	}
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
}

// demoOptics are header cards describing the demo telescope
// (testdata/demo-site.yaml).
var demoOptics = [][2]any{
	{"WAVELNTH", 600.0}, {"WAVEUNIT", -9},
	{"CDELT1", 0.12}, {"CDELT2", 0.12}, {"CUNIT1", "arcsec"}, {"CUNIT2", "arcsec"},
	{"TELDIAM", 0.5}, {"OBSCUR", 0.15}, {"DIVPV", 1.0},
}

// noise returns n pixels of a positive random image, seeded.
func noise(n int, seed uint64) []float32 {
	r := rand.New(rand.NewPCG(seed, 1))
	p := make([]float32, n)
	for i := range p {
		p[i] = float32(1000 + 30*r.NormFloat64())
	}
	return p
}

// TestBadInput runs every command on malformed or impossible input. Each must
// exit non-zero with one line on stderr starting "pdwave:", never panic, and
// leave no output file or temporary file behind in the output folder.
func TestBadInput(t *testing.T) {
	if testing.Short() {
		t.Log("short mode: running the table all the same (it takes seconds)")
	}
	repo, err := filepath.Abs(filepath.Join("..", ".."))
	if err != nil {
		t.Fatal(err)
	}
	demoSite := filepath.Join(repo, "testdata", "demo-site.yaml")
	in := t.TempDir()
	p := func(name string) string { return filepath.Join(in, name) }

	const n, frames = 64, 4
	good := noise(n*n*frames*2, 1)
	writeFITS(t, p("good.fits"), []int{n, n, frames, 2}, good, demoOptics, 0)
	writeFITS(t, p("small.fits"), []int{32, 32, frames, 2}, good[:32*32*frames*2], demoOptics, 0)
	writeFITS(t, p("small-rect.fits"), []int{64, 48, frames, 2}, good[:64*48*frames*2], demoOptics, 0)
	fewFrames := t.TempDir() // a folder of one 4-frame burst, for training that needs 16
	writeFITS(t, filepath.Join(fewFrames, "four.fits"), []int{n, n, frames, 2}, good, demoOptics, 0)
	writeFITS(t, p("truncated.fits"), []int{n, n, frames, 2}, good, demoOptics, 2880+1000)
	writeFITS(t, p("notfits.fits"), nil, nil, nil, 0)
	if err := os.WriteFile(p("notfits.fits"), []byte("this is not a FITS file\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	writeFITS(t, p("naxis3.fits"), []int{n, n, frames}, good[:n*n*frames], demoOptics, 0)
	writeFITS(t, p("naxis4-3.fits"), []int{n, n, 2, 3}, good[:n*n*6], demoOptics, 0)
	writeFITS(t, p("zero-frames.fits"), []int{n, n, 0, 2}, nil, demoOptics, 0)
	writeFITS(t, p("one-channel.fits"), []int{n, n, frames, 1}, good[:n*n*frames], demoOptics, 0)
	// Undefined pixels are filled up to 5 % of a frame (burst.MaxBadFraction,
	// 204 of 64×64): 300 are refused.
	nan := append([]float32(nil), good...)
	inf := append([]float32(nil), good...)
	for i := 0; i < 300; i++ {
		nan[n*n*frames+17+i] = float32(math.NaN())
		inf[5+i] = float32(math.Inf(1))
	}
	writeFITS(t, p("nan.fits"), []int{n, n, frames, 2}, nan, demoOptics, 0)
	writeFITS(t, p("inf.fits"), []int{n, n, frames, 2}, inf, demoOptics, 0)
	// Calibration frames: a dark of the right size, one of another size,
	// a bad-pixel map marking 10 % of the pixels.
	writeFITS(t, p("dark.fits"), []int{n, n}, good[:n*n], nil, 0)
	writeFITS(t, p("dark-small.fits"), []int{n / 2, n / 2}, good[:n*n/4], nil, 0)
	badMap := make([]float32, n*n)
	for i := 0; i < len(badMap); i += 10 {
		badMap[i] = 1
	}
	writeFITS(t, p("bad-map.fits"), []int{n, n}, badMap, nil, 0)
	writeFITS(t, p("no-optics.fits"), []int{n, n, frames, 2}, good, nil, 0)
	writeFITS(t, p("focused.fits"), []int{n, n, frames}, good[:n*n*frames], demoOptics, 0)
	writeFITS(t, p("defocused-small.fits"), []int{n / 2, n / 2, frames}, good[:n*n*frames/4], demoOptics, 0)
	// A burst of a 0.7 m telescope: the built-in weights were made for the
	// 0.5 m demo telescope and must be refused.
	other := append([][2]any(nil), demoOptics...)
	for i := range other {
		if other[i][0] == "TELDIAM" {
			other[i][1] = 0.7
		}
		if other[i][0] == "CDELT1" || other[i][0] == "CDELT2" {
			other[i][1] = 0.085
		}
	}
	writeFITS(t, p("other-optics.fits"), []int{n, n, frames, 2}, good, other, 0)

	site, err := os.ReadFile(demoSite)
	if err != nil {
		t.Fatal(err)
	}
	sites := map[string]string{
		"malformed.yaml":      "telescope: [unclosed\n",
		"unknown-key.yaml":    strings.Replace(string(site), "diameter_m:", "diametre_m:", 1),
		"negative-d.yaml":     strings.Replace(string(site), "diameter_m: 0.50", "diameter_m: -0.50", 1),
		"undersampled.yaml":   strings.Replace(string(site), "pixel_scale_arcsec: 0.120", "pixel_scale_arcsec: 0.300", 1),
		"negative-patch.yaml": strings.Replace(string(site), "patch: 64", "patch: -64", 1),
		"rotate-45.yaml":      string(site) + "\ngeometry: {defocused: {rotate_deg: 45}}\n",
		"magnify.yaml":        string(site) + "\ngeometry: {defocused: {magnification: 1.5}}\n",
		"geometry-typo.yaml":  string(site) + "\ngeometry: {defocused: {flip: true}}\n",
		"turn-one.yaml":       string(site) + "\ngeometry: {defocused: {rotate_deg: 90}}\n",
	}
	for name, text := range sites {
		if text == string(site) {
			t.Fatalf("site variant %s did not change the demo site; update the test", name)
		}
		if err := os.WriteFile(p(name), []byte(text), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	if err := os.WriteFile(p("garbage.safetensors"), []byte("\x10\x00\x00\x00\x00\x00\x00\x00{not json}"), 0o644); err != nil {
		t.Fatal(err)
	}
	safetyInputs(t, in, repo)
	// An output in use: this test holds its lock.
	held, _, err := outpath.Acquire(outpath.LockPath(p("locked.fits")), "test")
	if err != nil {
		t.Fatal(err)
	}
	defer held.Release()
	relGood, err := filepath.Rel(repo, p("good.fits"))
	if err != nil {
		t.Fatal(err)
	}
	before := snapshot(t, in)

	type tc struct {
		name string
		args []string // "OUT" stands for the output path inside the case's folder
		want string   // a fragment the error line must contain (case-insensitive)
	}
	cases := []tc{
		// simulate
		{"simulate no site", []string{"simulate", "--out", "OUT"}, "site"},
		{"simulate malformed yaml", []string{"simulate", "--site", p("malformed.yaml"), "--out", "OUT"}, "yaml"},
		{"simulate unknown key", []string{"simulate", "--site", p("unknown-key.yaml"), "--out", "OUT"}, "diametre_m"},
		{"simulate negative diameter", []string{"simulate", "--site", p("negative-d.yaml"), "--out", "OUT"}, "diameter"},
		{"simulate under-sampled", []string{"simulate", "--site", p("undersampled.yaml"), "--out", "OUT"}, "sampl"},
		{"simulate negative patch", []string{"simulate", "--site", p("negative-patch.yaml"), "--out", "OUT"}, "patch"},
		{"simulate missing site", []string{"simulate", "--site", p("nope.yaml"), "--out", "OUT"}, "nope.yaml"},
		{"simulate bad scene", []string{"simulate", "--site", demoSite, "--out", "OUT", "--scene", p("nope-scene")}, "scene"},
		{"simulate scene not fits", []string{"simulate", "--site", demoSite, "--out", "OUT", "--scene", p("notfits.fits")}, "notfits.fits"},
		{"simulate object and scene", []string{"simulate", "--site", demoSite, "--out", "OUT", "--object", p("good.fits"), "--scene", "mix"}, "scene"},
		{"screen negative size", []string{"simulate", "screen", "--site", demoSite, "--out", "OUT/s.fits", "--size", "-8"}, "size"},
		// fit
		{"fit truncated", []string{"fit", p("truncated.fits"), "--site", demoSite, "--out", "OUT/f.fits"}, "truncated.fits"},
		{"fit not fits", []string{"fit", p("notfits.fits"), "--site", demoSite, "--out", "OUT/f.fits"}, "notfits.fits"},
		{"fit wrong naxis", []string{"fit", p("naxis3.fits"), "--site", demoSite, "--out", "OUT/f.fits"}, "naxis"},
		{"fit naxis4 not 2", []string{"fit", p("naxis4-3.fits"), "--site", demoSite, "--out", "OUT/f.fits"}, "naxis4"},
		{"fit zero frames", []string{"fit", p("zero-frames.fits"), "--site", demoSite, "--out", "OUT/f.fits"}, "frame"},
		{"fit one channel", []string{"fit", p("one-channel.fits"), "--site", demoSite, "--out", "OUT/f.fits"}, "channel"},
		{"fit too many NaN pixels", []string{"fit", p("nan.fits"), "--site", demoSite, "--out", "OUT/f.fits"}, "300 of the 64×64 pixels (7.3 %) are undefined"},
		{"fit too many Inf pixels", []string{"fit", p("inf.fits"), "--site", demoSite, "--out", "OUT/f.fits"}, "channel 1 (focused) frame 1: 300 of the 64×64"},
		{"fit geometry not a quarter turn", []string{"fit", p("good.fits"), "--site", p("rotate-45.yaml"), "--out", "OUT/f.fits"}, "geometry.defocused.rotate_deg: must be a multiple of 90"},
		{"fit geometry magnification", []string{"fit", p("good.fits"), "--site", p("magnify.yaml"), "--out", "OUT/f.fits"}, "geometry.defocused.magnification"},
		{"predict geometry typo", []string{"predict", p("good.fits"), "--site", p("geometry-typo.yaml"), "--out", "OUT/p.fits"}, "field flip not found"},
		{"predict one channel turned on a non-square burst", []string{"predict", p("small-rect.fits"), "--site", p("turn-one.yaml"), "--out", "OUT/p.fits"}, "after orientation"},
		{"fit malformed yaml", []string{"fit", p("good.fits"), "--site", p("malformed.yaml"), "--out", "OUT/f.fits"}, "yaml"},
		{"fit missing burst", []string{"fit", p("missing.fits"), "--site", demoSite, "--out", "OUT/f.fits"}, "missing.fits"},
		{"fit no args", []string{"fit", "--site", demoSite, "--out", "OUT/f.fits"}, ""},
		{"fit negative modes", []string{"fit", p("good.fits"), "--site", demoSite, "--modes", "-3", "--out", "OUT/f.fits"}, "modes"},
		{"fit bad basis", []string{"fit", p("good.fits"), "--site", demoSite, "--basis", "fourier", "--out", "OUT/f.fits"}, "basis"},
		// predict
		{"predict missing weights", []string{"predict", p("good.fits"), "--weights", p("none.safetensors"), "--out", "OUT/p.fits"}, "none.safetensors"},
		{"predict garbage weights", []string{"predict", p("good.fits"), "--weights", p("garbage.safetensors"), "--out", "OUT/p.fits"}, "garbage.safetensors"},
		{"predict three turns", []string{"predict", p("good.fits"), "--turns", "3", "--out", "OUT/p.fits"}, "3 turns, want 1, 4 or 8"},
		{"predict other optics", []string{"predict", p("other-optics.fits"), "--out", "OUT/p.fits"}, "0.7"},
		{"predict no optics", []string{"predict", p("no-optics.fits"), "--out", "OUT/p.fits"}, "optic"},
		{"predict burst smaller than a patch", []string{"predict", p("small.fits"), "--out", "OUT/p.fits"}, "smaller than"},
		{"predict truncated", []string{"predict", p("truncated.fits"), "--out", "OUT/p.fits"}, "truncated.fits"},
		// restore
		{"restore truncated", []string{"restore", p("truncated.fits"), "--site", demoSite, "--out", "OUT/r.fits"}, "truncated.fits"},
		{"restore too many NaN pixels", []string{"restore", p("nan.fits"), "--site", demoSite, "--out", "OUT/r.fits"}, "are undefined (nan, inf, blank) or marked bad"},
		{"restore geometry not a quarter turn", []string{"restore", p("good.fits"), "--site", p("rotate-45.yaml"), "--out", "OUT/r.fits"}, "rotate_deg"},
		{"restore camera-2 dark of another size", []string{"restore", p("good.fits"), "--site", demoSite, "--dark", p("dark.fits") + "," + p("dark-small.fits"), "--out", "OUT/r.fits"}, "camera 2's calibration frames (" + p("dark-small.fits") + ") are 32×32"},
		{"restore dark and flat of one camera differ in size", []string{"restore", p("good.fits"), "--site", demoSite, "--dark", p("dark.fits"), "--flat", p("dark-small.fits"), "--out", "OUT/r.fits"}, "is 32×32 but its other calibration frames 64×64"},
		{"restore three darks", []string{"restore", p("good.fits"), "--site", demoSite, "--dark", p("dark.fits") + "," + p("dark.fits") + "," + p("dark.fits"), "--out", "OUT/r.fits"}, "--dark takes one file"},
		{"restore too many bad pixels in the map", []string{"restore", p("good.fits"), "--site", demoSite, "--bad", p("bad-map.fits"), "--out", "OUT/r.fits"}, "camera 1: 410 of its 64×64 pixels (10.0 %) are bad"},
		{"restore mismatched pair", []string{"restore", "--pairs", p("focused.fits"), p("defocused-small.fits"), "--site", demoSite, "--out", "OUT/r.fits"}, "32×32"},
		{"restore odd pair count", []string{"restore", "--pairs", p("focused.fits"), "--site", demoSite, "--out", "OUT/r.fits"}, "pair"},
		{"restore bad shard", []string{"restore", p("good.fits"), "--site", demoSite, "--shard", "3/2", "--out", "OUT/r.fits"}, "shard"},
		{"restore negative patch", []string{"restore", p("good.fits"), "--site", demoSite, "--patch", "-64", "--out", "OUT/r.fits"}, "patch"},
		{"restore under-sampled site", []string{"restore", p("no-optics.fits"), "--site", p("undersampled.yaml"), "--out", "OUT/r.fits"}, "sampl"},
		{"restore foreign weights", []string{"restore", p("good.fits"), "--site", demoSite, "--weights", p("garbage.safetensors"), "--out", "OUT/r.fits"}, "garbage.safetensors"},
		{"restore truncated dark", []string{"restore", p("good.fits"), "--site", demoSite, "--dark", p("truncated.fits"), "--out", "OUT/r.fits"}, "truncated.fits"},
		{"restore flat of another size", []string{"restore", p("good.fits"), "--site", demoSite, "--flat", p("defocused-small.fits"), "--out", "OUT/r.fits"}, "defocused-small.fits"},
		{"merge missing part", []string{"restore", "merge", p("nopart.part"), "--out", "OUT/m.fits"}, "nopart.part"},
		{"merge with no parts found", []string{"restore", "merge", "--out", "OUT/m.fits"}, "no part files"},
		{"merge of a file that is not a part", []string{"restore", "merge", p("good.fits"), "--out", "OUT/m.fits"}, "not a pdwave restore part"},
		{"restore shard array outside a job array", []string{"restore", p("good.fits"), "--site", demoSite, "--shard", "array", "--out", "OUT/r.fits"}, "SLURM_ARRAY_TASK_ID"},
		// compare
		{"compare wrong naxis", []string{"compare", p("naxis3.fits"), "--site", demoSite, "--out", "OUT/report"}, "naxis"},
		{"compare malformed yaml", []string{"compare", p("good.fits"), "--site", p("malformed.yaml"), "--out", "OUT/report"}, "yaml"},
		// train
		{"train negative steps", []string{"train", "--site", demoSite, "--out", "OUT/w", "--steps", "-1"}, "steps"},
		{"train one-value photon range", []string{"train", "--site", demoSite, "--out", "OUT/w", "--photons", "1"}, "photons"},
		{"train unknown scenes", []string{"train", "--site", demoSite, "--out", "OUT/w", "--scenes", "bogus"}, "scenes"},
		{"train malformed yaml", []string{"train", "--site", p("malformed.yaml"), "--out", "OUT/w"}, "yaml"},
		{"train missing starting weights", []string{"train", "--site", demoSite, "--init", p("none.safetensors"), "--out", "OUT/w", "--steps", "1"}, "none.safetensors"},
		{"train garbage starting weights", []string{"train", "--site", demoSite, "--init", p("garbage.safetensors"), "--out", "OUT/w", "--steps", "1"}, "garbage.safetensors"},
		{"train negative gamma", []string{"train", "--site", demoSite, "--gamma", "-1", "--out", "OUT/w", "--steps", "1"}, "gamma"},
		{"train zero-channel convolution", []string{"train", "--site", demoSite, "--conv", "8,0", "--out", "OUT/w", "--steps", "1"}, "0 channels"},
		{"train negative fit check", []string{"train", "--site", demoSite, "--fit-check", "-2", "--out", "OUT/w", "--steps", "1"}, "fit-check"},
		{"train bursts with too few frames", []string{"train", "--site", demoSite, "--data", fewFrames, "--out", "OUT/w", "--steps", "1"}, "4 frames"},
		{"train empty data folder", []string{"train", "--site", demoSite, "--data", t.TempDir(), "--out", "OUT/w", "--steps", "1"}, "no FITS"},
		// demo
		{"demo missing site", []string{"demo", "--site", p("nope.yaml"), "--out", "OUT/demo"}, "nope.yaml"},
		// outputs that would overwrite inputs or what pdwave did not write
		{"fit output is the input", []string{"fit", p("good.fits"), "--site", demoSite, "--out", p("good.fits")}, "is the input"},
		{"fit output is the input, relative", []string{"fit", relGood, "--site", demoSite, "--out", p("good.fits")}, "is the input"},
		{"fit output links to the input", []string{"fit", p("good.fits"), "--site", demoSite, "--out", p("link.fits")}, "is the input"},
		{"fit output through a linked folder", []string{"fit", p("good.fits"), "--site", demoSite, "--out", p("inlink/good.fits")}, "is the input"},
		{"fit output is a hard link to the input", []string{"fit", p("good.fits"), "--site", demoSite, "--out", p("hard.fits")}, "is the input"},
		{"fit output is a folder", []string{"fit", p("good.fits"), "--site", demoSite, "--out", p("dir.fits")}, "not a regular file"},
		{"fit CSV is the input", []string{"fit", p("table.csv"), "--site", demoSite, "--out", p("table.fits")}, "is the input"},
		{"predict output is a named pipe", []string{"predict", p("good.fits"), "--out", p("pipe.fits")}, "named pipe"},
		{"predict output is the weights", []string{"predict", p("good.fits"), "--weights", p("garbage.safetensors"), "--out", p("garbage.safetensors")}, "is the input"},
		{"simulate into the site's folder", []string{"simulate", "--site", p("site.yaml"), "--out", in}, "holds the input"},
		{"simulate into a file", []string{"simulate", "--site", demoSite, "--out", p("good.fits")}, "not a folder"},
		{"screen output is the site", []string{"simulate", "screen", "--site", p("site.yaml"), "--out", p("site.yaml")}, "is the input"},
		{"restore output is the input", []string{"restore", p("good.fits"), "--site", demoSite, "--out", p("good.fits")}, "is the input"},
		{"restore output is the dark", []string{"restore", p("good.fits"), "--site", demoSite, "--dark", p("small.fits"), "--out", p("small.fits")}, "is the input"},
		{"restore output is a folder", []string{"restore", p("good.fits"), "--site", demoSite, "--out", "OUT"}, "not a regular file"},
		{"restore output is a named pipe", []string{"restore", p("good.fits"), "--site", demoSite, "--out", p("pipe.fits")}, "named pipe"},
		{"restore sidecar is an input", []string{"restore", p("good.fits"), "--site", demoSite, "--flat", p("r_preview.png"), "--out", p("r.fits")}, "is the input"},
		{"restore two inputs with one name", []string{"restore", p("good.fits"), p("b/good.fits"), "--site", demoSite, "--out", "OUT/r"}, "two outputs"},
		{"restore into the inputs' folder", []string{"restore", p("good.fits"), p("small.fits"), "--site", demoSite, "--out", in}, "holds the input"},
		{"restore into a folder above the inputs", []string{"restore", p("good.fits"), p("small.fits"), "--site", demoSite, "--out", filepath.Dir(in)}, "holds the input"},
		{"restore output in use", []string{"restore", p("good.fits"), "--site", demoSite, "--out", p("locked.fits")}, "in use by process"},
		{"merge output is a part", []string{"restore", "merge", p("good.fits"), "--out", p("good.fits")}, "is the input"},
		{"compare into a foreign folder", []string{"compare", p("good.fits"), "--site", demoSite, "--out", p("foreign")}, "did not write"},
		{"compare into the inputs' folder", []string{"compare", p("good.fits"), "--site", demoSite, "--out", in}, "holds the input"},
		{"demo into a foreign folder", []string{"demo", "--out", p("foreign")}, "did not write"},
		{"demo into a pdwave folder with a foreign file", []string{"demo", "--out", p("ours")}, "notes.txt"},
		{"demo into the site's folder", []string{"demo", "--site", p("site.yaml"), "--out", in}, "holds the input"},
		{"train into the starting weights' folder", []string{"train", "--site", demoSite, "--init", p("w/start.safetensors"), "--out", p("w"), "--steps", "1", "--validation", "-1"}, "holds the input"},
		{"train into the data folder", []string{"train", "--site", demoSite, "--data", fewFrames, "--out", fewFrames, "--steps", "1", "--validation", "-1"}, "is the input"},
		// flags out of bounds or contradicting each other, refused before any work
		{"train zero steps", []string{"train", "--site", demoSite, "--out", "OUT/w", "--steps", "0"}, "--steps 0"},
		{"train negative wall", []string{"train", "--site", demoSite, "--out", "OUT/w", "--max-wall", "-5m"}, "max-wall"},
		{"train too many workers", []string{"train", "--site", demoSite, "--out", "OUT/w", "--workers", "100000"}, "--workers 100000"},
		{"train init and architecture", []string{"train", "--site", demoSite, "--out", "OUT/w", "--init", p("w/start.safetensors"), "--conv", "8,8,8"}, "contradict"},
		{"train resume without checkpoint", []string{"train", "--site", demoSite, "--out", "OUT/w", "--resume", "--validation", "-1"}, "checkpoint"},
		{"fit negative wall", []string{"fit", p("good.fits"), "--site", demoSite, "--out", "OUT/f.fits", "--wall", "-1s"}, "wall"},
		{"fit study too many workers", []string{"fit", "study", "--site", demoSite, "--out", "OUT/s", "--workers", "100000"}, "workers"},
		{"simulate too many workers", []string{"simulate", "--site", demoSite, "--out", "OUT", "--workers", "100000"}, "workers"},
		{"restore too many workers", []string{"restore", p("good.fits"), "--site", demoSite, "--out", "OUT/r.fits", "--workers", "100000"}, "workers"},
		{"restore polish and fit", []string{"restore", p("good.fits"), "--site", demoSite, "--out", "OUT/r.fits", "--polish", "3", "--fit"}, "contradict"},
		{"restore offset and no-align", []string{"restore", p("good.fits"), "--site", demoSite, "--out", "OUT/r.fits", "--offset", "0.1,0.2", "--no-align"}, "contradict"},
		{"compare too many workers", []string{"compare", p("good.fits"), "--site", demoSite, "--out", "OUT/report", "--workers", "100000"}, "workers"},
		// the command line itself
		{"unknown command", []string{"sharpen"}, "unknown command"},
		{"unknown flag", []string{"fit", "--sharpness", "3"}, "unknown flag"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			out := t.TempDir()
			args := make([]string, len(c.args))
			for i, a := range c.args {
				args[i] = strings.Replace(a, "OUT", out, 1)
			}
			code, stdout, stderr := runCLI(t, repo, args...)
			if code == 0 {
				t.Fatalf("exit code 0; want non-zero\nstdout: %s\nstderr: %s", stdout, stderr)
			}
			if strings.Contains(stderr, "panic") || strings.Contains(stderr, "goroutine ") {
				t.Fatalf("panicked:\n%s", stderr)
			}
			lines := strings.Split(strings.TrimRight(stderr, "\n"), "\n")
			last := lines[len(lines)-1]
			if !strings.HasPrefix(last, "pdwave: ") {
				t.Fatalf("last stderr line %q does not start with \"pdwave: \"\nstderr: %s", last, stderr)
			}
			errLines := 0
			for _, l := range lines {
				if strings.HasPrefix(l, "pdwave: ") {
					errLines++
				}
			}
			if errLines != 1 {
				t.Errorf("%d error lines; want one\nstderr: %s", errLines, stderr)
			}
			if c.want != "" && !strings.Contains(strings.ToLower(last), strings.ToLower(c.want)) {
				t.Errorf("error line %q does not mention %q", last, c.want)
			}
			left, err := os.ReadDir(out)
			if err != nil {
				t.Fatal(err)
			}
			var names []string
			for _, e := range left {
				// An empty output folder created before the failure is
				// harmless; any file is not.
				if e.IsDir() {
					sub, _ := os.ReadDir(filepath.Join(out, e.Name()))
					if len(sub) == 0 {
						continue
					}
				}
				names = append(names, e.Name())
			}
			if len(names) > 0 {
				t.Errorf("left output behind: %v", names)
			}
			if after := snapshot(t, in); after != before {
				t.Errorf("the inputs' folder changed:\nbefore %s\nafter  %s", before, after)
			}
		})
	}
}

// safetyInputs adds to the bad-input folder in the inputs of the output
// checks: a link to good.fits and one to the folder itself, a hard link, a
// folder named like a FITS file, a CSV beside a FITS name, a copy of
// good.fits under the same name in b/, a copy of the demo site, a folder
// that pdwave did not write, one that it wrote but that holds a foreign
// file, and starting weights in w/.
func safetyInputs(t *testing.T, in, repo string) {
	t.Helper()
	p := func(name string) string { return filepath.Join(in, name) }
	must := func(err error) {
		t.Helper()
		if err != nil {
			t.Fatal(err)
		}
	}
	must(os.Symlink(p("good.fits"), p("link.fits")))
	must(os.Symlink(in, p("inlink")))
	must(os.Link(p("good.fits"), p("hard.fits")))
	must(os.MkdirAll(p("dir.fits"), 0o755))
	// A named pipe stands for devices such as /dev/null, which a test run as
	// root must never risk replacing (internal/outpath's tests check
	// /dev/null itself without writing).
	must(exec.Command("mkfifo", p("pipe.fits")).Run())
	must(os.WriteFile(p("table.csv"), []byte("frame\n"), 0o644))
	must(os.WriteFile(p("r_preview.png"), []byte("png"), 0o644))
	good, err := os.ReadFile(p("good.fits"))
	must(err)
	must(os.MkdirAll(p("b"), 0o755))
	must(os.WriteFile(p("b/good.fits"), good, 0o644))
	site, err := os.ReadFile(filepath.Join(repo, "testdata", "demo-site.yaml"))
	must(err)
	must(os.WriteFile(p("site.yaml"), site, 0o644))
	must(os.MkdirAll(p("foreign"), 0o755))
	must(os.WriteFile(p("foreign/thesis.tex"), []byte("mine"), 0o644))
	must(os.MkdirAll(p("ours/report"), 0o755))
	must(os.WriteFile(p("ours/restored.fits"), good, 0o644))
	must(outpath.WriteManifest(p("ours")))
	must(os.WriteFile(p("ours/report/notes.txt"), []byte("mine"), 0o644))
	w, err := os.ReadFile(filepath.Join(repo, "weights", "demo.safetensors"))
	must(err)
	must(os.MkdirAll(p("w"), 0o755))
	must(os.WriteFile(p("w/start.safetensors"), w, 0o644))
}

// snapshot describes every file under dir (name, size, mode and a hash of
// the content), so that a change by a refused command is seen.
func snapshot(t *testing.T, dir string) string {
	t.Helper()
	h := sha256.New()
	err := filepath.WalkDir(dir, func(path string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		st, err := os.Lstat(path)
		if err != nil {
			return err
		}
		fmt.Fprintf(h, "%s %v %d\n", path, st.Mode(), st.Size())
		if st.Mode().IsRegular() {
			b, err := os.ReadFile(path)
			if err != nil {
				return err
			}
			h.Write(b)
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	return fmt.Sprintf("%x", h.Sum(nil))
}

// TestCommandsEndToEnd runs every command once on small simulated data, as a
// user would chain them, and checks that each succeeds and writes what its
// help text promises. It guards the paths the bad-input table does not reach
// (a dark and flat in restore, sharding and merging, the report folder).
func TestCommandsEndToEnd(t *testing.T) {
	repo, err := filepath.Abs(filepath.Join("..", ".."))
	if err != nil {
		t.Fatal(err)
	}
	site := filepath.Join(repo, "testdata", "demo-site.yaml")
	dir := t.TempDir()
	p := func(name string) string { return filepath.Join(dir, name) }
	run := func(args ...string) {
		t.Helper()
		code, stdout, stderr := runCLI(t, repo, args...)
		if code != 0 {
			t.Fatalf("pdwave %s: exit %d\nstdout: %s\nstderr: %s", strings.Join(args, " "), code, stdout, stderr)
		}
	}
	exists := func(names ...string) {
		t.Helper()
		for _, n := range names {
			if fi, err := os.Stat(p(n)); err != nil || fi.Size() == 0 {
				t.Errorf("%s missing or empty after the step (%v)", n, err)
			}
		}
	}

	run("simulate", "--site", site, "--out", p("patch"), "--frames", "4", "--seed", "3")
	run("simulate", "--site", site, "--out", p("field"), "--frames", "4", "--field", "128", "--seed", "4")
	run("simulate", "screen", "--site", site, "--out", p("screen.fits"), "--size", "64")
	exists("patch/burst-0001.fits", "field/burst-0001.fits", "screen.fits")

	run("fit", p("patch/burst-0001.fits"), "--site", site, "--out", p("fit.fits"), "--iterations", "5")
	run("predict", p("patch/burst-0001.fits"), "--out", p("pred.fits"))
	run("predict", p("field/burst-0001.fits"), "--out", p("predfield.csv")) // the central patch of a field
	exists("fit.fits", "fit.csv", "pred.fits", "pred.csv", "predfield.csv")
	for _, f := range []string{"fit.csv", "pred.csv"} {
		b, err := os.ReadFile(p(f))
		if err != nil {
			t.Fatal(err)
		}
		if !strings.Contains(string(b), "frame,native_1,") || strings.Count(string(b), "\n4,") != 1 {
			t.Errorf("%s lacks the coefficient table header or the row of frame 4", f)
		}
	}

	// Fine-tuning the built-in weights for two steps on the simulated
	// bursts, scored against the classical fit of one validation burst.
	run("simulate", "--site", site, "--out", p("bursts16"), "--bursts", "2", "--seed", "5")
	code, _, stderr := runCLI(t, repo, "train", "--site", site, "--data", p("bursts16"), "--init", filepath.Join(repo, "weights", "demo.safetensors"),
		"--out", p("run"), "--steps", "2", "--batch", "1", "--validation", "2", "--fit-check", "1", "--lr", "1e-6")
	if code != 0 {
		t.Fatalf("pdwave train: exit %d\n%s", code, stderr)
	}
	if !strings.Contains(stderr, "against the classical fit (1 bursts)") {
		t.Errorf("train did not report the score against the classical fit:\n%s", stderr)
	}
	exists("run/weights.safetensors", "run/loss.png", "run/history.csv")

	// A dark of 50 counts and a flat of mean one with a gentle gradient.
	const n = 128
	dark := make([]float32, n*n)
	flat := make([]float32, n*n)
	for i := range dark {
		dark[i] = 50
		flat[i] = float32(0.95 + 0.1*float64(i%n)/n)
	}
	writeFITS(t, p("dark.fits"), []int{n, n}, dark, nil, 0)
	writeFITS(t, p("flat.fits"), []int{n, n}, flat, nil, 0)
	field := p("field/burst-0001.fits")
	run("restore", field, "--site", site, "--out", p("restored.fits"), "--dark", p("dark.fits"), "--flat", p("flat.fits"), "--polish", "1", "--quiet")
	exists("restored.fits", "restored_preview.png", "restored_patches.csv", "restored_summary.json")
	run("restore", field, "--site", site, "--out", p("merged.fits"), "--shard", "0/2", "--quiet")
	run("restore", field, "--site", site, "--out", p("merged.fits"), "--shard", "1/2", "--quiet")
	exists("merged.part-0-of-2.fits", "merged.part-1-of-2.fits")
	run("restore", "merge", "--out", p("merged.fits"))
	exists("merged.fits")

	run("compare", p("patch/burst-0001.fits"), "--site", site, "--out", p("report"), "--polish", "1", "--iterations", "5")
	exists("report/index.html", "report/patches.csv", "report/coefficients.png")

	// The README's first command, on a smaller field.
	run("demo", "--out", p("demo"), "--field", "128", "--frames", "4", "--polish", "1")
	exists("demo/burst/burst-0001.fits", "demo/restored.fits", "demo/restored_preview.png", "demo/report/index.html")
}
