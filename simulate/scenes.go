package simulate

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strings"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/stat"
)

// Scene draws object maps (the true sky) for the simulator.
type Scene interface {
	// Draw fills dst (length nx*ny, row-major, x fastest) with a positive
	// map of mean ≈ 1 sampled at pixelScale arcsec per pixel and returns
	// a short description of what it drew (for provenance, e.g.
	// "granulation" or "real:brick.fits @12,300 rot90 flipx c=0.131").
	// It panics if len(dst) != nx*ny, returns an error for input it
	// cannot draw, and is deterministic given rng.
	Draw(dst []float64, nx, ny int, pixelScale float64, rng *rand.Rand) (string, error)
}

// GranulationScene draws synthetic granulation (Granulation) with Params.
type GranulationScene struct {
	Params GranulationParams
}

// Draw implements Scene; the description is "granulation".
func (g GranulationScene) Draw(dst []float64, nx, ny int, pixelScale float64, rng *rand.Rand) (string, error) {
	if err := Granulation(dst, nx, ny, pixelScale, g.Params, rng); err != nil {
		return "", err
	}
	return "granulation", nil
}

// SceneImage is one image of an ImageScene: Nx×Ny values, row-major, any
// positive scale, one image pixel per canvas pixel.
type SceneImage struct {
	Name   string // shown in descriptions (the file's base name)
	Data   []float64
	Nx, Ny int
}

// DefaultImageContrast is the range of rms contrast an ImageScene with a
// zero Contrast draws its windows at.
var DefaultImageContrast = [2]float64{0.06, 0.25}

// ImageScene draws windows of real images: per Draw, an image chosen
// uniformly, one of the eight orientations (0, 90, 180 or 270° rotation,
// each with or without a left–right flip) chosen uniformly, a window of the
// canvas size at a uniform position, and an rms contrast drawn uniformly in
// Contrast. Images are used at the canvas sampling whatever pixelScale is
// (no resampling). A canvas wider or taller than the (rotated) image is
// filled by mirror tiling: the image reflected about its edges, period
// twice its size, at a random phase; the seams are mirror lines, not
// steps. Windows with no structure (rms below 0.1 % of the mean, or no
// flux) are redrawn up to 8 times before Draw gives up with an error.
type ImageScene struct {
	Images   []SceneImage
	Contrast [2]float64 // lowest and highest rms contrast (std/mean) of a window; zero = DefaultImageContrast
}

// NewImageScene reads FITS images (ReadObject: first image HDU with two
// or more axes) into an ImageScene with the default contrast range; each
// is named by its file's base name.
func NewImageScene(paths ...string) (*ImageScene, error) {
	if len(paths) == 0 {
		return nil, errors.New("simulate: image scene: no images given")
	}
	s := &ImageScene{}
	for _, p := range paths {
		data, nx, ny, err := ReadObject(p)
		if err != nil {
			return nil, fmt.Errorf("simulate: image scene: %w", err)
		}
		if nx < 2 || ny < 2 {
			return nil, fmt.Errorf("simulate: image scene: %s is %d×%d px, need at least 2×2", p, nx, ny)
		}
		s.Images = append(s.Images, SceneImage{Name: filepath.Base(p), Data: data, Nx: nx, Ny: ny})
	}
	return s, nil
}

// LoadSceneDir reads every FITS file (.fits, .fit, .fts, any case) of dir,
// in name order, into an ImageScene (NewImageScene).
func LoadSceneDir(dir string) (*ImageScene, error) {
	ents, err := os.ReadDir(dir)
	if err != nil {
		return nil, fmt.Errorf("simulate: scene folder: %w", err)
	}
	var paths []string
	for _, e := range ents {
		switch strings.ToLower(filepath.Ext(e.Name())) {
		case ".fits", ".fit", ".fts":
			if !e.IsDir() {
				paths = append(paths, filepath.Join(dir, e.Name()))
			}
		}
	}
	if len(paths) == 0 {
		return nil, fmt.Errorf("simulate: scene folder %s holds no FITS files", dir)
	}
	slices.Sort(paths)
	return NewImageScene(paths...)
}

