package pd

import (
	"errors"
	"fmt"
	"math"
	"math/cmplx"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"

	"pdwave/model/fft"
	"pdwave/model/modes"
	"pdwave/model/optics"
)

// Settings tunes the metric. The zero value is usable: no prior, default
// regulariser, no noise filter (mask = diffraction cut-off), no tilt
// constraint, default window.
type Settings struct {
	// PriorWeight is w in E = L/P̄ + w·½Σα²/σ², the weight of the
	// turbulence prior against the metric normalised by the data power per
	// image. 0 disables the prior. Negative values panic in NewObjective.
	PriorWeight float64
	// Gamma is the denominator regulariser relative to the zero-frequency
	// value of Σ_jk|S_jk|² (= number of images): γ = Gamma·frames·channels.
	// 0 uses 1e-6.
	Gamma float64
	// NoiseFilter restricts the metric to frequencies where the data power
	// (averaged over the images, 3×3 smoothed) exceeds NoiseThreshold times
	// the noise power measured beyond the diffraction cut-off. Without it
	// the metric sums over the whole disc inside the cut-off.
	NoiseFilter bool
	// NoiseThreshold is the factor above the noise floor; 0 uses 3.
	NoiseThreshold float64
	// TiltConstrain removes the burst mean of the tip/tilt component
	// (Noll j = 2, 3 expressed in the native basis) from the coefficients
	// before they enter the metric and from the gradient, so the objective
	// is flat along the direction the metric cannot see and an optimiser
	// started with zero burst-mean tilt keeps it there.
	TiltConstrain bool
	// Window is the width of the cosine edge taper of the apodisation
	// window, as a fraction of the patch side, per edge; the centre is flat.
	// 0 uses 0.125; values are clamped to (0, 0.5].
	Window float64
	// FitChannelOffset adds a fixed image shift of every channel k ≥ 1
	// relative to channel 0, common to all frames (the misregistration of
	// the cameras), to the parameters: the vector becomes frames·modes
	// wavefront coefficients followed by (δx, δy) in pixels for channels
	// 1, 2, … (2·(channels−1) values; see NumParams). The shift enters the
	// pupil of channel k as the phase ramp of ShiftPhase, so it moves that
	// channel's model images by (δx, δy) pixels (+x = increasing column,
	// +y = increasing row). There is no prior on the offsets. NewObjective
	// panics if it is set with fewer than two channels.
	FitChannelOffset bool
	// Detrend subtracts from every image, before windowing, the plane
	// a + b·x + c·y that fits it best in the window-weighted least-squares
	// sense, instead of only its window-weighted mean. A large-scale
	// gradient of the scene across the patch breaks the model w·(o⊗s) ≈
	// (w·o)⊗s at the window's taper, by an amount that grows with the
	// gradient, and the fit explains that error with wrong wavefronts;
	// the plane of a blurred image is the plane of the object (moved by the
	// image motion), so removing it costs the metric little. Restore adds
	// the mean plane back.
	Detrend bool
	// HighPass, when > 0, is the standard deviation, as a fraction of the
	// patch side, of a Gaussian blur subtracted from every image before
	// the trend and the window, for the metric only (the object estimate
	// of Restore uses the unfiltered images). The filter is shift
	// invariant, so the high-passed images are images of the high-passed
	// object and the model is unchanged; what it removes is the scene's
	// large-scale structure, whose leakage through the window (the
	// product w·(o⊗s) is not (w·o)⊗s near the taper) dominates the model
	// error on smooth or strongly structured scenes. Those frequencies
	// (below about 1/(2π·HighPass) cycles per patch side) carry little
	// phase information. 0 disables it; negative values panic in
	// NewObjective.
	HighPass float64
	// HighPassSeeing is the D/r0 the fit expects; with HighPass > 0 it
	// sets a floor on the Gaussian's width: σ ≥ 0.4·λ/r0 =
	// 0.4·(D/r0)·N/(2R) pixels (R the pupil radius in pixels on the N
	// grid, so N/(2R) is λ/D in pixels). In poorer seeing the phase
	// information moves to lower frequencies (the seeing-limited transfer
	// reaches about r0/λ), and the filter's cut-off, about 1/(2πσ),
	// follows it down to 0.4 of that frequency. 0 sets no floor;
	// negative values panic in NewObjective.
	HighPassSeeing float64
}

