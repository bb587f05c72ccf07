package train

import (
	"math"
	"path/filepath"
	"reflect"
	"slices"
	"sync/atomic"
	"testing"

	"pdwave/infer"
	"pdwave/model/burst"
	"pdwave/model/site"
)

// Every flip/rotation maps the square onto itself one to one; the four
// rotations compose to the identity.
func TestDihedralIsPermutation(t *testing.T) {
	const n = 6
	for tr := 0; tr < 8; tr++ {
		seen := map[[2]int]bool{}
		for y := 0; y < n; y++ {
			for x := 0; x < n; x++ {
				sy, sx := infer.TurnPixel(tr, y, x, n)
				if sy < 0 || sy >= n || sx < 0 || sx >= n || seen[[2]int{sy, sx}] {
					t.Fatalf("transform %d maps (%d,%d) to (%d,%d): not a permutation", tr, y, x, sy, sx)
				}
				seen[[2]int{sy, sx}] = true
			}
		}
	}
	im := make([]float64, n*n)
	for i := range im {
		im[i] = float64(i)
	}
	r := im
	for k := 0; k < 4; k++ {
		r = transformSquare(r, 1)
		if k < 3 && r[1] == im[1] && r[n] == im[n] {
			t.Fatalf("rotation %d is the identity", k+1)
		}
	}
	for i := range im {
		if r[i] != im[i] {
			t.Fatalf("four quarter turns moved pixel %d", i)
		}
	}
}

type countingSource struct {
	calls atomic.Int64
	n     int
}

func (c *countingSource) Get(i uint64) (*Sample, error) {
	c.calls.Add(1)
	s := &Sample{Noll: [][]float64{{float64(i)}}}
	for ch := 0; ch < 2; ch++ {
		im := make([]float64, c.n*c.n)
		for k := range im {
			im[k] = float64(i)*1000 + float64(k)
		}
		s.Data[ch] = [][]float64{im}
	}
	return s, nil
}

// ReuseSource draws each base burst once per window of Times steps, under a
// different transform each time, with truth only on the untransformed use.
func TestReuseSource(t *testing.T) {
	base := &countingSource{n: 4}
	r := &ReuseSource{Src: base, Batch: 3, Times: 4}
	seen := map[float64]int{}
	for i := uint64(0); i < 24; i++ {
		s, err := r.Get(i)
		if err != nil {
			t.Fatal(err)
		}
		id := math.Floor(s.Data[0][0][0] / 1000)
		seen[id]++
		if (i/3)%4 == 0 {
			if s.Noll == nil || s.Data[0][0][1] != id*1000+1 {
				t.Fatalf("sample %d: first use must be the untransformed burst with truth", i)
			}
		} else if s.Noll != nil {
			t.Fatalf("sample %d: transformed burst carries truth", i)
		}
	}
	if got := base.calls.Load(); got != 6 {
		t.Errorf("24 samples drew %d base bursts, want 6", got)
	}
	for id, k := range seen {
		if k != 4 {
			t.Errorf("base burst %v used %d times, want 4", id, k)
		}
	}
}

// A folder of burst files yields patch-sized, frame-sized samples whose
// pixels come from the files, the same for the same index.
func TestFolderSource(t *testing.T) {
	dir := t.TempDir()
	b := burst.New(20, 18, 5)
	vals := map[float64]bool{}
	for c := 0; c < 2; c++ {
		for f := 0; f < 5; f++ {
			for k := range b.Data[c][f] {
				v := float64(c*100000 + f*1000 + k)
				b.Data[c][f][k] = v
				vals[v] = true
			}
		}
	}
	if err := burst.Write(filepath.Join(dir, "a.fits"), b, nil); err != nil {
		t.Fatal(err)
	}
	src, err := NewFolderSource(dir, 16, 3, 1)
	if err != nil {
		t.Fatal(err)
	}
	for i := uint64(0); i < 5; i++ {
		s, err := src.Get(i)
		if err != nil {
			t.Fatal(err)
		}
		again, _ := src.Get(i)
		if len(s.Data[0]) != 3 || len(s.Data[1]) != 3 || len(s.Data[0][0]) != 256 {
			t.Fatalf("sample %d has %d/%d frames of %d px", i, len(s.Data[0]), len(s.Data[1]), len(s.Data[0][0]))
		}
		for c := 0; c < 2; c++ {
			for f, im := range s.Data[c] {
				for k, v := range im {
					if !vals[v] || int(v)/100000 != c || again.Data[c][f][k] != v {
						t.Fatalf("sample %d channel %d pixel %d = %v: not from the file's channel or not reproducible", i, c, k, v)
					}
				}
			}
		}
	}
	if _, err := NewFolderSource(t.TempDir(), 16, 3, 1); err == nil {
		t.Error("empty folder accepted")
	}
	if _, err := NewFolderSource(dir, 32, 3, 1); err == nil {
		t.Error("bursts smaller than the patch accepted")
	}
	if _, err := NewFolderSource(dir, 16, 99, 1); err == nil {
		t.Error("bursts with fewer frames than training uses accepted")
	}
}

