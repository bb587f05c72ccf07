package simulate

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"sync"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/stat"

	"pdwave/model/burst"
	"pdwave/model/instrument"
	"pdwave/model/modes"
	"pdwave/model/optics"
	"pdwave/model/pd"
)

// Config is everything physical a Simulator needs, in SI units.
type Config struct {
	// Instrument is the telescope, the diversity of the two channels
	// (the simulator forms exactly two; channel 0 usually in focus), the
	// patch and pupil grid side N, and the basis and mode count of the
	// truth coefficients. Its DOverR0 is not used (the seeing is
	// Turbulence's); zero stands for D/Turbulence.R0.
	instrument.Instrument
	Turbulence    Turbulence // R0 is the default; Options.R0 overrides per burst
	FrameInterval float64    // s between frames
	Camera        Camera     // photons, noise and quantisation
	Frames        int        // frames per burst
	// Oversample is the factor q by which image formation samples the
	// pupil more finely than the fit's N×N grid (see Simulator): PSFs come
	// from a qN×qN pupil grid, so they have support qN px, and camera
	// pixels integrate the image over their area. 0 means 2; 1 is the
	// fit's own model (kept for regression comparisons); at most
	// MaxOversample.
	Oversample int
}

// oversample returns the effective Oversample (2 for 0).
func (c Config) oversample() int {
	if c.Oversample == 0 {
		return 2
	}
	return c.Oversample
}

// instrument returns c.Instrument with a zero DOverR0 replaced by
// D/Turbulence.R0 (the simulator does not use it; instrument.Build
// validates it).
func (c Config) instrument() instrument.Instrument {
	in := c.Instrument
	if in.DOverR0 == 0 && c.Turbulence.R0 > 0 {
		in.DOverR0 = in.Telescope.Diameter / c.Turbulence.R0
	}
	return in
}

// Validate reports whether the configuration is usable: a valid
// instrument (instrument.Instrument.Validate: optics sampled at least at
// Nyquist, patch, modes, basis) with two channels of different defocus
// (Instrument.NeedDiversity), valid turbulence and camera, at least one
// frame, a finite frame interval ≥ 0 and an oversampling in
// [0, MaxOversample].
func (c Config) Validate() error {
	if err := c.Turbulence.Validate(); err != nil {
		return err
	}
	if err := c.Camera.Validate(); err != nil {
		return err
	}
	if err := c.instrument().Validate(); err != nil {
		return fmt.Errorf("simulate: %w", err)
	}
	switch {
	case c.Channels() != 2:
		return fmt.Errorf("simulate: %d channels, the simulator forms two", c.Channels())
	case c.Frames < 1:
		return fmt.Errorf("simulate: %d frames, need at least 1", c.Frames)
	case !(c.FrameInterval >= 0) || math.IsInf(c.FrameInterval, 0):
		return fmt.Errorf("simulate: frame interval %g s, need a finite value ≥ 0", c.FrameInterval)
	case c.Oversample < 0 || c.Oversample > MaxOversample:
		return fmt.Errorf("simulate: pupil oversampling %d, want 1 to %d (0 = 2)", c.Oversample, MaxOversample)
	}
	if err := c.NeedDiversity(); err != nil {
		return fmt.Errorf("simulate: %w", err)
	}
	return nil
}