// SceneDirEnv names the environment variable that overrides where
// FindSceneDir looks for the shipped real scenes.
const SceneDirEnv = "PDWAVE_SCENES"

// FindSceneDir returns the folder of the shipped real scenes: $PDWAVE_SCENES
// if set, else testdata/scenes in the working directory or the nearest
// parent that has one (so it works from the repository root and from a
// package's tests). It errors when neither exists.
func FindSceneDir() (string, error) {
	if d := os.Getenv(SceneDirEnv); d != "" {
		if st, err := os.Stat(d); err != nil || !st.IsDir() {
			return "", fmt.Errorf("simulate: %s=%s is not a folder", SceneDirEnv, d)
		}
		return d, nil
	}
	wd, err := os.Getwd()
	if err != nil {
		return "", fmt.Errorf("simulate: finding the scene folder: %w", err)
	}
	for d := wd; ; d = filepath.Dir(d) {
		p := filepath.Join(d, "testdata", "scenes")
		if st, err := os.Stat(p); err == nil && st.IsDir() {
			return p, nil
		}
		if filepath.Dir(d) == d {
			break
		}
	}
	return "", fmt.Errorf("simulate: no testdata/scenes in %s or its parents; set %s to the folder of real scenes", wd, SceneDirEnv)
}

// contrastRange returns the range after the default, or an error.
func (s *ImageScene) contrastRange() (lo, hi float64, err error) {
	c := s.Contrast
	if c == [2]float64{} {
		c = DefaultImageContrast
	}
	if !(c[0] > 0 && c[1] >= c[0] && c[1] < 10) {
		return 0, 0, fmt.Errorf("simulate: image scene contrast range %g–%g, want 0 < low ≤ high < 10", c[0], c[1])
	}
	return c[0], c[1], nil
}

// Draw implements Scene (see ImageScene).
func (s *ImageScene) Draw(dst []float64, nx, ny int, pixelScale float64, rng *rand.Rand) (string, error) {
	if len(dst) != nx*ny {
		panic(fmt.Sprintf("simulate: scene buffer length %d, want %d×%d", len(dst), nx, ny))
	}
	if len(s.Images) == 0 {
		return "", errors.New("simulate: image scene has no images")
	}
	lo, hi, err := s.contrastRange()
	if err != nil {
		return "", err
	}
	for i, im := range s.Images {
		if im.Nx < 1 || im.Ny < 1 || len(im.Data) != im.Nx*im.Ny {
			return "", fmt.Errorf("simulate: scene image %d (%s): %d values are not %d×%d", i, im.Name, len(im.Data), im.Nx, im.Ny)
		}
	}
	if nx < 1 || ny < 1 {
		return "", fmt.Errorf("simulate: scene canvas %d×%d px", nx, ny)
	}
	for try := 0; try < 8; try++ {
		w := s.drawWindow(rng, nx, ny)
		w.fill(dst, nx, ny)
		m, sd := stat.MeanStdDev(dst, nil)
		if !(m > 0) || !(sd > 1e-3*m) || math.IsInf(m, 0) {
			continue
		}
		c := lo + (hi-lo)*rng.Float64()
		SetContrast(dst, c)
		return w.describe(c), nil
	}
	return "", fmt.Errorf("simulate: image scene: 8 windows of %d×%d px in a row had no structure", nx, ny)
}

// window is one draw of an ImageScene: the image, orientation and origin
// of the window in the oriented image.
type window struct {
	im     *SceneImage
	rot    int  // quarter turns
	flip   bool // left–right flip after the rotation
	x0, y0 int  // origin in the oriented (rotated, flipped) image
}

// drawWindow draws the image, orientation and origin.
func (s *ImageScene) drawWindow(rng *rand.Rand, nx, ny int) window {
	w := window{im: &s.Images[rng.IntN(len(s.Images))]}
	o := rng.IntN(8)
	w.rot, w.flip = o%4, o >= 4
	W, H := w.dims()
	origin := func(size, n int) int {
		if size >= n {
			return rng.IntN(size - n + 1)
		}
		return rng.IntN(2 * size) // mirror tiling at a random phase
	}
	w.x0, w.y0 = origin(W, nx), origin(H, ny)
	return w
}