// Objective evaluates the phase-diversity objective for one patch size, basis,
// frame count and set of diversities. It owns its FFT plan and all buffers;
// it is not safe for concurrent use (use one per goroutine). After SetData,
// ValueGrad and Restore allocate nothing.
type Objective struct {
	n, npix      int
	frames, nch  int
	nimg, count  int
	plan         *fft.Plan
	pidx         []int          // pupil pixel indices (Amp > 0)
	amp          []float64      // amplitude at pidx
	modes        [][]float64    // [count][npup] mode values at pidx
	div          [][]float64    // [nch][npup] diversity at pidx
	adiv         [][]complex128 // [nch][npup] A·exp(iθ_k) at pidx
	eph          []complex128   // exp(iφ) of the current frame at pidx
	c            float64        // Σ|h|² = Σ A² / N² (Parseval)
	neg          []int          // index of −u
	cutoff       float64        // diffraction cut-off radius, frequency pixels
	inCutoff     int            // non-zero frequencies inside the cut-off (MaskShare's denominator)
	set          Settings
	gamma        float64
	invVar       []float64 // 1/σ_m² (0 = loose)
	tilt         [][]float64
	win          []float64
	winSum       float64
	hasData      bool
	mask         []int          // frequency indices in the metric
	filt         []float64      // restoration filter at mask
	dm           [][]complex128 // [nimg][len(mask)] data spectra at mask (high-passed with Settings.HighPass)
	hp           *highPass      // nil without Settings.HighPass
	hf           [][]complex128 // [nimg][N²] high-passed spectra (HighPass only)
	dmRaw        [][]complex128 // [nimg][len(mask)] unfiltered data spectra at mask (HighPass only), for Restore
	dpow         float64        // Σ_u M Σ_jk |D|²
	norm         float64        // dpow / nimg
	level        float64        // mean data level, added back by Restore
	slope        [2]float64     // mean plane slope (x, y) per pixel, added back by Restore (Detrend)
	wx, wy       []float64      // pixel coordinates about the window's centroid
	wxx, wxy     float64        // window moments Σw·x², Σw·x·y
	wyy          float64        // Σw·y²
	noise        float64        // noise power per frequency (windowed data)
	ap           []float64      // projected coefficients
	phi          []float64      // phase of one frame at pidx
	pup          [][]complex128 // [nimg][npup] pupil field
	h            [][]complex128 // [nimg][N²] amplitude PSFs
	sm           [][]complex128 // [nimg][len(mask)] OTFs at mask
	fhat         []complex128   // object estimate at mask
	bden         []float64      // γ + Σ|S|² at mask
	work, work2  []complex128
	qacc         [][]float64 // [frames][npup] gradient density
	pw           []float64   // power scratch for SetData
	pw2          []float64
	tiltModes    [2]int
	scratchGrad  []float64
	lastL, lastP float64
	nOff         int        // number of offset parameters (0 without FitChannelOffset)
	rx, ry       []float64  // phase per pixel of image shift in x, y at pidx (rad/px)
	off          []float64  // current channel offsets (px), [2·(k−1) + 0/1]
	offGrad      []float64  // ∂L/∂offset accumulator (scaled like qacc)
	edge         *edgeModel // CorrectEdges' buffers (nil until first use)
}

// NewObjective returns a solver for frames frames seen through len(diversity)
// channels. diversity[k] is the known phase (rad) of channel k on the N×N
// pupil grid (nil = none). The basis must be drawn on the pupil's grid (same
// N and Radius). Prior variances start at +Inf (no prior) until SetPrior.
// It panics if the sizes disagree, frames < 1, there is no channel, or
// s.PriorWeight < 0: these are programming errors, not user input.
func NewObjective(pupil *optics.Pupil, basis *modes.Basis, diversity [][]float64, frames int, s Settings) *Objective {
	n := pupil.N
	if basis.N != n {
		panic(fmt.Sprintf("pd: basis grid %d != pupil grid %d", basis.N, n))
	}
	if math.Abs(basis.Radius-pupil.Radius) > 1e-9*pupil.Radius {
		panic(fmt.Sprintf("pd: basis radius %g != pupil radius %g", basis.Radius, pupil.Radius))
	}
	if frames < 1 || len(diversity) < 1 {
		panic(fmt.Sprintf("pd: need frames ≥ 1 and channels ≥ 1, got %d, %d", frames, len(diversity)))
	}
	s = withDefaults(s, len(diversity))
	npix := n * n
	sv := &Objective{
		n: n, npix: npix, frames: frames, nch: len(diversity),
		nimg: frames * len(diversity), count: basis.Count,
		plan: fft.NewPlan(n, n), set: s,
	}
	sv.gamma = s.Gamma * float64(sv.nimg)
	// Pupil cut-off: the OTF (autocorrelation of the pupil) reaches twice
	// the pupil radius.
	sv.cutoff = 2 * pupil.Radius
	sv.initPupil(pupil, basis, diversity)
	sv.neg = make([]int, npix)
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			sv.neg[y*n+x] = ((n-y)%n)*n + (n-x)%n
		}
	}
	sv.invVar = make([]float64, basis.Count)
	sv.tiltModes = TiltModes(basis)
	sv.tilt = tiltDirections(basis)
	sv.win = Window(n, s.Window)
	for _, v := range sv.win {
		sv.winSum += v
	}
	sv.initPlane()
	sv.allocBuffers()
	if s.FitChannelOffset {
		sv.initOffsets()
	}
	return sv
}

// withDefaults checks s (panicking on a negative prior weight, or on
// FitChannelOffset with fewer than two channels) and fills in the defaults.
func withDefaults(s Settings, channels int) Settings {
	if s.PriorWeight < 0 || math.IsNaN(s.PriorWeight) {
		panic(fmt.Sprintf("pd: negative prior weight %g", s.PriorWeight))
	}
	if s.HighPass < 0 || math.IsNaN(s.HighPass) || math.IsInf(s.HighPass, 0) {
		panic(fmt.Sprintf("pd: high-pass width %g is not a fraction ≥ 0", s.HighPass))
	}
	if s.HighPassSeeing < 0 || math.IsNaN(s.HighPassSeeing) || math.IsInf(s.HighPassSeeing, 0) {
		panic(fmt.Sprintf("pd: high-pass seeing D/r0 %g is not ≥ 0", s.HighPassSeeing))
	}
	if s.FitChannelOffset && channels < 2 {
		panic("pd: FitChannelOffset needs at least two channels")
	}
	if s.Gamma <= 0 {
		s.Gamma = 1e-6
	}
	if s.NoiseThreshold <= 0 {
		s.NoiseThreshold = 3
	}
	if s.Window <= 0 {
		s.Window = 0.125
	}
	if s.Window > 0.5 {
		s.Window = 0.5
	}
	return s
}

