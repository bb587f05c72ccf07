package train

import (
	"fmt"
	"math"
	"math/rand/v2"

	"pdwave/simulate"
)

// SimSource simulates training bursts on the fly (simulate.Simulator.Patch):
// burst i is drawn from a generator seeded with (Seed, i), with its Fried
// parameter from R0 (nil = the simulator's default r0). Each burst is made
// on one goroutine; Trainer runs bursts in parallel.
type SimSource struct {
	Sim  *simulate.Simulator
	Seed uint64
	R0   func(rng *rand.Rand) float64
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

// Get simulates burst i.
func (s *SimSource) Get(i uint64) (*Sample, error) {
	rng := rand.New(rand.NewPCG(mix(s.Seed, i), 0x51a7))
	var o simulate.Options
	o.Workers = 1
	if s.R0 != nil {
		o.R0 = s.R0(rng)
	}
	res, err := s.Sim.Patch(rng, o)
	if err != nil {
		return nil, fmt.Errorf("simulating burst %d: %w", i, err)
	}
	c := s.Sim.Config()
	return SampleFromBurst(res.Burst, c.Patch, c.Frames)
}
