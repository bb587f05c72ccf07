package pd

import (
	"fmt"
	"math"
)

// Image shifts as pupil phase ramps.
//
// With h = F⁻¹{P} (inverse DFT with 1/N², pupil and image on one N×N grid),
// multiplying the pupil by exp(−2πi (δx·x + δy·y)/N) gives
// h'(r) = h(r − δ) for integer δ, and for any δ the OTF becomes
// S'(u) = S(u)·exp(−2πi (u_x δx + u_y δy)/N) with u the signed frequency
// (the autocorrelation of the pupil does not wrap around, since the pupil
// diameter is at most N/2): the image moves by +δ pixels in the Fourier
// sense (band-limited sub-pixel shift), +x towards increasing column, +y
// towards increasing row. A phase slope of β rad per pupil pixel is thus a
// shift of −β·N/(2π) image pixels.

// ShiftPhase stores in dst (N×N, row-major) the pupil phase (rad) that
// shifts the image by (dx, dy) pixels: θ(x, y) = −2π (dx·(x − N/2) +
// dy·(y − N/2)) / N, taken about the pupil centre (N/2, N/2) of
// optics.NewPupil so that it carries no piston over a centred pupil. It is
// defined on the whole grid; only the pupil pixels matter. It panics if
// len(dst) != n·n.
func ShiftPhase(dst []float64, n int, dx, dy float64) {
	if n < 1 || len(dst) != n*n {
		panic(fmt.Sprintf("pd: ShiftPhase dst length %d, want %d×%d", len(dst), n, n))
	}
	c := float64(n / 2)
	k := -2 * math.Pi / float64(n)
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			dst[y*n+x] = k * (dx*(float64(x)-c) + dy*(float64(y)-c))
		}
	}
}

// ShiftToTilt returns the Noll tip and tilt coefficients (rad; Z2 = 2ρcosθ,
// Z3 = 2ρ sinθ, Noll 1976, with ρ = hypot(x−N/2, y−N/2)/radius and
// θ = atan2(y−N/2, x−N/2) as in modes.New) whose phase equals ShiftPhase's
// ramp for an image shift of (dx, dy) pixels on an N grid with a pupil of
// the given radius (pixels): z2 = −π·radius·dx/N, z3 = −π·radius·dy/N.
// It panics if n < 1 or radius ≤ 0.
func ShiftToTilt(n int, radius, dx, dy float64) (z2, z3 float64) {
	if n < 1 || !(radius > 0) {
		panic(fmt.Sprintf("pd: ShiftToTilt needs n ≥ 1 and radius > 0, got %d, %g", n, radius))
	}
	k := -math.Pi * radius / float64(n)
	return k * dx, k * dy
}

// TiltToShift is the inverse of ShiftToTilt: the image shift (pixels) made
// by Noll tip/tilt coefficients z2, z3 (rad) on an N grid with a pupil of
// the given radius (pixels). It panics if n < 1 or radius ≤ 0.
func TiltToShift(n int, radius, z2, z3 float64) (dx, dy float64) {
	if n < 1 || !(radius > 0) {
		panic(fmt.Sprintf("pd: TiltToShift needs n ≥ 1 and radius > 0, got %d, %g", n, radius))
	}
	k := -float64(n) / (math.Pi * radius)
	return k * z2, k * z3
}

// ChannelOffset returns the offset (δx, δy) in pixels of channel k (≥ 1)
// stored in the parameter vector alpha (see NumParams). It panics without
// Settings.FitChannelOffset, for k outside [1, channels), or on a wrong
// length.
func (s *Objective) ChannelOffset(alpha []float64, k int) (dx, dy float64) {
	if s.nOff == 0 {
		panic("pd: ChannelOffset without Settings.FitChannelOffset")
	}
	if k < 1 || k >= s.nch {
		panic(fmt.Sprintf("pd: ChannelOffset of channel %d, want 1 … %d", k, s.nch-1))
	}
	if len(alpha) != s.NumParams() {
		panic(fmt.Sprintf("pd: alpha has length %d, want %d", len(alpha), s.NumParams()))
	}
	o := s.frames*s.count + 2*(k-1)
	return alpha[o], alpha[o+1]
}