// initPupil gathers the transmitting pupil pixels, their amplitude, the
// modes and the diversities there, and c = Σ A²/N². It panics on an empty
// pupil or grids of the wrong size.
func (s *Objective) initPupil(pupil *optics.Pupil, basis *modes.Basis, diversity [][]float64) {
	npix := s.npix
	for _, i := range pupil.Index {
		if pupil.Amp[i] > 0 {
			s.pidx = append(s.pidx, i)
			s.amp = append(s.amp, pupil.Amp[i])
			s.c += pupil.Amp[i] * pupil.Amp[i]
		}
	}
	if len(s.pidx) == 0 {
		panic("pd: empty pupil")
	}
	s.c /= float64(npix)
	np := len(s.pidx)
	s.modes = make([][]float64, basis.Count)
	for m := range s.modes {
		if len(basis.Modes[m]) != npix {
			panic(fmt.Sprintf("pd: mode %d has %d pixels, want %d", m, len(basis.Modes[m]), npix))
		}
		s.modes[m] = make([]float64, np)
		for p, i := range s.pidx {
			s.modes[m][p] = basis.Modes[m][i]
		}
	}
	s.div = make([][]float64, s.nch)
	for k, d := range diversity {
		s.div[k] = make([]float64, np)
		if d == nil {
			continue
		}
		if len(d) != npix {
			panic(fmt.Sprintf("pd: diversity %d has %d pixels, want %d", k, len(d), npix))
		}
		for p, i := range s.pidx {
			s.div[k][p] = d[i]
		}
	}
	s.adiv = make([][]complex128, s.nch)
	for k := range s.adiv {
		s.adiv[k] = make([]complex128, np)
		for p, t := range s.div[k] {
			sn, cs := math.Sincos(t)
			s.adiv[k][p] = complex(s.amp[p]*cs, s.amp[p]*sn)
		}
	}
}

// allocBuffers allocates every work buffer, the mask buffers sized for the
// largest possible mask (the cut-off disc).
func (s *Objective) allocBuffers() {
	n, npix, np := s.n, s.npix, len(s.pidx)
	s.ap = make([]float64, s.frames*s.count)
	s.scratchGrad = make([]float64, s.frames*s.count)
	s.phi = make([]float64, np)
	s.eph = make([]complex128, np)
	s.pup = make([][]complex128, s.nimg)
	s.h = make([][]complex128, s.nimg)
	s.dm = make([][]complex128, s.nimg)
	s.sm = make([][]complex128, s.nimg)
	for i := range s.pup {
		s.pup[i] = make([]complex128, np)
		s.h[i] = make([]complex128, npix)
	}
	s.work = make([]complex128, npix)
	s.work2 = make([]complex128, npix)
	s.qacc = make([][]float64, s.frames)
	for j := range s.qacc {
		s.qacc[j] = make([]float64, np)
	}
	s.pw = make([]float64, npix)
	s.pw2 = make([]float64, npix)
	maxMask := 0
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			if s.freqRadius(y, x) < s.cutoff {
				maxMask++
			}
		}
	}
	s.inCutoff = maxMask - 1 // without u = 0
	s.mask = make([]int, 0, maxMask)
	s.filt = make([]float64, 0, maxMask)
	for i := range s.dm {
		s.dm[i] = make([]complex128, 0, maxMask)
		s.sm[i] = make([]complex128, maxMask)
	}
	s.fhat = make([]complex128, maxMask)
	s.bden = make([]float64, maxMask)
	if s.set.HighPass > 0 {
		s.hp = newHighPass(n, s.HighPassWidth())
		s.hf = make([][]complex128, s.nimg)
		s.dmRaw = make([][]complex128, s.nimg)
		for i := range s.hf {
			s.hf[i] = make([]complex128, npix)
			s.dmRaw[i] = make([]complex128, 0, maxMask)
		}
	}
}

// initOffsets draws the shift ramps at the pupil pixels and sizes the
// offset buffers. The ramp is taken about the pupil centre (N/2, N/2), the
// same centre as optics.NewPupil, which makes it free of piston.
func (s *Objective) initOffsets() {
	s.nOff = 2 * (s.nch - 1)
	s.off = make([]float64, s.nOff)
	s.offGrad = make([]float64, s.nOff)
	s.rx = make([]float64, len(s.pidx))
	s.ry = make([]float64, len(s.pidx))
	ph := make([]float64, s.npix)
	ShiftPhase(ph, s.n, 1, 0)
	for p, i := range s.pidx {
		s.rx[p] = ph[i]
	}
	ShiftPhase(ph, s.n, 0, 1)
	for p, i := range s.pidx {
		s.ry[p] = ph[i]
	}
}

// freqRadius is the distance of frequency pixel (y, x) from zero frequency,
// with wrap-around (index ≥ N/2 is negative).
func (s *Objective) freqRadius(y, x int) float64 {
	n := s.n
	fy, fx := y, x
	if fy >= (n+1)/2 {
		fy -= n
	}
	if fx >= (n+1)/2 {
		fx -= n
	}
	return math.Hypot(float64(fy), float64(fx))
}

// HighPassWidth returns the standard deviation in pixels of the Gaussian
// whose blur the metric's images lose (Settings.HighPass with the seeing
// floor of Settings.HighPassSeeing), 0 without the high-pass.
func (s *Objective) HighPassWidth() float64 {
	if s.set.HighPass <= 0 {
		return 0
	}
	floor := 0.4 * s.set.HighPassSeeing * float64(s.n) / s.cutoff // cutoff = 2R
	return math.Max(s.set.HighPass*float64(s.n), floor)
}

// Size returns the patch side, number of frames, channels and modes.
func (s *Objective) Size() (n, frames, channels, modes int) {
	return s.n, s.frames, s.nch, s.count
}

