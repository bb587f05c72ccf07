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
// the Zernike modes j = 2…36 (Noll coefficients).
func SimulatedSource(base simulate.Config) BurstSource {
	return func(c StudyCase, rng *rand.Rand) ([][][]float64, [][]float64, error) {
		cfg := base
		cfg.Patch, cfg.Frames, cfg.DiversityPV = c.Patch, c.Frames, c.DiversityPV
		cfg.Turbulence.R0 = cfg.Telescope.Diameter / c.DOverR0
		cfg.Basis, cfg.Modes = modes.KindZernike, 35
		sim, err := simulate.New(cfg)
		if err != nil {
			return nil, nil, fmt.Errorf("simulated source: %w", err)
		}
		r, err := sim.Patch(rng, simulate.Options{Workers: 1})
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