// Options tune one burst. The zero value gives granulation with the
// default GranulationParams, the Config's r0, subharmonics on, and all
// cores.
//
// The object comes from Object if set (used as given, no contrast
// scaling), else from Source if set, else from granulation with Scene.
// Whatever Source draws (granulation, real images, a Mix) has its
// fluctuations stretched about the mean so that its diffraction-limited
// image has rms contrast Scene.Contrast (default 0.12), as for the
// built-in granulation; to vary the contrast between bursts, set
// Scene.Contrast per burst.
type Options struct {
	R0             float64           // Fried parameter at the observing wavelength, m; 0 = Config.Turbulence.R0
	Scene          GranulationParams // look of the built-in granulation; its Contrast is the diffraction-limited contrast of every drawn scene
	Source         Scene             // scene drawn per burst (GranulationScene, ImageScene, Mix, ...); nil = granulation with Scene; not with Object
	Object         []float64         // user object map (row-major ObjectNx×ObjectNy, any positive scale); nil = a drawn scene
	ObjectNx       int               // columns of Object
	ObjectNy       int               // rows of Object
	NoSubharmonics bool              // draw screens without subharmonics
	KeepPhases     bool              // Patch: return each frame's wavefront in Result.Phases
	NodeSpacing    int               // Field: spacing of the PSF grid, px; 0 = Patch/2
	Workers        int               // goroutines; 0 = GOMAXPROCS
	// ChannelOffset moves the second (defocused) channel's image by
	// (dx, dy) camera pixels (+x towards increasing column, +y towards
	// increasing row), as a misregistered camera does: a tilt added to
	// that channel's pupil phase on the imaging grid (pd.ShiftPhase), so
	// the scene outside the patch enters and nothing is resampled. At most
	// MaxChannelOffset in each axis.
	ChannelOffset [2]float64
}

// MaxChannelOffset is the largest |Options.ChannelOffset| per axis, px.
const MaxChannelOffset = 4

// diversity returns the per-channel diversity phases on the imaging grid
// for o: s.fdiv itself without a channel offset, else a copy of channel 2's
// with the tilt of pd.ShiftPhase added. It returns an error for an offset
// that is not finite or exceeds MaxChannelOffset.
func (s *Simulator) diversity(o Options) ([2][]float64, error) {
	dx, dy := o.ChannelOffset[0], o.ChannelOffset[1]
	if !(math.Abs(dx) <= MaxChannelOffset && math.Abs(dy) <= MaxChannelOffset) {
		return s.fdiv, fmt.Errorf("simulate: channel offset (%g, %g) px, want each within ±%d", dx, dy, MaxChannelOffset)
	}
	if dx == 0 && dy == 0 {
		return s.fdiv, nil
	}
	p := s.fpupil.N
	tilt := make([]float64, p*p)
	pd.ShiftPhase(tilt, p, dx, dy)
	floats.Add(tilt, s.fdiv[1])
	return [2][]float64{s.fdiv[0], tilt}, nil
}

// Result is one simulated burst with what produced it. For Field bursts,
// burst pixel (x, y) lies at field angle ((x − Nx/2)·p, (y − Ny/2)·p) with p
// the pixel scale; Atmosphere.Phase at that angle and Times[f] gives the
// wavefront there (see Simulator.TruthAt).
type Result struct {
	Burst      *burst.Burst // the simulated data with truth (patches) and object
	R0         float64      // Fried parameter used, m, at the observing wavelength
	Atmosphere *Atmosphere  // the layers (screens) used, on the imaging pupil grid (Atmosphere.N = Oversample·N)
	Phases     [][]float64  // Patch with KeepPhases: per frame, N*N wavefront on the fit's pupil grid (every Oversample-th imaging sample), rad
	Times      []float64    // time of each frame, s (frame f at f·FrameInterval)
	Scene      string       // what the object was made from: the Scene's description ("granulation", "real:brick.fits @12,300 rot90 c=0.131", ...) or "object map"
}

// Simulator makes bursts for one Config. It holds the pupil, basis and
// diversity on two grids: the fit's N×N pupil grid (Pupil, Basis,
// PupilPixel; pupil diameter r_c = D·N·p/λ px), and the imaging grid,
// Oversample = q times finer (qN×qN, diameter q·r_c px, pixel
// PupilPixel/q), on which the wavefront is sampled and the PSFs are formed
// (see the package notes on image formation in imaging.go). For q = 1 the
// two are the same. It is read-only after New and safe for concurrent use
// (each call makes its own work buffers).
type Simulator struct {
	cfg    Config
	q      int
	pupil  *optics.Pupil // fit grid, N×N
	basis  *modes.Basis  // fit grid
	fpupil *optics.Pupil // imaging grid, qN×qN (== pupil for q = 1)
	fbasis *modes.Basis  // the same modes sampled on the imaging grid
	fdiv   [2][]float64  // diversity phase of each channel on the imaging grid, rad
	dx     float64       // fit pupil grid pixel, m
	gens   *genPool
}

