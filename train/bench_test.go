package train

import (
	"math"
	"testing"

	"pdwave/model/instrument"
	"pdwave/model/modes"
	"pdwave/model/optics"
	"pdwave/simulate"
)

// demoConfig is the invented demo site of the contract (0.5 m, 600 nm,
// 0.120 arcsec, 1 wave PV, median r0 0.08 m at 500 nm, three layers).
func demoConfig(modes_ int) (Setup, simulate.Config) {
	tel := optics.Telescope{Diameter: 0.5, Obscuration: 0.15, FocalRatio: 40, Wavelength: 600e-9, PixelScale: 0.12 / optics.RadToArcsec}
	r0 := 0.08 * math.Pow(600.0/500, 1.2)
	deg := math.Pi / 180
	sc := simulate.Config{
		Instrument: instrument.Instrument{Telescope: tel, Diversity: []float64{0, 1},
			Patch: 64, Basis: modes.KindKL, Modes: modes_},
		Turbulence: simulate.Turbulence{R0: r0, L0: 30, Layers: []simulate.Layer{
			{Height: 0, Weight: 0.6, Speed: 5, Direction: 30 * deg},
			{Height: 3000, Weight: 0.25, Speed: 12, Direction: 100 * deg},
			{Height: 10000, Weight: 0.15, Speed: 25, Direction: 250 * deg}}},
		FrameInterval: 0.005,
		Camera:        simulate.Camera{Photons: 10000, ReadNoise: 5, Bits: 16},
		Frames:        16,
	}
	su := Setup{Instrument: sc.Instrument, Frames: 16}
	su.Site, su.DOverR0 = "demo", tel.Diameter/r0
	return su, sc
}

// BenchmarkSimulateBurst measures one simulated 64×64×16×2 demo burst on one goroutine.
func BenchmarkSimulateBurst(b *testing.B) {
	su, sc := demoConfig(21)
	sim, err := simulate.New(sc)
	if err != nil {
		b.Fatal(err)
	}
	src, err := NewSimSource(sim, su, 1, LogNormalR0(sc.Turbulence.R0, 1.3))
	if err != nil {
		b.Fatal(err)
	}
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := src.Get(uint64(i)); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkStepDemo measures one training step (batch 4 bursts of the demo
// size, simulation included) with the default network.
func BenchmarkStepDemo(b *testing.B) {
	su, sc := demoConfig(21)
	sim, err := simulate.New(sc)
	if err != nil {
		b.Fatal(err)
	}
	src, err := NewSimSource(sim, su, 1, LogNormalR0(sc.Turbulence.R0, 1.3))
	if err != nil {
		b.Fatal(err)
	}
	tr, err := New(su, Config{Steps: b.N + 1, Batch: 4, Seed: 1}, src)
	if err != nil {
		b.Fatal(err)
	}
	defer tr.Close()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := tr.Step(); err != nil {
			b.Fatal(err)
		}
	}
}
