package train

import (
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"sync"

	"pdwave/infer"
	"pdwave/model/burst"
)

// Sample is one training burst.
type Sample struct {
	Data [2][][]float64 // Data[channel][frame], each Patch×Patch; channel 0 focused
	// Noll holds the true Noll coefficients (frames × ≥ Modes, j = 2..,
	// rad) of simulated bursts; nil for observations.
	Noll [][]float64
	// Simulated bursts also record what made them: the scene
	// (simulate.Result.Scene, e.g. "granulation" or "real:brick.fits @12,300
	// rot90"), the Fried parameter (m, at the observing wavelength) and the
	// mean photo-electrons per pixel, and the diffraction-limited rms
	// contrast the scene was scaled to (0 = the simulator's default, 0.12;
	// the "c=" of a real scene's description is the window's contrast
	// before that scaling). Empty / zero for observations.
	Scene    string
	R0       float64
	Photons  float64
	Contrast float64
}

// Source hands out training bursts. Get must return the same burst for the
// same index (runs are reproducible and resumable) and be safe for
// concurrent use.
type Source interface {
	Get(i uint64) (*Sample, error)
}

// mix derives a well-spread 64-bit value from a seed and an index
// (SplitMix64 finaliser, Steele, Lea & Flood 2014).
func mix(seed, i uint64) uint64 {
	z := seed + 0x9e3779b97f4a7c15*(i+1)
	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9
	z = (z ^ (z >> 27)) * 0x94d049bb133111eb
	return z ^ (z >> 31)
}

// FolderSource draws bursts from the burst FITS files of a folder
// (observations, no truth needed). Burst i is a random file, a random run of
// Frames consecutive frames, a random Patch×Patch crop, and one of the eight
// flips/rotations of the square (the pupil and the defocus are symmetric
// under them, so a transformed burst is a valid burst) — all drawn from
// (seed, i). Files are read once and kept in memory.
type FolderSource struct {
	Files         []string
	Patch, Frames int
	Seed          uint64
	// Reading says how the bursts are read (image HDUs, the site's
	// camera geometry, as every command reading bursts applies it).
	Reading burst.Options

	mu    sync.Mutex
	cache map[string]*burst.Burst
}

// NewFolderSource lists the FITS files of dir (burst.IsFITSName: plain,
// tile- or gzip-compressed), read with the default burst.Options. It
// returns an error if there is none.
func NewFolderSource(dir string, patch, frames int, seed uint64) (*FolderSource, error) {
	return NewFolderSourceWith(dir, patch, frames, seed, burst.Options{})
}

// NewFolderSourceWith is NewFolderSource reading the bursts with opt (the
// site's camera geometry: site.Site.CameraGeometry).
func NewFolderSourceWith(dir string, patch, frames int, seed uint64, opt burst.Options) (*FolderSource, error) {
	ents, err := os.ReadDir(dir)
	if err != nil {
		return nil, fmt.Errorf("reading burst folder: %w", err)
	}
	var files []string
	for _, e := range ents {
		if !e.IsDir() && burst.IsFITSName(e.Name()) {
			files = append(files, filepath.Join(dir, e.Name()))
		}
	}
	if len(files) == 0 {
		return nil, fmt.Errorf("burst folder %s holds no FITS files (%s)", dir, strings.Join(burst.FileExts, ", "))
	}
	sort.Strings(files)
	s := &FolderSource{Files: files, Patch: patch, Frames: frames, Seed: seed, Reading: opt, cache: map[string]*burst.Burst{}}
	// The first file is read now, so that a folder of the wrong kind of
	// bursts is reported before any output is written.
	if _, err := s.read(files[0]); err != nil {
		return nil, err
	}
	return s, nil
}

func (s *FolderSource) read(path string) (*burst.Burst, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if b, ok := s.cache[path]; ok {
		return b, nil
	}
	b, err := burst.ReadFiles([]string{path}, s.Reading)
	if err != nil {
		return nil, err
	}
	if b.Nx < s.Patch || b.Ny < s.Patch {
		return nil, fmt.Errorf("burst %s is %d×%d px, smaller than the %d px patch", path, b.Nx, b.Ny, s.Patch)
	}
	if b.Frames < s.Frames {
		return nil, fmt.Errorf("burst %s has %d frames, training uses %d", path, b.Frames, s.Frames)
	}
	s.cache[path] = b
	return b, nil
}

