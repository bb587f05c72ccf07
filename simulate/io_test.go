package simulate

import (
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"pdwave/model/burst"
	"pdwave/model/fits"
)

// TestPatchFITSRoundTrip writes a simulated burst with burst.Write and reads
// it back: data (float32), optics, truth and object survive.
func TestPatchFITSRoundTrip(t *testing.T) {
	c := demoConfig()
	c.Frames = 3
	s := newSim(t, c)
	r, err := s.Patch(rand.New(rand.NewPCG(14, 14)), Options{})
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "b.fits")
	if err := burst.Write(path, r.Burst, fits.Provenance("test", map[string]string{"seed": "14"})); err != nil {
		t.Fatal(err)
	}
	b, err := burst.Read(path)
	if err != nil {
		t.Fatal(err)
	}
	if b.Nx != 64 || b.Ny != 64 || b.Frames != 3 || b.Truth == nil || b.Object == nil {
		t.Fatalf("read back %d×%d×%d, truth %v, object %d", b.Nx, b.Ny, b.Frames, b.Truth != nil, len(b.Object))
	}
	if b.Data[1][2][100] != r.Burst.Data[1][2][100] { // integers < 2^24 are exact in float32
		t.Errorf("data %g, wrote %g", b.Data[1][2][100], r.Burst.Data[1][2][100])
	}
	if math.Abs(b.Optics.DiversityPV.V-1) > 1e-6 || math.Abs(b.Optics.PixelScale.V/c.Telescope.PixelScale-1) > 1e-6 {
		t.Errorf("optics %+v", b.Optics)
	}
	if b.Truth.Basis != "kl" || b.Truth.Modes != 36 || b.Truth.Coeffs[2][5] != r.Burst.Truth.Coeffs[2][5] {
		t.Errorf("truth %s %d, coefficient %g vs %g", b.Truth.Basis, b.Truth.Modes, b.Truth.Coeffs[2][5], r.Burst.Truth.Coeffs[2][5])
	}
}

// TestReadObject reads an object map written as a float32 FITS image and
// uses it for a patch; bad files give errors, not panics.
func TestReadObject(t *testing.T) {
	dir := t.TempDir()
	// At least the Patch canvas: N + Oversample·N = 192 px for the demo.
	const nx, ny = 200, 200
	data := make([]float64, nx*ny)
	for i := range data {
		data[i] = 100 + float64(i%nx)
	}
	path := filepath.Join(dir, "obj.fits")
	if err := fits.WriteFile(path, &fits.Image{Dims: []int{nx, ny}, Data: data}); err != nil {
		t.Fatal(err)
	}
	got, gx, gy, err := ReadObject(path)
	if err != nil {
		t.Fatal(err)
	}
	if gx != nx || gy != ny || got[3*nx+7] != data[3*nx+7] {
		t.Fatalf("read %d×%d, pixel %g, want %d×%d, %g", gx, gy, got[3*nx+7], nx, ny, data[3*nx+7])
	}
	c := demoConfig()
	c.Frames = 1
	c.Camera.Photons = 0
	s := newSim(t, c)
	r, err := s.Patch(rand.New(rand.NewPCG(1, 1)), Options{Object: got, ObjectNx: gx, ObjectNy: gy, R0: 1000})
	if err != nil {
		t.Fatal(err)
	}
	// A ramp along x: the truth object is a window of the map scaled to the
	// canvas mean, so successive pixels of a row differ by a constant.
	o := r.Burst.Object
	if d1, d2 := o[1]-o[0], o[40]-o[39]; math.Abs(d1-d2) > 1e-12 || d1 <= 0 {
		t.Errorf("object window is not a ramp: steps %g, %g", d1, d2)
	}
	if _, err := s.Field(rand.New(rand.NewPCG(1, 1)), 128, 128, Options{Object: got, ObjectNx: gx, ObjectNy: gy}); err == nil {
		t.Error("object map smaller than the field canvas: no error")
	}
	bad := filepath.Join(dir, "bad.fits")
	if err := os.WriteFile(bad, []byte("not a FITS file at all"), 0o644); err != nil {
		t.Fatal(err)
	}
	for _, p := range []string{bad, filepath.Join(dir, "missing.fits")} {
		if _, _, _, err := ReadObject(p); err == nil {
			t.Errorf("%s: no error", p)
		}
	}
}

// TestInvalidInput: bad configurations and options give errors.
func TestInvalidInput(t *testing.T) {
	bad := []func(*Config){
		func(c *Config) { c.Patch = 4 },
		func(c *Config) { c.Frames = 0 },
		func(c *Config) { c.Modes = 0 },
		func(c *Config) { c.Telescope.PixelScale *= 2 }, // under-sampled
		func(c *Config) { c.Turbulence.R0 = -1 },
		func(c *Config) { c.Turbulence.Layers[1].Weight = 0 },
		func(c *Config) { c.Camera.Bits = 40 },
		func(c *Config) { c.FrameInterval = math.Inf(1) },
		func(c *Config) { c.Diversity = []float64{0.5, 0.5} }, // no diversity
		func(c *Config) { c.Diversity = []float64{0} },        // one channel
		func(c *Config) { c.Diversity = []float64{0, 1, 2} },  // three channels
		func(c *Config) { c.Diversity = []float64{0, math.NaN()} },
	}
	for i, f := range bad {
		c := demoConfig()
		f(&c)
		if _, err := New(c); err == nil {
			t.Errorf("case %d: no error", i)
		}
	}
	c := demoConfig()
	c.Frames = 1
	s := newSim(t, c)
	rng := rand.New(rand.NewPCG(1, 1))
	if _, err := s.Patch(rng, Options{R0: math.NaN()}); err == nil {
		t.Error("r0 NaN: no error")
	}
	if _, err := s.Patch(rng, Options{Object: []float64{1, 2}, ObjectNx: 3, ObjectNy: 3}); err == nil {
		t.Error("object of wrong length: no error")
	}
	if _, err := s.Field(rng, 32, 128, Options{}); err == nil {
		t.Error("field smaller than a patch: no error")
	}
	if _, err := s.Field(rng, 128, 128, Options{NodeSpacing: 1}); err == nil {
		t.Error("node spacing 1: no error")
	}
	if _, err := NewAtmosphere(rng, c.Turbulence, 64, 0.016, Extent{Duration: 1e4}, true); err == nil {
		t.Error("screen beyond MaxScreen: no error")
	}
}