// New returns a Simulator for cfg, or an error if cfg is invalid. The fit
// grid and the imaging grid are both instrument.BuildOversampled with the
// clear-aperture basis (the basis of the truth), at q = 1 and q =
// Oversample: optics.NewPupil scales the pupil radius with the grid, so the
// imaging grid is the same aperture q times more finely sampled.
func New(cfg Config) (*Simulator, error) {
	if err := cfg.Validate(); err != nil {
		return nil, err
	}
	in := cfg.instrument()
	fit, err := instrument.Build(in, instrument.ClearAperture)
	if err != nil {
		return nil, fmt.Errorf("simulate: %w", err)
	}
	s := &Simulator{cfg: cfg, q: cfg.oversample(), pupil: fit.Pupil, basis: fit.Basis, gens: &genPool{}}
	img := fit
	if s.q > 1 {
		if img, err = instrument.BuildOversampled(in, instrument.ClearAperture, s.q); err != nil {
			return nil, fmt.Errorf("simulate: imaging grid: %w", err)
		}
	}
	s.fpupil, s.fbasis = img.Pupil, img.Basis
	p := s.fpupil.N
	for c, d := range img.Diversity {
		if d == nil {
			d = make([]float64, p*p) // a focused channel
		}
		s.fdiv[c] = d
	}
	s.dx = cfg.Telescope.Diameter / (2 * s.pupil.Radius)
	return s, nil
}

// Config returns the simulator's configuration.
func (s *Simulator) Config() Config { return s.cfg }

// Pupil returns the pupil on the fit's N×N grid (shared; do not modify).
func (s *Simulator) Pupil() *optics.Pupil { return s.pupil }

// Basis returns the basis of the truth coefficients on the fit's N×N grid
// (shared; do not modify). The truth is projected with the same modes
// sampled on the imaging grid (see Truth).
func (s *Simulator) Basis() *modes.Basis { return s.basis }

// PupilPixel returns the size of a pixel of the fit's pupil grid in
// metres, D/(2·Radius); the imaging grid's pixel is PupilPixel/Oversample.
func (s *Simulator) PupilPixel() float64 { return s.dx }

// Oversample returns the effective pupil oversampling q of image formation
// (Config.Oversample, 2 when that is 0).
func (s *Simulator) Oversample() int { return s.q }

// ImagingPupil returns the pupil on the qN×qN imaging grid (q =
// Oversample; the fit's pupil for q = 1; shared, do not modify).
func (s *Simulator) ImagingPupil() *optics.Pupil { return s.fpupil }

func (s *Simulator) workers(o Options) int {
	if o.Workers > 0 {
		return o.Workers
	}
	return runtime.GOMAXPROCS(0)
}

func (s *Simulator) turbulence(o Options) (Turbulence, error) {
	t := s.cfg.Turbulence
	if o.R0 != 0 {
		if !(o.R0 > 0) || math.IsInf(o.R0, 0) {
			return t, fmt.Errorf("simulate: r0 = %g m, need a positive finite value", o.R0)
		}
		t.R0 = o.R0
	}
	return t, nil
}

// object returns the object on an mx×my canvas whose central region is
// the output, and its description: a drawn scene (Options.Source, else
// granulation with Options.Scene; mean ≈ 1, contrast set later by the
// caller) or a random window of the user map scaled to mean 1.
func (s *Simulator) object(rng *rand.Rand, o Options, mx, my int) ([]float64, string, error) {
	obj := make([]float64, mx*my)
	if o.Object == nil {
		src := o.Source
		if src == nil {
			src = GranulationScene{Params: o.Scene}
		}
		ps := s.cfg.Telescope.PixelScale * optics.RadToArcsec
		name, err := src.Draw(obj, mx, my, ps, rng)
		if err != nil {
			return nil, "", err
		}
		if err := checkFlux(obj); err != nil {
			return nil, "", fmt.Errorf("simulate: scene %q: %w", name, err)
		}
		return obj, name, nil
	}
	if o.Source != nil {
		return nil, "", errors.New("simulate: options set both a user object map and a scene source; use one")
	}
	if o.ObjectNx < 1 || o.ObjectNy < 1 || len(o.Object) != o.ObjectNx*o.ObjectNy {
		return nil, "", fmt.Errorf("simulate: object map of %d values is not %d×%d", len(o.Object), o.ObjectNx, o.ObjectNy)
	}
	if o.ObjectNx < mx || o.ObjectNy < my {
		return nil, "", fmt.Errorf("simulate: object map %d×%d px is smaller than the %d×%d px canvas needed (output plus a margin of half a patch on each side)", o.ObjectNx, o.ObjectNy, mx, my)
	}
	// A random window of the map.
	x0 := rng.IntN(o.ObjectNx - mx + 1)
	y0 := rng.IntN(o.ObjectNy - my + 1)
	for y := 0; y < my; y++ {
		copy(obj[y*mx:y*mx+mx], o.Object[(y0+y)*o.ObjectNx+x0:])
	}
	if err := checkFlux(obj); err != nil {
		return nil, "", fmt.Errorf("simulate: object map window: %w", err)
	}
	floats.Scale(1/stat.Mean(obj, nil), obj)
	return obj, "object map", nil
}