// dims returns the size of the oriented image.
func (w window) dims() (int, int) {
	if w.rot%2 == 1 {
		return w.im.Ny, w.im.Nx
	}
	return w.im.Nx, w.im.Ny
}

// source returns the pixel of the original image at (u, v) of the
// oriented image: a quarter turn maps oriented (u, v) to source
// (Nx−1−v, u).
func (w window) source(u, v int) (int, int) {
	W, _ := w.dims()
	if w.flip {
		u = W - 1 - u
	}
	nx, ny := w.im.Nx, w.im.Ny
	switch w.rot {
	case 1:
		return nx - 1 - v, u
	case 2:
		return nx - 1 - u, ny - 1 - v
	case 3:
		return v, ny - 1 - u
	}
	return u, v
}

// mirror folds i into [0, n) by reflection about the edges (period 2n,
// edge pixels repeated).
func mirror(i, n int) int {
	i %= 2 * n
	if i < 0 {
		i += 2 * n
	}
	if i >= n {
		i = 2*n - 1 - i
	}
	return i
}

// fill copies the window into dst (nx×ny).
func (w window) fill(dst []float64, nx, ny int) {
	W, H := w.dims()
	for y := 0; y < ny; y++ {
		v := mirror(w.y0+y, H)
		for x := 0; x < nx; x++ {
			sx, sy := w.source(mirror(w.x0+x, W), v)
			dst[y*nx+x] = w.im.Data[sy*w.im.Nx+sx]
		}
	}
}

// describe returns the window's description, e.g.
// "real:brick.fits @12,300 rot90 flipx c=0.131".
func (w window) describe(c float64) string {
	d := fmt.Sprintf("real:%s @%d,%d rot%d", w.im.Name, w.x0, w.y0, 90*w.rot)
	if w.flip {
		d += " flipx"
	}
	return d + fmt.Sprintf(" c=%.3f", c)
}

// Mix draws from one of several scenes, chosen per Draw with probability
// proportional to its weight.
type Mix struct {
	Scenes  []Scene
	Weights []float64 // one per scene, ≥ 0, not all zero
}

// SceneMix returns the default mix for studies, validation and training:
// granulation with params (probability 0.5) or a window of images (0.5).
func SceneMix(params GranulationParams, images *ImageScene) *Mix {
	return &Mix{Scenes: []Scene{GranulationScene{Params: params}, images}, Weights: []float64{0.5, 0.5}}
}

// Draw implements Scene: one uniform deviate picks the scene, which then
// draws; the description is that scene's.
func (m *Mix) Draw(dst []float64, nx, ny int, pixelScale float64, rng *rand.Rand) (string, error) {
	if len(m.Scenes) == 0 || len(m.Weights) != len(m.Scenes) {
		return "", fmt.Errorf("simulate: scene mix of %d scenes with %d weights", len(m.Scenes), len(m.Weights))
	}
	for _, w := range m.Weights {
		if !(w >= 0) || math.IsInf(w, 0) {
			return "", fmt.Errorf("simulate: scene mix weight %g, want finite and ≥ 0", w)
		}
	}
	total := floats.Sum(m.Weights)
	if !(total > 0) {
		return "", errors.New("simulate: scene mix weights are all zero")
	}
	u := rng.Float64() * total
	k := -1
	for i, w := range m.Weights {
		if w > 0 {
			k = i // the last positive weight takes any rounding left over
		}
		if u < w {
			break
		}
		u -= w
	}
	if m.Scenes[k] == nil {
		return "", fmt.Errorf("simulate: scene mix entry %d is nil", k)
	}
	return m.Scenes[k].Draw(dst, nx, ny, pixelScale, rng)
}

// checkFlux reports a non-finite value or a mean that is not positive.
func checkFlux(obj []float64) error {
	for _, v := range obj {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return errors.New("holds a non-finite value")
		}
	}
	if !(floats.Sum(obj) > 0) {
		return errors.New("has no positive flux")
	}
	return nil
}