// TestFolderSourceGeometry: a folder's bursts are read with the site's
// camera geometry (here both cameras stored transposed), as the other
// commands read them. Planted: the folder read with burst.Read (no
// options) fails.
func TestFolderSourceGeometry(t *testing.T) {
	dir := t.TempDir()
	const nx, ny = 20, 18
	b := burst.New(nx, ny, 3)
	for c := 0; c < 2; c++ {
		for f := 0; f < 3; f++ {
			for k := range b.Data[c][f] {
				b.Data[c][f][k] = float64(c*100000 + f*1000 + k)
			}
		}
	}
	if err := burst.Write(filepath.Join(dir, "a.fits"), b, nil); err != nil {
		t.Fatal(err)
	}
	g := burst.Geometry{Channel: [2]burst.Orientation{{Transpose: true}, {Transpose: true}}}
	src, err := NewFolderSourceWith(dir, 16, 3, 1, burst.Options{Geometry: g})
	if err != nil {
		t.Fatal(err)
	}
	got, err := src.read(src.Files[0])
	if err != nil {
		t.Fatal(err)
	}
	if got.Nx != ny || got.Ny != nx || got.Geometry == "" {
		t.Fatalf("read as %d×%d with geometry %q, want %d×%d transposed", got.Nx, got.Ny, got.Geometry, ny, nx)
	}
	for c := 0; c < 2; c++ {
		for y := 0; y < got.Ny; y++ {
			for x := 0; x < got.Nx; x++ {
				if v, w := got.Data[c][2][y*got.Nx+x], b.Data[c][2][x*nx+y]; v != w {
					t.Fatalf("channel %d pixel (%d, %d) = %v, stored (%d, %d) = %v", c, x, y, v, y, x, w)
				}
			}
		}
	}
}

// TestFromSite checks the setup and simulator configuration of the demo
// site: one instrument in both (the --modes override included), and the
// median D/r0 that of the site's r0 at 600 nm, r0 = 0.08 m·(600/500)^(6/5)
// (Roddier 1981, r0 ∝ λ^(6/5)), D/r0 = 0.5 m/r0 = 5.022.
func TestFromSite(t *testing.T) {
	st, err := site.Load("../testdata/demo-site.yaml")
	if err != nil {
		t.Fatal(err)
	}
	su, sc, err := FromSite(st, 21, "")
	if err != nil {
		t.Fatal(err)
	}
	wantDR := 0.5 / (0.08 * math.Pow(600.0/500, 6.0/5))
	if su.Telescope.Diameter != 0.5 || !slices.Equal(su.Diversity, []float64{0, 1}) || su.Patch != 64 || su.Frames != 16 ||
		su.Modes != 21 || su.Basis != "kl" || math.Abs(su.DOverR0-wantDR) > 1e-12 {
		t.Fatalf("setup %+v", su)
	}
	if !reflect.DeepEqual(su.Instrument, sc.Instrument) || sc.Frames != su.Frames {
		t.Fatalf("setup instrument %+v, simulator %+v", su.Instrument, sc.Instrument)
	}
	if len(sc.Turbulence.Layers) != 3 || sc.Turbulence.L0 != 30 || sc.FrameInterval != 0.005 || sc.Camera.Photons != 10000 ||
		math.Abs(sc.Turbulence.R0-st.R0Median()) > 1e-15 {
		t.Fatalf("simulator config %+v", sc)
	}
}
