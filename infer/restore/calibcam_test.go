package restore

import (
	"math"
	"path/filepath"
	"strings"
	"testing"

	"pdwave/model/burst"
	"pdwave/model/fits"
)

// writeFrame writes a 2-D (or, with nz > 1, 3-D) float image.
func writeFrame(t *testing.T, path string, nx, ny, nz int, data []float64) {
	t.Helper()
	dims := []int{nx, ny}
	if nz > 1 {
		dims = append(dims, nz)
	}
	if err := fits.WriteFile(path, &fits.Image{Dims: dims, Data: data}); err != nil {
		t.Fatal(err)
	}
}

// calScene is a burst whose true frames are known and whose stored frames
// carry each camera's own dark and gain: stored = true·gain_c + dark_c.
type calScene struct {
	nx, ny      int
	truth       [2][]float64
	dark, gain  [2][]float64
	path        string
	darks, flat [2]string
}

func newCalScene(t *testing.T, dir string) *calScene {
	const nx, ny, frames = 16, 12, 2
	s := &calScene{nx: nx, ny: ny}
	b := burst.New(nx, ny, frames)
	for c := 0; c < 2; c++ {
		s.truth[c] = make([]float64, nx*ny)
		s.dark[c] = make([]float64, nx*ny)
		s.gain[c] = make([]float64, nx*ny)
		for i := range s.truth[c] {
			x, y := float64(i%nx), float64(i/nx)
			s.truth[c][i] = 1000 + 200*math.Sin(0.7*x+float64(c))*math.Cos(0.5*y)
			s.dark[c][i] = 100 + 30*float64(c) + 0.5*x - 0.25*y // camera 2 runs warmer
			s.gain[c][i] = 1 + 0.1*math.Sin(0.3*x*float64(c+1)) + 0.05*float64(c)
		}
		for f := 0; f < frames; f++ {
			for i := range b.Data[c][f] {
				b.Data[c][f][i] = s.truth[c][i]*s.gain[c][i] + s.dark[c][i]
			}
		}
		// The dark as a stack of two frames whose mean is the dark.
		stack := make([]float64, 2*nx*ny)
		for i, v := range s.dark[c] {
			stack[i], stack[nx*ny+i] = v-3, v+3
		}
		s.darks[c] = filepath.Join(dir, "dark"+string(rune('1'+c))+".fits")
		writeFrame(t, s.darks[c], nx, ny, 2, stack)
		s.flat[c] = filepath.Join(dir, "flat"+string(rune('1'+c))+".fits")
		writeFrame(t, s.flat[c], nx, ny, 1, s.gain[c])
	}
	s.path = filepath.Join(dir, "burst.fits")
	if err := burst.Write(s.path, b, nil); err != nil {
		t.Fatal(err)
	}
	return s
}

// TestCalibrationsPerCamera: each camera's dark (a stack, averaged) and
// flat recover its true frames to the float32 precision of the file, up
// to the flat's normalisation (the mean gain). Planted: camera 2 given
// camera 1's calibration (k := &cal.Cam[0] in Calibrate) fails channel 2.
func TestCalibrationsPerCamera(t *testing.T) {
	dir := t.TempDir()
	s := newCalScene(t, dir)
	cal, err := LoadCalibrations(CalibFiles{Dark: s.darks, Flat: s.flat, NoFind: true})
	if err != nil {
		t.Fatal(err)
	}
	b, err := burst.ReadFiles([]string{s.path}, burst.Options{Calibrate: cal})
	if err != nil {
		t.Fatal(err)
	}
	for c := 0; c < 2; c++ {
		var mean float64
		for _, g := range s.gain[c] {
			mean += g / float64(len(s.gain[c]))
		}
		for i, v := range b.Data[c][1] {
			want := s.truth[c][i] * mean
			if math.Abs(v-want) > 1e-4*want {
				t.Fatalf("channel %d pixel %d: %g, want %g", c+1, i, v, want)
			}
		}
	}
	if b.Masked != [2]int{} {
		t.Errorf("masked %v, want none", b.Masked)
	}
}

