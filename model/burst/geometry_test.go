package burst

import (
	"encoding/json"
	"math"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
)

// allOrientations returns the 32 Orientations of the four settings
// (transpose, quarter turns 0–3, flips), the dihedral group counted with
// repeats.
func allOrientations() []Orientation {
	var out []Orientation
	for t := 0; t < 2; t++ {
		for q := 0; q < 4; q++ {
			for fx := 0; fx < 2; fx++ {
				for fy := 0; fy < 2; fy++ {
					out = append(out, Orientation{Transpose: t == 1, RotateDeg: 90 * q, FlipX: fx == 1, FlipY: fy == 1})
				}
			}
		}
	}
	return out
}

// TestOrientNumpy checks every Orientation of a 5×3 image against numpy
// (numpy.transpose, numpy.rot90, numpy.flip; numpy's arrays index [y, x]
// with row 0 = FITS row 1, so a counter-clockwise quarter turn with y up,
// as FITS viewers show the image, is rot90(a, -1) in numpy's terms: numpy
// turns "from the first axis towards the second", counter-clockwise with
// row 0 on top). Hand check beside it: [a b] turned 90° puts b (the right
// edge) on top. Planted: the quarter turn clockwise (src (h−1−y', x'))
// fails both.
func TestOrientNumpy(t *testing.T) {
	im, _, _ := orient([]float64{1, 2}, 2, 1, Orientation{RotateDeg: 90})
	if im[0] != 1 || im[1] != 2 { // out(0,0) = a at the bottom, out(0,1) = b on top
		t.Fatalf("[1 2] turned 90° = %v (1 column, bottom first), want [1 2]", im)
	}
	py := needAstropy(t)
	const nx, ny = 5, 3
	src := make([]float64, nx*ny)
	for i := range src {
		src[i] = float64(10*(i/nx) + i%nx)
	}
	script := `
import sys, json, numpy as np
a = np.arange(15).reshape(3, 5)
a = (a // 5) * 10 + a % 5
out = []
for o in json.loads(sys.stdin.read()):
    b = a
    if o["Transpose"]: b = b.T
    b = np.rot90(b, -(o["RotateDeg"] // 90))
    if o["FlipX"]: b = np.flip(b, 1)
    if o["FlipY"]: b = np.flip(b, 0)
    out.append({"nx": b.shape[1], "ny": b.shape[0], "pix": b.ravel().tolist()})
print(json.dumps(out))
`
	os := allOrientations()
	in, _ := json.Marshal(os)
	cmd := exec.Command(py, "-c", script)
	cmd.Stdin = strings.NewReader(string(in))
	outb, err := cmd.Output()
	if err != nil {
		t.Fatalf("numpy: %v", err)
	}
	var want []struct {
		Nx, Ny int
		Pix    []float64
	}
	if err := json.Unmarshal(outb, &want); err != nil {
		t.Fatal(err)
	}
	for k, o := range os {
		got, gx, gy := orient(src, nx, ny, o)
		if gx != want[k].Nx || gy != want[k].Ny {
			t.Errorf("%+v: %d×%d, numpy %d×%d", o, gx, gy, want[k].Nx, want[k].Ny)
			continue
		}
		for i := range got {
			if got[i] != want[k].Pix[i] {
				t.Errorf("%+v: %v, numpy %v", o, got, want[k].Pix)
				break
			}
		}
	}
}

// inverse returns an Orientation undoing o on nx×ny images, found among
// all Orientations (orient itself is checked against numpy above).
func inverse(t *testing.T, o Orientation, nx, ny int) Orientation {
	t.Helper()
	src := make([]float64, nx*ny)
	for i := range src {
		src[i] = float64(i)
	}
	fwd, w, h := orient(src, nx, ny, o)
	for _, p := range allOrientations() {
		back, bw, bh := orient(fwd, w, h, p)
		if bw == nx && bh == ny && equal(back, src) {
			return p
		}
	}
	t.Fatalf("no inverse of %+v", o)
	return Orientation{}
}

func equal(a, b []float64) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// writeTurned writes b with each channel turned by the inverse of the
// geometry's orientation (as the cameras would store it) and returns the
// path.
func writeTurned(t *testing.T, dir string, b *Burst, g Geometry) string {
	t.Helper()
	w := *b
	w.Data = [2][][]float64{}
	nx, ny := b.Nx, b.Ny
	for c := range b.Data {
		inv := inverse(t, g.Channel[c], b.Nx, b.Ny)
		for _, im := range b.Data[c] {
			var turned []float64
			turned, nx, ny = orient(im, b.Nx, b.Ny, inv)
			w.Data[c] = append(w.Data[c], turned)
		}
	}
	w.Nx, w.Ny = nx, ny
	w.Object = nil
	path := filepath.Join(dir, "turned.fits")
	if err := Write(path, &w, nil); err != nil {
		t.Fatal(err)
	}
	return path
}

