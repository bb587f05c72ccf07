package infer

import (
	"fmt"
	"math/rand/v2"

	"pdwave/model/modes"
	"pdwave/simulate"
)

// SimulatedSource returns a BurstSource that draws bursts with the
// simulator (von Kármán phase screens with subharmonics, frozen-flow
// layers, granulation on a canvas larger than the patch, photon and read
// noise) for base adapted to each case: patch, frames, diversity, and
// r0 = D/(D/r0). The truth is the projection of each frame's wavefront on
// the Zernike modes j = 2…36 (Noll coefficients). It is
// SimulatedSceneSource(base, nil).
func SimulatedSource(base simulate.Config) BurstSource {
	return SimulatedSceneSource(base, nil)
}

// SimulatedSceneSource is SimulatedSource with the object drawn from
// scene (nil: the simulator's default granulation, drawn from the burst's
// stream as SimulatedSource always did). A non-nil scene draws from its
// own stream, seeded by two deviates of the burst's, so that the burst's
// stream spends the same on the scene whatever it is: bursts drawn from
// the same seed then share their phase screens and camera-noise seeds
// across scenes, and differ only by the object. The scene must be safe
// for the caller's concurrency (the study calls the source from one
// goroutine).
func SimulatedSceneSource(base simulate.Config, scene simulate.Scene) BurstSource {
	var src simulate.Scene
	if scene != nil {
		src = ownStream{scene}
	}
	return func(c StudyCase, rng *rand.Rand) ([][][]float64, [][]float64, error) {
		cfg := base
		cfg.Patch, cfg.Frames, cfg.Diversity = c.Patch, c.Frames, []float64{0, c.DiversityPV}
		cfg.Turbulence.R0 = cfg.Telescope.Diameter / c.DOverR0
		cfg.Basis, cfg.Modes = modes.KindZernike, 35
		sim, err := simulate.New(cfg)
		if err != nil {
			return nil, nil, fmt.Errorf("simulated source: %w", err)
		}
		r, err := sim.Patch(rng, simulate.Options{Workers: 1, Source: src})
		if err != nil {
			return nil, nil, fmt.Errorf("simulated source: %w", err)
		}
		b := r.Burst
		if b.Truth == nil || b.Truth.Noll == nil {
			return nil, nil, fmt.Errorf("simulated source: burst without Noll truth")
		}
		return [][][]float64{b.Data[0], b.Data[1]}, b.Truth.Noll, nil
	}
}

// ownStream draws its scene from a stream of its own, seeded by exactly
// two deviates of the caller's.
type ownStream struct{ scene simulate.Scene }

// Draw implements simulate.Scene.
func (s ownStream) Draw(dst []float64, nx, ny int, pixelScale float64, rng *rand.Rand) (string, error) {
	sub := rand.New(rand.NewPCG(rng.Uint64(), rng.Uint64()))
	return s.scene.Draw(dst, nx, ny, pixelScale, sub)
}