// contrastFactor returns the factor k by which the fluctuations of the
// object canvas obj (m×m, m that of f) must be stretched about their mean
// so that the region [c0x, c0x+wx)×[c0y, c0y+wy) of its diffraction-limited
// image (focused channel, no turbulence) has rms contrast target; 1 if that
// image is flat.
func (s *Simulator) contrastFactor(f *former, obj []float64, c0x, c0y, wx, wy int, target float64) float64 {
	m := f.m
	spec := make([]complex128, m*m)
	f.plan.ForwardReal(spec, obj)
	zero := make([]float64, f.p*f.p)
	f.psfs(s, zero)
	f.blurPair(spec)
	crop := make([]float64, wx*wy)
	for y := 0; y < wy; y++ {
		for x := 0; x < wx; x++ {
			crop[y*wx+x] = real(f.buf[(c0y+y)*m+c0x+x])
		}
	}
	if c := Contrast(crop); c > 0 {
		return target / c
	}
	return 1
}

// stretch maps obj in place to mean + (v − mean)·k, clipped below at 5 % of
// the mean (so very high contrasts come out slightly lower).
func stretch(obj []float64, k float64) {
	var sum float64
	for _, v := range obj {
		sum += v
	}
	mean := sum / float64(len(obj))
	for i, v := range obj {
		obj[i] = math.Max(0.05*mean, mean+(v-mean)*k)
	}
}

// frameSeeds draws two PCG seeds per frame and channel from rng, so the
// noise of each frame is independent of how frames are spread over
// goroutines.
func frameSeeds(rng *rand.Rand, frames int) [][2][2]uint64 {
	out := make([][2][2]uint64, frames)
	for f := range out {
		for c := 0; c < 2; c++ {
			out[f][c] = [2]uint64{rng.Uint64(), rng.Uint64()}
		}
	}
	return out
}

// parallel runs fn(i) for i in [0, n) on w goroutines, each with its own
// worker index.
func parallel(n, w int, fn func(worker, i int)) {
	if w > n {
		w = n
	}
	var wg sync.WaitGroup
	next := make(chan int)
	for k := 0; k < w; k++ {
		wg.Add(1)
		go func(k int) {
			defer wg.Done()
			for i := range next {
				fn(k, i)
			}
		}(k)
	}
	for i := 0; i < n; i++ {
		next <- i
	}
	close(next)
	wg.Wait()
}

// setObject sets b.Object to the b.Nx×b.Ny window with first column x0 and
// first row y0 of the object canvas obj (row length stride) and returns the
// factor that brings the window's mean to the camera's mean photons per
// pixel.
func (s *Simulator) setObject(b *burst.Burst, obj []float64, stride, x0, y0 int) float64 {
	nx, ny := b.Nx, b.Ny
	b.Object = make([]float64, nx*ny)
	var sum float64
	for y := 0; y < ny; y++ {
		copy(b.Object[y*nx:y*nx+nx], obj[(y0+y)*stride+x0:])
	}
	for _, v := range b.Object {
		sum += v
	}
	return s.cfg.Camera.Photons / (sum / float64(nx*ny))
}

