package simulate

import (
	"math"
	"math/rand/v2"
	"testing"

	"pdwave/model/instrument"
	"pdwave/model/modes"
	"pdwave/model/optics"
)

const arcsec = math.Pi / (180 * 3600)

// demoConfig is the invented demo telescope and site of the project
// (contract.md "Shared decisions"): D = 0.5 m, obscuration 0.15, λ = 600 nm,
// 0.120 arcsec pixels, 1 wave PV diversity, three layers, r0 = 0.10 m at
// 600 nm, L0 = 30 m, 5 ms frames, 10000 photons, 5 e- read noise, 16 bit.
func demoConfig() Config {
	deg := math.Pi / 180
	return Config{
		Instrument: instrument.Instrument{
			Telescope: optics.Telescope{Diameter: 0.5, Obscuration: 0.15, FocalRatio: 40,
				Wavelength: 600e-9, PixelScale: 0.120 * arcsec},
			Diversity: []float64{0, 1},
			Patch:     64, Basis: modes.KindKL, Modes: 36,
		},
		Turbulence: Turbulence{R0: 0.10, L0: 30, Layers: []Layer{
			{Height: 0, Weight: 0.6, Speed: 5, Direction: 30 * deg},
			{Height: 3000, Weight: 0.25, Speed: 12, Direction: 100 * deg},
			{Height: 10000, Weight: 0.15, Speed: 25, Direction: 250 * deg},
		}},
		FrameInterval: 0.005,
		Camera:        Camera{Photons: 10000, ReadNoise: 5, Bits: 16},
		Frames:        16,
	}
}

func newSim(t testing.TB, c Config) *Simulator {
	t.Helper()
	s, err := New(c)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

func TestPatchDeterministic(t *testing.T) {
	c := demoConfig()
	c.Frames = 4
	s := newSim(t, c)
	run := func(seed uint64, workers int) *Result {
		r, err := s.Patch(rand.New(rand.NewPCG(seed, 1)), Options{Workers: workers})
		if err != nil {
			t.Fatal(err)
		}
		return r
	}
	a, b, d := run(1, 1), run(1, 3), run(2, 2)
	same := func(x, y *Result) bool {
		for c := 0; c < 2; c++ {
			for f := range x.Burst.Data[c] {
				for i, v := range x.Burst.Data[c][f] {
					if y.Burst.Data[c][f][i] != v {
						return false
					}
				}
			}
		}
		return true
	}
	if !same(a, b) {
		t.Error("same seed, different worker counts: bursts differ")
	}
	if same(a, d) {
		t.Error("different seeds: identical bursts")
	}
	if err := a.Burst.Validate(); err != nil {
		t.Error(err)
	}
}