// NumParams returns the length of the parameter vector taken by ValueGrad,
// Restore and Constrain: frames·modes wavefront coefficients (rad, frame-
// major, alpha[j*modes+m]), followed with Settings.FitChannelOffset by the
// channel offsets (pixels): alpha[frames*modes + 2(k−1)] = δx and
// alpha[frames*modes + 2(k−1) + 1] = δy of channel k = 1 … channels−1.
func (s *Objective) NumParams() int { return s.frames*s.count + s.nOff }

// Settings returns the settings in use, defaults filled in.
func (s *Objective) Settings() Settings { return s.set }

// SetPriorWeight changes the prior weight w (≥ 0; negative or NaN panics).
func (s *Objective) SetPriorWeight(w float64) {
	if w < 0 || math.IsNaN(w) {
		panic(fmt.Sprintf("pd: negative prior weight %g", w))
	}
	s.set.PriorWeight = w
}

// SetPrior sets the prior variance σ_m² (rad²) of each native mode; len must
// be the basis size (panics otherwise). Entries that are +Inf, zero,
// negative or NaN mean "no prior on this mode" (loose).
func (s *Objective) SetPrior(sigma2 []float64) {
	if len(sigma2) != s.count {
		panic(fmt.Sprintf("pd: prior has %d modes, want %d", len(sigma2), s.count))
	}
	for m, v := range sigma2 {
		if v > 0 && !math.IsInf(v, 1) {
			s.invVar[m] = 1 / v
		} else {
			s.invVar[m] = 0
		}
	}
}

// Window returns the N×N separable apodisation window: 1 in the centre,
// falling to 0 at the edges with a raised-cosine taper over frac·n pixels
// per edge (frac clamped to (0, 0.5]; at least one pixel).
func Window(n int, frac float64) []float64 {
	if frac <= 0 {
		frac = 0.125
	}
	if frac > 0.5 {
		frac = 0.5
	}
	t := frac * float64(n)
	if t < 1 {
		t = 1
	}
	w1 := make([]float64, n)
	for i := range w1 {
		// distance from the nearer edge, measured from pixel centres
		e := math.Min(float64(i)+0.5, float64(n-i)-0.5)
		if e >= t {
			w1[i] = 1
		} else {
			w1[i] = 0.5 * (1 - math.Cos(math.Pi*e/t))
		}
	}
	w := make([]float64, n*n)
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			w[y*n+x] = w1[y] * w1[x]
		}
	}
	return w
}

// TiltModes returns the indices of the two native modes that carry most of
// the Noll tip and tilt (j = 2, 3): modes 0 and 1 for Zernike bases; for KL
// bases the two modes with the largest ToNoll(0,k)² + ToNoll(1,k)².
func TiltModes(b *modes.Basis) [2]int {
	if b.ToNoll == nil || b.Count < 2 {
		return [2]int{0, 1}
	}
	best := [2]int{-1, -1}
	bv := [2]float64{-1, -1}
	for k := 0; k < b.Count; k++ {
		v := b.ToNoll.At(0, k)*b.ToNoll.At(0, k) + b.ToNoll.At(1, k)*b.ToNoll.At(1, k)
		if v > bv[0] {
			best[1], bv[1] = best[0], bv[0]
			best[0], bv[0] = k, v
		} else if v > bv[1] {
			best[1], bv[1] = k, v
		}
	}
	if best[0] > best[1] {
		best[0], best[1] = best[1], best[0]
	}
	return best
}

// KolmogorovPrior returns the prior variances σ_m² = Variance_m·(D/r0)^(5/3)
// (rad²) of the native modes of b for Kolmogorov turbulence at dOverR0
// (Noll 1976 eq. 25 through the basis), with the two tilt modes (TiltModes)
// set to +Inf: tilts are left loose, since frame-to-frame image motion is
// not well described by the single-aperture variance and costs the metric
// nothing to fit. It panics if dOverR0 ≤ 0.
func KolmogorovPrior(b *modes.Basis, dOverR0 float64) []float64 {
	if !(dOverR0 > 0) {
		panic(fmt.Sprintf("pd: D/r0 must be positive, got %g", dOverR0))
	}
	f := math.Pow(dOverR0, 5.0/3)
	s := make([]float64, b.Count)
	for m := range s {
		s[m] = b.Variance[m] * f
	}
	for _, t := range TiltModes(b) {
		if t >= 0 && t < len(s) {
			s[t] = math.Inf(1)
		}
	}
	return s
}

// tiltDirections returns an orthonormal pair of native coefficient vectors
// spanning the phases Z2 and Z3 (u_i = ToNoll⁻¹ e_i), the directions the
// metric cannot see when common to all frames.
func tiltDirections(b *modes.Basis) [][]float64 {
	c := b.Count
	if c < 2 {
		return nil
	}
	var u [2][]float64
	if b.ToNoll == nil {
		u[0] = make([]float64, c)
		u[1] = make([]float64, c)
		u[0][0], u[1][1] = 1, 1
	} else {
		var inv mat.Dense
		if err := inv.Inverse(b.ToNoll); err != nil {
			// Fall back to the rows of ToNoll (exact if orthogonal).
			for i := 0; i < 2; i++ {
				u[i] = make([]float64, c)
				for k := 0; k < c; k++ {
					u[i][k] = b.ToNoll.At(i, k)
				}
			}
		} else {
			for i := 0; i < 2; i++ {
				u[i] = make([]float64, c)
				for k := 0; k < c; k++ {
					u[i][k] = inv.At(k, i)
				}
			}
		}
	}
	// Gram–Schmidt.
	normalise := func(v []float64) {
		var s float64
		for _, x := range v {
			s += x * x
		}
		s = math.Sqrt(s)
		for i := range v {
			v[i] /= s
		}
	}
	normalise(u[0])
	var d float64
	for k := range u[1] {
		d += u[0][k] * u[1][k]
	}
	for k := range u[1] {
		u[1][k] -= d * u[0][k]
	}
	normalise(u[1])
	return [][]float64{u[0], u[1]}
}