// TestCalibrationsBad: hot pixels planted in camera 2's dark and a dead
// one in camera 1's flat are found (FindBad), set undefined and filled by
// the reader, counted in PDHOT/PDDEAD and Burst.Masked; a bad-pixel map
// replaces the search; too many bad pixels and a size mismatch are one
// line each. Planted: the MAD dropped from FindBad's hot threshold (σ =
// MinDarkSigma only) fails the counts here and TestFindBadMAD.
func TestCalibrationsBad(t *testing.T) {
	dir := t.TempDir()
	s := newCalScene(t, dir)
	const hot1, hot2, dead = 20, 77, 5
	d2 := append([]float64(nil), s.dark[1]...)
	d2[hot1] += 5000
	d2[hot2] += 800
	writeFrame(t, s.darks[1], s.nx, s.ny, 1, d2)
	g1 := append([]float64(nil), s.gain[0]...)
	g1[dead] = 0.2
	writeFrame(t, s.flat[0], s.nx, s.ny, 1, g1)
	cal, err := LoadCalibrations(CalibFiles{Dark: s.darks, Flat: s.flat})
	if err != nil {
		t.Fatal(err)
	}
	if k := cal.Cam; k[0].Hot != 0 || k[0].Dead != 1 || k[1].Hot != 2 || k[1].Dead != 0 {
		t.Fatalf("hot/dead %d/%d, %d/%d; want 0/1, 2/0", k[0].Hot, k[0].Dead, k[1].Hot, k[1].Dead)
	}
	b, err := burst.ReadFiles([]string{s.path}, burst.Options{Calibrate: cal})
	if err != nil {
		t.Fatal(err)
	}
	if b.Masked != [2]int{2, 4} { // per frame 1 and 2, two frames
		t.Errorf("masked %v, want [2 4]", b.Masked)
	}
	if v := b.Data[1][0][hot1]; math.IsNaN(v) || math.Abs(v-s.truth[1][hot1]) > 0.3*s.truth[1][hot1] {
		t.Errorf("hot pixel filled with %g, true %g", v, s.truth[1][hot1])
	}
	cards := map[string]any{}
	for _, c := range cal.Cards() {
		cards[c.Key] = c.Value
	}
	if cards["PDHOT2"] != 2 || cards["PDDEAD1"] != 1 {
		t.Errorf("cards %v", cards)
	}
	// A map instead: 3 pixels of camera 1, none found by search.
	m := make([]float64, s.nx*s.ny)
	m[0], m[1], m[2] = 1, -1, 7
	mp := filepath.Join(dir, "bad.fits")
	writeFrame(t, mp, s.nx, s.ny, 1, m)
	cal, err = LoadCalibrations(CalibFiles{Dark: s.darks, Bad: [2]string{mp, ""}})
	if err != nil || cal.Cam[0].Mapped != 3 || cal.Cam[0].Hot != 0 || cal.Cam[1].Hot != 2 {
		t.Errorf("map: %v %+v", err, cal)
	}
	// Too many: a map marking 10 % of camera 2.
	for i := range m {
		m[i] = 0
		if i%10 == 0 {
			m[i] = 1
		}
	}
	writeFrame(t, mp, s.nx, s.ny, 1, m)
	_, err = LoadCalibrations(CalibFiles{Bad: [2]string{"", mp}})
	if err == nil || !strings.Contains(err.Error(), "camera 2: 20 of its 16×12 pixels (10.4 %) are bad") || strings.Contains(err.Error(), "\n") {
		t.Errorf("too many: %v", err)
	}
	// Size mismatch against the burst: one line naming the file.
	small := filepath.Join(dir, "small.fits")
	writeFrame(t, small, 8, 8, 1, make([]float64, 64))
	cal, err = LoadCalibrations(CalibFiles{Dark: [2]string{s.darks[0], small}})
	if err != nil {
		t.Fatal(err)
	}
	_, err = burst.ReadFiles([]string{s.path}, burst.Options{Calibrate: cal})
	if err == nil || !strings.Contains(err.Error(), "camera 2's calibration frames ("+small+") are 8×8, the burst's frames 16×12") || strings.Contains(err.Error(), "\n") {
		t.Errorf("size mismatch: %v", err)
	}
}

// TestFindBadMAD: the robust threshold on a dark of known spread. A
// dark of 98, 100 and 102 in equal thirds (99 pixels), two of the 100s
// raised to 114 and 115, has median 100 and MAD 2 (the empirical
// quantile, gonum stat.Empirical: the 50th of 99 sorted values), so σ =
// 1.4826·2 = 2.965 (Rousseeuw & Croux 1993) and the hot limit 100 + 5σ =
// 114.83 (hand-computed): 114 is not hot, 115 is. A flat pixel below half
// the median is dead, one at 0.55 of it is not.
func TestFindBadMAD(t *testing.T) {
	dark := make([]float64, 99)
	flat := make([]float64, 99)
	for i := range dark {
		dark[i] = 100 + 2*float64(i%3-1)
		flat[i] = 1
	}
	dark[1], dark[4] = 114, 115
	flat[7], flat[8] = 0.49, 0.55
	bad, hot, dead := FindBad(dark, flat)
	if hot != 1 || dead != 1 || !bad[4] || bad[1] || !bad[7] || bad[8] {
		t.Errorf("hot %d dead %d, bad %v", hot, dead, bad[:9])
	}
}