// finish turns expected images (mean ≈ 1 in object units) into camera
// data in place: scale to photo-electrons by scale, then expose; the
// object truth gets the same scale divided by the gain.
func (s *Simulator) finish(b *burst.Burst, seeds [][2][2]uint64, scale float64, workers int) {
	cam := s.cfg.Camera
	if cam.Noiseless() {
		return
	}
	g := cam.ElectronsPerADU()
	parallel(b.Frames, workers, func(_, f int) {
		for c := 0; c < 2; c++ {
			im := b.Data[c][f]
			for i := range im {
				im[i] *= scale
			}
			cam.Expose(im, rand.New(rand.NewPCG(seeds[f][c][0], seeds[f][c][1])))
		}
	})
	for i := range b.Object {
		b.Object[i] *= scale / g
	}
}

// opticsHeader returns the burst header optics of the configuration
// (the diversity of channel 1 as DIVPV).
func (s *Simulator) opticsHeader() burst.Optics {
	t := s.cfg.Telescope
	return burst.Optics{
		Wavelength:  instrument.Some(t.Wavelength),
		PixelScale:  instrument.Some(t.PixelScale),
		Diameter:    instrument.Some(t.Diameter),
		Obscuration: instrument.Some(t.Obscuration),
		DiversityPV: instrument.Some(s.cfg.SecondDiversity()),
	}
}

// Truth returns the true coefficients of the wavefront phases (rad) in
// the simulator's basis, and their Noll equivalents. Each phase is either
// N*N on the fit's pupil grid or (qN)² on the imaging grid (q =
// Oversample); it is projected with the basis sampled on its own grid (the
// same continuous modes: modes.New with the grid side and pupil radius
// both scaled by q): the mean over ρ ≤ 1 is removed, then the least-squares
// projection over ρ ≤ 1 (modes.Basis.Project). Patch and TruthAt use the
// imaging grid. It panics on a phase of any other length.
func (s *Simulator) Truth(phases [][]float64) *burst.Truth {
	b := s.basis
	t := &burst.Truth{Basis: string(b.Kind), Modes: b.Count}
	var work []float64
	for _, ph := range phases {
		c := make([]float64, b.Count)
		nl := make([]float64, b.Count)
		if len(work) != len(ph) {
			work = make([]float64, len(ph))
		}
		s.truthInto(c, nl, ph, work)
		t.Coeffs = append(t.Coeffs, c)
		t.Noll = append(t.Noll, nl)
	}
	return t
}

// truthInto sets c and nl (Count each) to the native and Noll coefficients
// of phase (fit or imaging grid, see Truth), using work (same length as
// phase) as scratch. It allocates nothing once the basis's projector is
// built.
func (s *Simulator) truthInto(c, nl, phase, work []float64) {
	b := s.basis
	switch len(phase) {
	case b.N * b.N:
	case s.fbasis.N * s.fbasis.N:
		b = s.fbasis
	default:
		panic(fmt.Sprintf("simulate: phase of length %d is neither %d² nor %d²", len(phase), b.N, s.fbasis.N))
	}
	copy(work, phase)
	var m float64
	for _, i := range b.Index {
		m += work[i]
	}
	m /= float64(len(b.Index))
	for _, i := range b.Index {
		work[i] -= m
	}
	b.Project(c, work, nil)
	b.NollEquivalent(nl, c)
}