// Constrain removes, in place, the burst mean of the tip/tilt component
// from the wavefront part of alpha (length NumParams; the channel offsets
// are left alone): for each orthonormal tilt direction t,
// α_j ← α_j − t·(1/J)Σ_j' t·α_j'. It does nothing if the solver was built
// without TiltConstrain. It panics on a wrong length.
func (s *Objective) Constrain(alpha []float64) {
	if len(alpha) != s.NumParams() {
		panic(fmt.Sprintf("pd: alpha has length %d, want %d", len(alpha), s.NumParams()))
	}
	if !s.set.TiltConstrain {
		return
	}
	s.project(alpha[:s.frames*s.count])
}

func (s *Objective) project(a []float64) {
	m := s.count
	for _, t := range s.tilt {
		var mean float64
		for j := 0; j < s.frames; j++ {
			row := a[j*m : (j+1)*m]
			for k, v := range t {
				mean += v * row[k]
			}
		}
		mean /= float64(s.frames)
		for j := 0; j < s.frames; j++ {
			row := a[j*m : (j+1)*m]
			for k, v := range t {
				row[k] -= mean * v
			}
		}
	}
}

// ErrNoSignal is returned by SetData when no frequency inside the cut-off
// carries signal above the noise.
var ErrNoSignal = errors.New("pd: no frequency above the noise floor")

// SetData loads one patch: data[channel][frame], each N×N row-major. Each
// image is reduced by its window-weighted mean m (so that w·(d−m) has no
// zero-frequency component), multiplied by the apodisation window w and
// transformed; the mean is not added back (adding it back would put a
// frame-independent image into every frame). The noise power is the mean
// power beyond the diffraction cut-off plus one frequency pixel (zero if the
// grid has no such frequencies); the metric mask follows
// Settings.NoiseFilter. It returns an error, leaving the solver without
// data, if the sizes are wrong, a value is not finite, or the mask is
// empty. It allocates nothing.
func (s *Objective) SetData(data [][][]float64) error {
	s.hasData = false
	if s.edge != nil {
		s.edge.on = false
	}
	if err := s.checkData(data); err != nil {
		return err
	}
	s.spectra(data)
	s.measureNoise()
	s.smoothPower()
	s.selectMask()
	if len(s.mask) == 0 {
		return ErrNoSignal
	}
	s.dpow = 0
	for i := range s.dm {
		if s.hp == nil {
			s.dm[i] = s.atMask(s.dm[i], s.h[i])
			continue
		}
		s.dm[i] = s.atMask(s.dm[i], s.hf[i])
		s.dmRaw[i] = s.atMask(s.dmRaw[i], s.h[i])
	}
	for _, d := range s.dm {
		for _, z := range d {
			s.dpow += real(z)*real(z) + imag(z)*imag(z)
		}
	}
	if !(s.dpow > 0) {
		return ErrNoSignal
	}
	s.norm = s.dpow / float64(s.nimg)
	s.hasData = true
	return nil
}

// atMask returns dst[:0] filled with spec at the mask, made exactly
// Hermitian.
func (s *Objective) atMask(dst, spec []complex128) []complex128 {
	dst = dst[:len(s.mask)]
	for q, u := range s.mask {
		dst[q] = 0.5 * (spec[u] + cmplx.Conj(spec[s.neg[u]]))
	}
	return dst
}

// checkData returns an error naming the first wrong size or non-finite
// value of data.
func (s *Objective) checkData(data [][][]float64) error {
	if len(data) != s.nch {
		return fmt.Errorf("pd: data has %d channels, want %d", len(data), s.nch)
	}
	for k := range data {
		if len(data[k]) != s.frames {
			return fmt.Errorf("pd: channel %d has %d frames, want %d", k, len(data[k]), s.frames)
		}
		for j, im := range data[k] {
			if len(im) != s.npix {
				return fmt.Errorf("pd: channel %d frame %d has %d pixels, want %d×%d", k, j, len(im), s.n, s.n)
			}
			for _, v := range im {
				if math.IsNaN(v) || math.IsInf(v, 0) {
					return fmt.Errorf("pd: channel %d frame %d has a non-finite value", k, j)
				}
			}
		}
	}
	return nil
}

// initPlane sets the pixel coordinates about the window's centroid and the
// window's second moments, for the plane fits of Detrend.
func (s *Objective) initPlane() {
	n := s.n
	var cx, cy float64
	for p, w := range s.win {
		cx += w * float64(p%n)
		cy += w * float64(p/n)
	}
	cx /= s.winSum
	cy /= s.winSum
	s.wx = make([]float64, s.npix)
	s.wy = make([]float64, s.npix)
	for p, w := range s.win {
		x, y := float64(p%n)-cx, float64(p/n)-cy
		s.wx[p], s.wy[p] = x, y
		s.wxx += w * x * x
		s.wxy += w * x * y
		s.wyy += w * y * y
	}
}

// trend returns the window-weighted mean m of im and, with Detrend, the
// slopes (bx, by) of the window-weighted least-squares plane
// m + bx·x + by·y (x, y about the window's centroid, so the mean is
// orthogonal to the slopes); without Detrend the slopes are zero.
func (s *Objective) trend(im []float64) (m, bx, by float64) {
	var sx, sy float64
	for p, v := range im {
		w := s.win[p]
		m += w * v
		sx += w * v * s.wx[p]
		sy += w * v * s.wy[p]
	}
	m /= s.winSum
	if !s.set.Detrend {
		return m, 0, 0
	}
	det := s.wxx*s.wyy - s.wxy*s.wxy
	if !(det > 0) {
		return m, 0, 0
	}
	bx = (s.wyy*sx - s.wxy*sy) / det
	by = (s.wxx*sy - s.wxy*sx) / det
	return m, bx, by
}