// TestGeometryReadBack writes bursts whose channels were flipped, turned
// and transposed as stored, and reads them back with the geometry: equal
// to the unturned burst, PDGEOM and the HISTORY line recorded. Planted:
// applyGeometry not called from finish fails every case.
func TestGeometryReadBack(t *testing.T) {
	dir := t.TempDir()
	for _, g := range []Geometry{
		{Channel: [2]Orientation{{}, {FlipX: true}}},
		{Channel: [2]Orientation{{}, {FlipY: true}}},
		{Channel: [2]Orientation{{}, {RotateDeg: 90}}},
		{Channel: [2]Orientation{{}, {RotateDeg: -90, FlipX: true}}},
		{Channel: [2]Orientation{{}, {Transpose: true}}},
		{Channel: [2]Orientation{{FlipY: true}, {Transpose: true, RotateDeg: 180}}},
	} {
		b := testBurst(8, 8, 2, 3)
		b.Object = nil
		path := writeTurned(t, dir, b, g)
		got, err := ReadFiles([]string{path}, Options{Geometry: g})
		if err != nil {
			t.Fatalf("%s: %v", g, err)
		}
		for c := range b.Data {
			for f := range b.Data[c] {
				for i, v := range b.Data[c][f] {
					if math.Abs(got.Data[c][f][i]-v) > 1e-4*math.Abs(v) { // float32 file
						t.Fatalf("%s: channel %d frame %d pixel %d = %g, want %g", g, c+1, f+1, i, got.Data[c][f][i], v)
					}
				}
			}
		}
		if v, ok := cardValue(got.Cards, GeometryKey); !ok || v != g.String() || got.Geometry != g.String() {
			t.Errorf("%s: PDGEOM = %v (%v), Geometry %q", g, v, ok, got.Geometry)
		}
		// Read again after writing: not turned twice.
		again := filepath.Join(dir, "again.fits")
		if err := Write(again, got, nil); err != nil {
			t.Fatal(err)
		}
		twice, err := ReadFiles([]string{again}, Options{Geometry: g})
		if err != nil {
			t.Fatal(err)
		}
		if !equal(twice.Data[1][0], got.Data[1][0]) {
			t.Errorf("%s: a burst holding PDGEOM was turned again", g)
		}
	}
}

// TestGeometryNonSquare: a quarter turn of one channel of a non-square
// burst is refused with one line; of both channels it is read.
func TestGeometryNonSquare(t *testing.T) {
	dir := t.TempDir()
	b := testBurst(6, 4, 1, 3)
	path := filepath.Join(dir, "b.fits")
	if err := Write(path, b, nil); err != nil {
		t.Fatal(err)
	}
	_, err := ReadFiles([]string{path}, Options{Geometry: Geometry{Channel: [2]Orientation{{}, {RotateDeg: 90}}}})
	if err == nil || !strings.Contains(err.Error(), "after orientation") || strings.Contains(err.Error(), "\n") {
		t.Errorf("one channel turned: %v", err)
	}
	got, err := ReadFiles([]string{path}, Options{Geometry: Geometry{Channel: [2]Orientation{{RotateDeg: 90}, {RotateDeg: 90}}}})
	if err != nil || got.Nx != 4 || got.Ny != 6 || len(got.Object) != 24 {
		t.Errorf("both turned: %v", err)
	}
	if _, ok := cardValue(got.Cards, "CRPIX1"); ok {
		t.Error("WCS of the stored image kept after reorienting channel 1")
	}
}

// gauss is a Gaussian spot of width s px at (x0, y0) on an nx×ny frame.
func gauss(nx, ny int, x0, y0, s float64) []float64 {
	im := make([]float64, nx*ny)
	for i := range im {
		dx, dy := float64(i%nx)-x0, float64(i/nx)-y0
		im[i] = 100 + 1000*math.Exp(-(dx*dx+dy*dy)/(2*s*s))
	}
	return im
}

// TestGeometryRegistration: channel 2 displaced by a known offset (and
// magnified) as stored is put back onto channel 1. The spot is a Gaussian
// of σ = 3 px (band-limited to ~1e-9 of its peak at Nyquist), so the
// Fourier shift must restore it to 1e-6 of the peak; cubic convolution
// (Keys 1981, error O(h³) for smooth data) to 1 % of the peak. Planted:
// the ramp's sign flipped (the offset doubled instead of removed) fails
// the first; the magnification inverted fails the second.
func TestGeometryRegistration(t *testing.T) {
	const nx, ny, s = 64, 60, 3.0
	x0, y0 := 30.3, 27.6 // ≥ 8σ from every edge: the mirror-extended frame has no kink there
	for _, g := range []Geometry{
		{OffsetX: 2.35, OffsetY: -1.7},
		{OffsetX: 0.4, OffsetY: -0.3, Magnification: 1.05},
	} {
		m := g.Magnification
		if m == 0 {
			m = 1
		}
		cx, cy := float64(nx-1)/2, float64(ny-1)/2
		b := New(nx, ny, 1)
		b.Data[0][0] = gauss(nx, ny, x0, y0, s)
		b.Data[1][0] = gauss(nx, ny, cx+m*(x0-cx)+g.OffsetX, cy+m*(y0-cy)+g.OffsetY, s*m)
		if err := b.applyGeometry(g); err != nil {
			t.Fatal(err)
		}
		tol := 1e-6 * 1000
		if g.Magnification != 0 {
			tol = 0.01 * 1000
		}
		worst := 0.0
		for i, v := range b.Data[0][0] {
			worst = math.Max(worst, math.Abs(b.Data[1][0][i]-v))
		}
		if worst > tol {
			t.Errorf("%s: worst difference %.3g, want ≤ %.3g", g, worst, tol)
		}
	}
}

