package train

import (
	"fmt"
	"math"
	"math/rand/v2"
	"sync"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/stat"

	"pdwave/model/burst"
	"pdwave/simulate"
)

// SimSource simulates training bursts on the fly (simulate.Simulator.Patch):
// burst i is drawn from a generator seeded with (Seed, i), with its Fried
// parameter from R0 (nil = the simulator's default r0), its object from
// Scene, its scene contrast from Contrast and its photon level from
// Photons. Each burst is made on one goroutine; Trainer runs bursts in
// parallel. Set the fields before the first Get and do not change them.
type SimSource struct {
	Sim  *simulate.Simulator
	Seed uint64
	R0   func(rng *rand.Rand) float64
	// Scene draws each burst's object (simulate.Options.Source); nil = the
	// simulator's default granulation.
	Scene simulate.Scene
	// Contrast, if not zero, is the range from which each burst's
	// diffraction-limited rms contrast (simulate.Options.Scene.Contrast)
	// is drawn uniformly; zero keeps the simulator's default (0.12).
	Contrast [2]float64
	// Photons, if not zero, is the range of factors on the camera's mean
	// photo-electrons per pixel from which each burst's light level is
	// drawn log-uniformly. Such bursts are simulated without noise and
	// then exposed (expose) with the camera of Sim at the drawn level;
	// zero uses Sim's camera as it is. Sim's camera must have photons.
	Photons [2]float64

	once  sync.Once
	quiet *simulate.Simulator // Sim without camera noise (Photons set)
	qerr  error
}

// NewSimSource returns a source over sim whose bursts match setup (patch,
// frames, modes, basis).
func NewSimSource(sim *simulate.Simulator, setup Setup, seed uint64, r0 func(*rand.Rand) float64) (*SimSource, error) {
	c := sim.Config()
	if c.Patch != setup.Patch || c.Frames != setup.Frames {
		return nil, fmt.Errorf("train: simulator makes %d px, %d-frame bursts; training uses %d px, %d frames", c.Patch, c.Frames, setup.Patch, setup.Frames)
	}
	if c.Modes < setup.Modes {
		return nil, fmt.Errorf("train: simulator truth has %d modes, training estimates %d", c.Modes, setup.Modes)
	}
	return &SimSource{Sim: sim, Seed: seed, R0: r0}, nil
}

// LogNormalR0 returns a draw of r0 = median·spread^g, g standard normal: a
// log-normal distribution with the given median and geometric spread
// (common practice for seeing statistics).
func LogNormalR0(median, spread float64) func(*rand.Rand) float64 {
	ls := math.Log(spread)
	return func(rng *rand.Rand) float64 { return median * math.Exp(ls*rng.NormFloat64()) }
}

// levels draws a burst's scene contrast (0 = the simulator's default) and
// photon level (e⁻ per pixel) from rng: contrast uniform in Contrast,
// then the photon factor log-uniform in Photons. A zero range draws
// nothing (the contrast is 0, the photons the camera's).
func (s *SimSource) levels(rng *rand.Rand) (contrast, photons float64) {
	if c := s.Contrast; c != [2]float64{} {
		contrast = c[0] + (c[1]-c[0])*rng.Float64()
	}
	photons = s.Sim.Config().Camera.Photons
	if p := s.Photons; p != [2]float64{} {
		lo, hi := math.Log(p[0]), math.Log(p[1])
		photons *= math.Exp(lo + (hi-lo)*rng.Float64())
	}
	return contrast, photons
}

// quietSim returns the simulator without camera noise, made once.
func (s *SimSource) quietSim() (*simulate.Simulator, error) {
	s.once.Do(func() {
		c := s.Sim.Config()
		if c.Camera.Noiseless() {
			s.qerr = fmt.Errorf("train: a photon level range needs a camera with photons (the simulator's is noiseless)")
			return
		}
		c.Camera.Photons = 0
		s.quiet, s.qerr = simulate.New(c)
	})
	return s.quiet, s.qerr
}

// Get simulates burst i. The sample records the scene, r0, photon level
// and contrast it was made with.
func (s *SimSource) Get(i uint64) (*Sample, error) {
	rng := rand.New(rand.NewPCG(mix(s.Seed, i), 0x51a7))
	var o simulate.Options
	o.Workers = 1
	if s.R0 != nil {
		o.R0 = s.R0(rng)
	}
	o.Source = s.Scene
	contrast, photons := s.levels(rng)
	o.Scene.Contrast = contrast
	sim := s.Sim
	if s.Photons != [2]float64{} {
		var err error
		if sim, err = s.quietSim(); err != nil {
			return nil, err
		}
	}
	res, err := sim.Patch(rng, o)
	if err != nil {
		return nil, fmt.Errorf("simulating burst %d: %w", i, err)
	}
	if sim != s.Sim {
		// Noise from a stream of its own, so it does not depend on how
		// many deviates the simulation drew.
		noise := rand.New(rand.NewPCG(mix(s.Seed, i), 0xe7905e))
		if err := expose(res.Burst, s.Sim.Config().Camera, photons, noise); err != nil {
			return nil, fmt.Errorf("simulating burst %d: %w", i, err)
		}
	}
	c := s.Sim.Config()
	smp, err := SampleFromBurst(res.Burst, c.Patch, c.Frames)
	if err != nil {
		return nil, err
	}
	smp.Scene, smp.R0, smp.Photons, smp.Contrast = res.Scene, res.R0, photons, contrast
	return smp, nil
}

// expose turns the noiseless burst b (simulate with Camera.Photons ≤ 0:
// data and Object in object units) into camera data in place, as
// simulate.Camera records frames: the scale that brings the object's mean
// over the patch to photons e⁻ per pixel, Poisson photon noise
// (simulate.Poisson), Gaussian read noise of cam.ReadNoise e⁻ rms,
// division by the gain and, for cam.Bits > 0, rounding and clipping to
// [0, 2^Bits − 1]. The gain is the camera's at its own level (cam.Gain, or
// max(1, 4·cam.Photons/2^Bits)): the light changes, not the camera. The
// Object is scaled to ADU likewise. It errors if b has no positive object.
func expose(b *burst.Burst, cam simulate.Camera, photons float64, rng *rand.Rand) error {
	if len(b.Object) == 0 || !(stat.Mean(b.Object, nil) > 0) {
		return fmt.Errorf("exposing a burst: no object with positive flux to set the photon level by")
	}
	scale := photons / stat.Mean(b.Object, nil)
	g := cam.ElectronsPerADU()
	for f := 0; f < b.Frames; f++ {
		for c := 0; c < 2; c++ {
			floats.Scale(scale, b.Data[c][f])
			cam.Expose(b.Data[c][f], rng)
		}
	}
	floats.Scale(scale/g, b.Object)
	return nil
}