// Get returns burst i.
func (s *FolderSource) Get(i uint64) (*Sample, error) {
	rng := rand.New(rand.NewPCG(mix(s.Seed, i), 0x5eed))
	path := s.Files[rng.IntN(len(s.Files))]
	b, err := s.read(path)
	if err != nil {
		return nil, err
	}
	f0 := rng.IntN(b.Frames - s.Frames + 1)
	x0 := rng.IntN(b.Nx - s.Patch + 1)
	y0 := rng.IntN(b.Ny - s.Patch + 1)
	tr := rng.IntN(8)
	out := &Sample{}
	n := s.Patch
	for c := 0; c < 2; c++ {
		out.Data[c] = make([][]float64, s.Frames)
		for j := range out.Data[c] {
			src := b.Data[c][f0+j]
			im := make([]float64, n*n)
			for y := 0; y < n; y++ {
				for x := 0; x < n; x++ {
					sy, sx := infer.TurnPixel(tr, y, x, n)
					im[y*n+x] = src[(y0+sy)*b.Nx+x0+sx]
				}
			}
			out.Data[c][j] = im
		}
	}
	return out, nil
}

// FuncSource adapts a function to a Source.
type FuncSource func(i uint64) (*Sample, error)

// Get returns f(i).
func (f FuncSource) Get(i uint64) (*Sample, error) { return f(i) }

// SampleFromBurst turns a burst into a Sample (sharing its data), checking the
// patch and frame sizes. Truth in Noll form, if present, is carried.
func SampleFromBurst(b *burst.Burst, patch, frames int) (*Sample, error) {
	if b.Nx != patch || b.Ny != patch {
		return nil, fmt.Errorf("burst is %d×%d px, training uses %d×%d patches", b.Nx, b.Ny, patch, patch)
	}
	if b.Frames != frames {
		return nil, fmt.Errorf("burst has %d frames, training uses %d", b.Frames, frames)
	}
	s := &Sample{Data: b.Data}
	if b.Truth != nil && b.Truth.Noll != nil {
		s.Noll = b.Truth.Noll
	}
	return s, nil
}

// ReuseSource stretches an expensive source (simulation) by using every
// burst Times times, each time under another of the eight flips and
// rotations of the square (valid bursts for a symmetric pupil and defocus;
// see FolderSource). Index i maps to base burst (i/(Batch·Times))·Batch +
// i mod Batch under transform (i/Batch) mod Times, so a batch holds Batch
// different bursts and each burst comes back in the next Times−1 steps. The
// last Batch·Times base bursts are cached. Truth is kept only for the
// untransformed use (transform 0); transformed samples carry none, so use
// Times = 1 for supervised steps.
type ReuseSource struct {
	Src          Source
	Batch, Times int

	mu    sync.Mutex
	cache map[uint64]*Sample
	order []uint64
}

// Get returns sample i.
func (r *ReuseSource) Get(i uint64) (*Sample, error) {
	bt := uint64(r.Batch * r.Times)
	base := (i/bt)*uint64(r.Batch) + i%uint64(r.Batch)
	t := int((i / uint64(r.Batch)) % uint64(r.Times))
	s, err := r.base(base)
	if err != nil {
		return nil, err
	}
	if t == 0 {
		return s, nil
	}
	out := &Sample{Scene: s.Scene, R0: s.R0, Photons: s.Photons, Contrast: s.Contrast}
	for c := 0; c < 2; c++ {
		for _, im := range s.Data[c] {
			out.Data[c] = append(out.Data[c], transformSquare(im, t))
		}
	}
	return out, nil
}

func (r *ReuseSource) base(i uint64) (*Sample, error) {
	r.mu.Lock()
	if r.cache == nil {
		r.cache = map[uint64]*Sample{}
	}
	if s, ok := r.cache[i]; ok {
		r.mu.Unlock()
		return s, nil
	}
	r.mu.Unlock()
	s, err := r.Src.Get(i)
	if err != nil {
		return nil, err
	}
	r.mu.Lock()
	defer r.mu.Unlock()
	if _, ok := r.cache[i]; !ok {
		r.cache[i] = s
		r.order = append(r.order, i)
		for keep := 2 * r.Batch * r.Times; len(r.order) > keep; r.order = r.order[1:] {
			delete(r.cache, r.order[0])
		}
	}
	return r.cache[i], nil
}

// transformSquare returns the n×n image im under dihedral transform t.
func transformSquare(im []float64, t int) []float64 {
	n := int(math.Sqrt(float64(len(im))) + 0.5)
	out := make([]float64, len(im))
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			sy, sx := infer.TurnPixel(t, y, x, n)
			out[y*n+x] = im[sy*n+sx]
		}
	}
	return out
}