// TestGeometryValidate: bad values give one line naming the value.
func TestGeometryValidate(t *testing.T) {
	for _, c := range []struct {
		g    Geometry
		want string
	}{
		{Geometry{Channel: [2]Orientation{{RotateDeg: 45}}}, "45° is not a multiple of 90°"},
		{Geometry{OffsetX: math.NaN()}, "x offset NaN px"},
		{Geometry{OffsetY: 1e6}, "y offset 1e+06 px"},
		{Geometry{Magnification: 1.5}, "magnification 1.5"},
		{Geometry{Magnification: math.Inf(1)}, "magnification +Inf"},
	} {
		err := c.g.Validate()
		if err == nil || !strings.Contains(err.Error(), c.want) || strings.Contains(err.Error(), "\n") {
			t.Errorf("%+v: %v, want %q", c.g, err, c.want)
		}
	}
	if err := (Geometry{Magnification: 1.002, OffsetX: -3}).Validate(); err != nil {
		t.Error(err)
	}
}

// TestFillUndefined: an undefined pixel takes the median of its good
// 8-neighbours (hand-computed: neighbours 1..8 without 5 → median 4.5 of
// 1,2,3,4,6,7,8 and the clipped 100 → (4+6)/2 = 5); a 3×3 hole fills
// inwards; reading counts them and writes PDMASK1/2. Planted: the fill
// disabled (FillUndefined returning before the passes) fails here and in
// TestReadMasked.
func TestFillUndefined(t *testing.T) {
	im := []float64{
		1, 2, 3,
		4, math.NaN(), 6,
		7, 8, 100,
	}
	if n := FillUndefined(im, 3, 3); n != 1 || im[4] != 5 {
		t.Errorf("filled %d, centre %g, want 1 and 5", n, im[4])
	}
	hole := make([]float64, 49)
	for i := range hole {
		hole[i] = 7
		if x, y := i%7, i/7; x >= 2 && x <= 4 && y >= 2 && y <= 4 {
			hole[i] = math.Inf(-1)
		}
	}
	if n := FillUndefined(hole, 7, 7); n != 9 {
		t.Errorf("hole: filled %d, want 9", n)
	}
	for i, v := range hole {
		if v != 7 {
			t.Fatalf("hole pixel %d = %g, want 7", i, v)
		}
	}
}

// TestReadMasked reads a burst with a NaN pixel (filled, counted,
// recorded) and one with too many (refused with one line).
func TestReadMasked(t *testing.T) {
	dir := t.TempDir()
	b := testBurst(8, 8, 2, 3)
	path := filepath.Join(dir, "nan.fits")
	if err := Write(path, b, nil); err != nil {
		t.Fatal(err)
	}
	// NaN pixels come from a Calibrator here (NaN pixels in files are in
	// TestBadInput): the reader fills both the same way.
	got, err := ReadFiles([]string{path}, Options{Calibrate: nanAt{1, 9, 1}})
	if err != nil {
		t.Fatal(err)
	}
	if got.Masked != [2]int{0, 2} || undefined(got.Data[1][0][9]) {
		t.Errorf("masked %v, pixel %g", got.Masked, got.Data[1][0][9])
	}
	if v, ok := cardValue(got.Cards, "PDMASK2"); !ok || v != 2 {
		t.Errorf("PDMASK2 = %v", v)
	}
	_, err = ReadFiles([]string{path}, Options{Calibrate: nanAt{0, 0, 4}})
	if err == nil || !strings.Contains(err.Error(), "4 of the 8×8 pixels (6.2 %) are undefined") || strings.Contains(err.Error(), "\n") {
		t.Errorf("too many: %v", err)
	}
}

// nanAt is a Calibrator setting n pixels from index i of every frame of
// channel c to NaN.
type nanAt struct{ c, i, n int }

func (z nanAt) Calibrate(c, nx, ny int, frames [][]float64) error {
	if c != z.c {
		return nil
	}
	for _, fr := range frames {
		for k := 0; k < z.n; k++ {
			fr[z.i+k] = math.NaN()
		}
	}
	return nil
}