// spectra stores the spectra of the windowed images, their mean (or, with
// Detrend, their plane) subtracted, in s.h (used here as scratch), their
// summed power in s.pw, the mean level in s.level and the mean slopes in
// s.slope; with HighPass, the spectra of the high-passed images, treated
// alike, in s.hf.
func (s *Objective) spectra(data [][][]float64) {
	clear(s.pw)
	var level, sx, sy float64
	for j := 0; j < s.frames; j++ {
		for k := 0; k < s.nch; k++ {
			im := data[k][j]
			m, bx, by := s.trend(im)
			level += m
			sx += bx
			sy += by
			buf := s.h[j*s.nch+k]
			s.windowed(buf, im, m, bx, by)
			for u, z := range buf {
				s.pw[u] += real(z)*real(z) + imag(z)*imag(z)
			}
			if s.hp != nil {
				f := s.hp.apply(im)
				m, bx, by := s.trend(f)
				s.windowed(s.hf[j*s.nch+k], f, m, bx, by)
			}
		}
	}
	inv := 1 / float64(s.nimg)
	s.level = level * inv
	s.slope = [2]float64{sx * inv, sy * inv}
}

// windowed stores in dst the spectrum of w·(im − m − bx·x − by·y).
func (s *Objective) windowed(dst []complex128, im []float64, m, bx, by float64) {
	for p, v := range im {
		dst[p] = complex(s.win[p]*(v-m-bx*s.wx[p]-by*s.wy[p]), 0)
	}
	s.plan.Forward(dst, dst)
}

// measureNoise sets s.noise, the mean power per image beyond the cut-off
// plus one frequency pixel.
func (s *Objective) measureNoise() {
	n := s.n
	var noise float64
	nNoise := 0
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			if s.freqRadius(y, x) > s.cutoff+1 {
				noise += s.pw[y*n+x]
				nNoise++
			}
		}
	}
	if nNoise > 0 {
		s.noise = noise / float64(nNoise) / float64(s.nimg)
	} else {
		s.noise = 0
	}
}

// smoothPower stores in s.pw2 the mean power per image, 3×3 smoothed with
// wrap-around.
func (s *Objective) smoothPower() {
	n := s.n
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			var t float64
			for dy := -1; dy <= 1; dy++ {
				yy := (y + dy + n) % n
				for dx := -1; dx <= 1; dx++ {
					t += s.pw[yy*n+(x+dx+n)%n]
				}
			}
			s.pw2[y*n+x] = t / 9 / float64(s.nimg)
		}
	}
}

// selectMask fills s.mask with the non-zero frequencies inside the cut-off
// (above the noise threshold with NoiseFilter) and s.filt with the
// restoration filter there.
func (s *Objective) selectMask() {
	n := s.n
	s.mask = s.mask[:0]
	s.filt = s.filt[:0]
	thr := s.set.NoiseThreshold * s.noise
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			u := y*n + x
			if u == 0 || s.freqRadius(y, x) >= s.cutoff {
				continue
			}
			f := 1.0
			if s.noise > 0 {
				p := math.Min(s.pw2[u], s.pw2[s.neg[u]])
				if s.set.NoiseFilter && p <= thr {
					continue
				}
				// Restoration filter 1 − noise/power (Löfdahl & Scharmer
				// 1994, optimum-filter approximation), clipped to [0, 1].
				f = 1 - s.noise/p
				if f < 0 {
					f = 0
				}
			}
			s.mask = append(s.mask, u)
			s.filt = append(s.filt, f)
		}
	}
}

// Noise returns the noise power per frequency of one windowed image
// spectrum, as measured by the last SetData (0 if unmeasurable).
func (s *Objective) Noise() float64 { return s.noise }

// MaskSize returns the number of frequencies in the metric after SetData.
func (s *Objective) MaskSize() int { return len(s.mask) }

// MaskShare returns MaskSize over the number of non-zero frequencies
// inside the diffraction cut-off: the share of the OTF's support where the
// last SetData's smoothed power exceeds the noise threshold (1 without
// Settings.NoiseFilter). It measures how much of the spectrum carries
// wavefront information; 0 before SetData.
func (s *Objective) MaskShare() float64 {
	if s.inCutoff > 0 {
		return float64(len(s.mask)) / float64(s.inCutoff)
	}
	return 0
}

// DataPower returns P̄, the masked data power per image that normalises L.
func (s *Objective) DataPower() float64 { return s.norm }

// LastTerms returns the two parts of the last ValueGrad: the normalised
// metric L/P̄ and the weighted prior term.
func (s *Objective) LastTerms() (metric, prior float64) { return s.lastL, s.lastP }

// otfs computes the pupil fields, amplitude PSFs and the OTFs at the mask
// for the projected coefficients s.ap (and offsets s.off), then the object
// estimate F̂ and the denominators, and returns L (unnormalised).
func (s *Objective) otfs() float64 {
	for j := 0; j < s.frames; j++ {
		s.framePhase(j)
		for k := 0; k < s.nch; k++ {
			s.pupilField(j*s.nch+k, k)
		}
	}
	s.maskedOTFs()
	return s.estimate()
}

// framePhase stores in s.phi the wavefront of frame j at the pupil pixels
// and in s.eph its exp(iφ).
func (s *Objective) framePhase(j int) {
	m := s.count
	a := s.ap[j*m : (j+1)*m]
	phi := s.phi
	clear(phi)
	for k, c := range a {
		if c == 0 {
			continue
		}
		floats.AddScaled(phi, c, s.modes[k])
	}
	for p, v := range phi {
		sn, cs := math.Sincos(v)
		s.eph[p] = complex(cs, sn)
	}
}