// Patch simulates one N×N burst (N = Config.Patch) of Config.Frames frames
// on axis, with Truth (the wavefront of every frame in the simulator's basis
// and as Noll coefficients) and Object (the true object over the same
// pixels, in the data's units before noise: ADU, or object units when the
// camera is noiseless).
//
// Steps: the layers' screens are drawn (NewAtmosphere) on the imaging grid
// (qN×qN, pixel PupilPixel/q, q = Oversample) to cover the burst duration;
// the object is drawn on a canvas of side M ≥ N + qN (the next power of two
// for q = 1, else the next 2^a·3^b·5^c), so light from up to half a PSF
// support outside the patch enters as it does on the sky; for granulation
// its contrast is scaled so the diffraction-limited image of the patch has
// rms contrast Options.Scene.Contrast (default 0.12). Each frame's
// wavefront at t = f·FrameInterval gives qN×qN PSFs for both channels
// (channel 2 with the defocus diversity drawn on the imaging pupil); the
// canvas is convolved with them and, for q > 1, with the pixel box, and the
// central N×N is cropped; photons, read noise and quantisation follow the
// Camera, the scale set so the object's mean over the patch gives Photons
// electrons per pixel. Truth projects each frame's imaging-grid wavefront
// (see Truth). Deterministic given rng.
func (s *Simulator) Patch(rng *rand.Rand, o Options) (*Result, error) {
	turb, err := s.turbulence(o)
	if err != nil {
		return nil, err
	}
	n, frames, p := s.cfg.Patch, s.cfg.Frames, s.fpupil.N
	dur := float64(frames-1) * s.cfg.FrameInterval
	atm, err := newAtmosphere(rng, turb, p, s.dx/float64(s.q), Extent{Duration: dur}, !o.NoSubharmonics, s.gens)
	if err != nil {
		return nil, err
	}
	div, err := s.diversity(o)
	if err != nil {
		return nil, err
	}
	m := canvasSide(n+p, s.q)
	c0 := (m - n) / 2
	obj, scene, err := s.object(rng, o, m, m)
	if err != nil {
		return nil, err
	}
	seeds := frameSeeds(rng, frames)
	workers := s.workers(o)
	formers := make([]*patchWorker, min(workers, frames))
	for i := range formers {
		formers[i] = s.newPatchWorker(m)
		formers[i].div = div
	}
	if o.Object == nil {
		target := o.Scene.withDefaults().Contrast
		stretch(obj, s.contrastFactor(formers[0].former, obj, c0, c0, n, n, target))
	}
	spec := make([]complex128, m*m)
	formers[0].plan.ForwardReal(spec, obj)

	b := burst.New(n, n, frames)
	b.Optics = s.opticsHeader()
	b.Truth = &burst.Truth{Basis: string(s.basis.Kind), Modes: s.basis.Count,
		Coeffs: make([][]float64, frames), Noll: make([][]float64, frames)}
	res := &Result{Burst: b, R0: turb.R0, Atmosphere: atm, Times: make([]float64, frames), Scene: scene}
	if o.KeepPhases {
		res.Phases = make([][]float64, frames)
	}
	parallel(frames, len(formers), func(w, f int) {
		res.Times[f] = float64(f) * s.cfg.FrameInterval
		formers[w].frame(s, res, spec, c0, f)
	})
	scale := s.setObject(b, obj, m, c0, c0)
	s.finish(b, seeds, scale, workers)
	return res, nil
}

// patchWorker is a former with the buffers of one Patch frame.
type patchWorker struct {
	*former
	ph, work []float64 // imaging-grid wavefront and projection scratch
}

func (s *Simulator) newPatchWorker(m int) *patchWorker {
	p := s.fpupil.N
	return &patchWorker{former: s.newFormer(m), ph: make([]float64, p*p), work: make([]float64, p*p)}
}

// frame forms frame f of res (time res.Times[f]) from the object spectrum
// on the m×m canvas, writing its data (central N×N from c0), truth and,
// when res.Phases is set, its fit-grid wavefront. Besides the truth and
// phase slices it returns, it allocates nothing.
func (w *patchWorker) frame(s *Simulator, res *Result, spec []complex128, c0, f int) {
	n, m, b := s.cfg.Patch, w.m, res.Burst
	res.Atmosphere.Phase(w.ph, res.Times[f], 0, 0)
	w.psfs(s, w.ph)
	w.blurPair(spec)
	im0, im1 := b.Data[0][f], b.Data[1][f]
	for y := 0; y < n; y++ {
		row := w.buf[(c0+y)*m+c0 : (c0+y)*m+c0+n]
		for x, v := range row {
			im0[y*n+x] = real(v)
			im1[y*n+x] = imag(v)
		}
	}
	c := make([]float64, s.basis.Count)
	nl := make([]float64, s.basis.Count)
	s.truthInto(c, nl, w.ph, w.work)
	b.Truth.Coeffs[f], b.Truth.Noll[f] = c, nl
	if res.Phases != nil {
		res.Phases[f] = make([]float64, n*n)
		decimate(res.Phases[f], w.ph, n, s.q)
	}
}