// pupilField fills the pupil field of image i (channel k) from s.phi, the
// diversity and, for k ≥ 1 with offsets, the shift ramp, and transforms it
// into the amplitude PSF s.h[i].
func (s *Objective) pupilField(i, k int) {
	pf, dv, h, phi := s.pup[i], s.div[k], s.h[i], s.phi
	clear(h)
	if s.nOff > 0 && k > 0 {
		ox, oy := s.off[2*(k-1)], s.off[2*(k-1)+1]
		rx, ry := s.rx[:len(phi)], s.ry[:len(phi)]
		for p := range phi {
			sn, cs := math.Sincos(phi[p] + dv[p] + ox*rx[p] + oy*ry[p])
			z := complex(s.amp[p]*cs, s.amp[p]*sn)
			pf[p] = z
			h[s.pidx[p]] = z
		}
	} else {
		// A·exp(i(φ+θ)) = exp(iφ)·A·exp(iθ): one Sincos per pupil pixel
		// and frame (framePhase), shared by the channels.
		ad := s.adiv[k]
		for p, e := range s.eph {
			z := e * ad[p]
			pf[p] = z
			h[s.pidx[p]] = z
		}
	}
	s.plan.Inverse(h, h)
}

// maskedOTFs computes the OTFs at the mask, two images per FFT:
// F{s_a + i s_b}, with exact Hermitian symmetry at the mask.
func (s *Objective) maskedOTFs() {
	nm := len(s.mask)
	ic := 1 / s.c
	for a := 0; a < s.nimg; a += 2 {
		b := a + 1
		ha := s.h[a]
		if b < s.nimg {
			hb := s.h[b]
			for x, z := range ha {
				w := hb[x]
				s.work[x] = complex((real(z)*real(z)+imag(z)*imag(z))*ic, (real(w)*real(w)+imag(w)*imag(w))*ic)
			}
		} else {
			for x, z := range ha {
				s.work[x] = complex((real(z)*real(z)+imag(z)*imag(z))*ic, 0)
			}
		}
		s.plan.Forward(s.work, s.work)
		sa := s.sm[a][:nm]
		if b < s.nimg {
			sb := s.sm[b][:nm]
			for q, u := range s.mask {
				z, zn := s.work[u], cmplx.Conj(s.work[s.neg[u]])
				sa[q] = 0.5 * (z + zn)
				d := 0.5 * (z - zn)
				sb[q] = complex(imag(d), -real(d)) // d / i
			}
		} else {
			for q, u := range s.mask {
				sa[q] = 0.5 * (s.work[u] + cmplx.Conj(s.work[s.neg[u]]))
			}
		}
	}
}

// estimate forms A = Σ D* S (stored conjugated in fhat), B = γ + Σ|S|²,
// then F̂ = conj(A)/B in fhat, and returns L = Σ|D|² − Σ|A|²/B.
func (s *Objective) estimate() float64 {
	return s.estimateFrom(s.dm)
}

// estimateFrom sets s.fhat and s.bden from the data spectra dm (at the
// mask) and the current OTFs, and returns Σ_u M Σ|D|² minus the explained
// power (meaningful for dm = s.dm only).
func (s *Objective) estimateFrom(dm [][]complex128) float64 {
	nm := len(s.mask)
	fh := s.fhat[:nm]
	bd := s.bden[:nm]
	for q := range fh {
		fh[q] = 0
		bd[q] = s.gamma
	}
	for i := 0; i < s.nimg; i++ {
		d, sm := dm[i], s.sm[i][:nm]
		for q := range fh {
			z := sm[q]
			fh[q] += d[q] * cmplx.Conj(z) // Σ D S* = conj(A)
			bd[q] += real(z)*real(z) + imag(z)*imag(z)
		}
	}
	var expl float64
	for q := range fh {
		z := fh[q]
		expl += (real(z)*real(z) + imag(z)*imag(z)) / bd[q]
		fh[q] = z / complex(bd[q], 0)
	}
	return s.dpow - expl
}

// load copies the parameters into s.ap (projected if TiltConstrain) and
// s.off. It panics, naming the caller, on a wrong length.
func (s *Objective) load(alpha []float64, who string) {
	if len(alpha) != s.NumParams() {
		panic(fmt.Sprintf("pd: %s: alpha has length %d, want %d", who, len(alpha), s.NumParams()))
	}
	nt := s.frames * s.count
	copy(s.ap, alpha[:nt])
	copy(s.off, alpha[nt:])
	if s.set.TiltConstrain {
		s.project(s.ap)
	}
}

// ValueGrad returns the objective E(α) (see the package comment; after
// SetExactEdges, the exact-edge objective E_x, whose data term LastTerms
// then reports) and, if grad is not nil, stores ∂E/∂α in grad. alpha and
// grad have length
// NumParams: frames·modes coefficients, frame-major (alpha[j*modes+m]),
// then the channel offsets in pixels with Settings.FitChannelOffset; grad
// may not alias alpha. It panics if SetData has not succeeded or on wrong
// lengths. It allocates nothing.
func (s *Objective) ValueGrad(grad, alpha []float64) float64 {
	if !s.hasData {
		panic("pd: ValueGrad before a successful SetData")
	}
	if grad != nil && len(grad) != s.NumParams() {
		panic(fmt.Sprintf("pd: grad has length %d, want %d", len(grad), s.NumParams()))
	}
	s.load(alpha, "ValueGrad")
	if s.edge != nil && s.edge.on {
		s.lastL = s.exactValueGrad(grad)
	} else {
		s.lastL = s.otfs() / s.norm
	}
	var prior float64
	w := s.set.PriorWeight
	m := s.count
	if w > 0 {
		for j := 0; j < s.frames; j++ {
			for k := 0; k < m; k++ {
				a := s.ap[j*m+k]
				prior += a * a * s.invVar[k]
			}
		}
		prior *= 0.5 * w
	}
	s.lastP = prior
	if grad != nil {
		s.gradient(grad)
	}
	return s.lastL + prior
}

// gradient stores ∂E/∂α in grad after otfs (or exactValueGrad): the phase
// densities from densities (or left by exactValueGrad), projected on the
// modes and offset ramps, plus the prior.
func (s *Objective) gradient(grad []float64) {
	if s.edge == nil || !s.edge.on {
		s.densities()
	}
	m := s.count
	w := s.set.PriorWeight
	for j := 0; j < s.frames; j++ {
		q := s.qacc[j]
		g := grad[j*m : (j+1)*m]
		for k := 0; k < m; k++ {
			g[k] = floats.Dot(q, s.modes[k])
		}
		if w > 0 {
			a := s.ap[j*m : (j+1)*m]
			for k := range g {
				g[k] += w * a[k] * s.invVar[k]
			}
		}
	}
	if s.set.TiltConstrain {
		s.project(grad[:s.frames*m])
	}
	copy(grad[s.frames*m:], s.offGrad)
}

// densities accumulates in s.qacc[j] the derivative of L/P̄ with respect to
// the phase of frame j at each pupil pixel, summed over channels, and in
// s.offGrad the derivatives with respect to the channel offsets:
// ∂L/∂φ = −4/(c·N²)·Im[P·W*] with W = F{Re(F{G})·h}, G = −M F̂ R*.
func (s *Objective) densities() {
	nm := len(s.mask)
	for j := range s.qacc {
		clear(s.qacc[j])
	}
	clear(s.offGrad)
	fh := s.fhat[:nm]
	scale := -4 / (s.c * float64(s.npix)) / s.norm
	for a := 0; a < s.nimg; a += 2 {
		b := a + 1
		clear(s.work)
		da, sa := s.dm[a], s.sm[a][:nm]
		if b < s.nimg {
			db, sb := s.dm[b], s.sm[b][:nm]
			for q, u := range s.mask {
				f := fh[q]
				ga := -f * cmplx.Conj(da[q]-f*sa[q])
				gb := -f * cmplx.Conj(db[q]-f*sb[q])
				s.work[u] = ga + complex(-imag(gb), real(gb)) // ga + i·gb
			}
		} else {
			for q, u := range s.mask {
				f := fh[q]
				s.work[u] = -f * cmplx.Conj(da[q]-f*sa[q])
			}
		}
		s.plan.Forward(s.work, s.work) // g_a + i g_b (both real)
		s.imageDensity(a, scale, false)
		if b < s.nimg {
			s.imageDensity(b, scale, true)
		}
	}
}

// imageDensity adds image i's phase density to its frame's accumulator,
// taking Re (or Im, if useImag) of s.work as g; for channels k ≥ 1 with
// offsets it also adds the density's projection on the shift ramps.
func (s *Objective) imageDensity(i int, scale float64, useImag bool) {
	h := s.h[i]
	if useImag {
		for x, z := range h {
			s.work2[x] = z * complex(imag(s.work[x]), 0)
		}
	} else {
		for x, z := range h {
			s.work2[x] = z * complex(real(s.work[x]), 0)
		}
	}
	s.plan.Forward(s.work2, s.work2)
	q := s.qacc[i/s.nch]
	pf := s.pup[i]
	pix := s.pidx[:len(pf)]
	if k := i % s.nch; s.nOff > 0 && k > 0 {
		var gx, gy float64
		rx, ry := s.rx[:len(pf)], s.ry[:len(pf)]
		for p, P := range pf {
			W := s.work2[pix[p]]
			t := scale * (imag(P)*real(W) - real(P)*imag(W))
			q[p] += t
			gx += t * rx[p]
			gy += t * ry[p]
		}
		s.offGrad[2*(k-1)] += gx
		s.offGrad[2*(k-1)+1] += gy
		return
	}
	for p, P := range pf {
		W := s.work2[pix[p]]
		// Im(P·W*) = Im(P)Re(W) − Re(P)Im(W)
		q[p] += scale * (imag(P)*real(W) - real(P)*imag(W))
	}
}

// Restore stores in dst (N×N) the object estimate for parameters alpha
// (length NumParams): the inverse transform of H·F̂ over the metric's
// frequencies, where H is the noise filter 1 − noise/power clipped to
// [0, 1] (1 without a noise measurement), plus the mean data level (and,
// with Detrend, the mean plane). Its
// spectrum is exactly zero outside the mask (MaskSize frequencies). The
// result estimates the apodised object w·(o − m) + m, so it equals the
// object in the flat centre of the window and fades to the mean level at
// the edges; with channel offsets it lies on channel 0's pixel grid. It
// panics if SetData has not succeeded or on wrong lengths; allocates
// nothing.
func (s *Objective) Restore(dst, alpha []float64) {
	if !s.hasData {
		panic("pd: Restore before a successful SetData")
	}
	if len(dst) != s.npix {
		panic(fmt.Sprintf("pd: Restore dst length %d, want %d", len(dst), s.npix))
	}
	s.load(alpha, "Restore")
	s.otfs()
	if s.hp != nil {
		s.estimateFrom(s.dmRaw)
	}
	clear(s.work)
	for q, u := range s.mask {
		s.work[u] = s.fhat[q] * complex(s.filt[q], 0)
	}
	s.plan.InverseReal(dst, s.work)
	for i := range dst {
		dst[i] += s.level + s.slope[0]*s.wx[i] + s.slope[1]*s.wy[i]
	}
}
