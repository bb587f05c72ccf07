package restore

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"testing"

	"pdwave/infer"
	"pdwave/model/fft"
	"pdwave/model/modes"
	"pdwave/model/net"
)

// benchField returns an n×n field of frames frames per channel: one smooth
// random scene with independent noise per frame (the cost of restoring does
// not depend on the scene, except for the iterations of polish and fit).
func benchField(b *testing.B, n, frames int) *Field {
	rng := rand.New(rand.NewPCG(1, uint64(n)))
	plan := fft.NewPlan(n, n)
	im := make([]float64, n*n)
	for i := range im {
		im[i] = rng.NormFloat64()
	}
	spec := make([]complex128, n*n)
	plan.ForwardReal(spec, im)
	for k := 0; k < n; k++ {
		for l := 0; l < n; l++ {
			f := math.Hypot(dftFreq(l, n), dftFreq(k, n)) * 8
			spec[k*n+l] *= complex(f*math.Exp(-f*f), 0)
		}
	}
	plan.InverseReal(im, spec)
	var s2 float64
	for _, v := range im {
		s2 += v * v
	}
	sd := math.Sqrt(s2 / float64(len(im)))
	var data [2][][]float64
	for c := 0; c < 2; c++ {
		for j := 0; j < frames; j++ {
			fr := make([]float64, n*n)
			for i, v := range im {
				fr[i] = 1e4*(1+0.1*v/sd) + 100*rng.NormFloat64()
			}
			data[c] = append(data[c], fr)
		}
	}
	f, err := NewField(n, n, data)
	if err != nil {
		b.Fatal(err)
	}
	return f
}

// benchPhysics is the demo configuration (36 KL modes, D/r0 = 5) with a
// learned start from a network of the shipped architecture (untrained
// weights: the cost of a forward pass does not depend on their values).
func benchPhysics(b *testing.B, frames, polish int, fit bool) *FieldSetup {
	cfg := infer.DefaultConfig()
	cfg.Telescope = demoTelescope()
	cfg.Frames = frames
	cfg.Basis = modes.KindKL
	cfg.Modes = 36
	m := Method{Name: "fit"}
	if !fit {
		tel := cfg.Telescope
		scale := make([]float64, cfg.Modes)
		for i := range scale {
			scale[i] = 0.1
		}
		model, err := net.New(net.DefaultArch(cfg.Modes), net.Meta{Basis: "kl", Modes: cfg.Modes, Patch: cfg.Patch,
			Frames: frames, Diameter: tel.Diameter, Obscuration: tel.Obscuration, Wavelength: tel.Wavelength,
			PixelScale: tel.PixelScale, DiversityPV: 1}, scale, 1)
		if err != nil {
			b.Fatal(err)
		}
		l, err := NewNetwork(model, cfg)
		if err != nil {
			b.Fatal(err)
		}
		m = Method{Start: l, Polish: polish, Name: "learned"}
	}
	p, err := NewFieldSetup(cfg, m)
	if err != nil {
		b.Fatal(err)
	}
	return p
}

func benchRestore(b *testing.B, n, frames, polish int, fit bool) {
	f := benchField(b, n, frames)
	phys := benchPhysics(b, frames, polish, fit)
	opt := Options{Patch: 64, Overlap: 16, NewEngine: phys.NewEngine}
	g, _ := NewGrid(n, n, 64, 16)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		col := NewCollector(g)
		if _, err := Run(context.Background(), f, opt, col.Add); err != nil {
			b.Fatal(err)
		}
	}
	b.StopTimer()
	perPatch := b.Elapsed().Seconds() / float64(b.N) / float64(g.Count())
	b.ReportMetric(perPatch*1e3, "ms/patch")
	b.ReportMetric(float64(g.Count()), "patches")
	b.ReportMetric(float64(runtime.GOMAXPROCS(0)), "procs")
}

// BenchmarkRestoreLearned measures the learned path (no polish) against
// field area and frame count. The target case is 1024 px, 16 frames.
func BenchmarkRestoreLearned(b *testing.B) {
	for _, n := range []int{256, 512, 1024} {
		for _, frames := range []int{8, 16} {
			b.Run(fmt.Sprintf("field%d/frames%d", n, frames), func(b *testing.B) { benchRestore(b, n, frames, 0, false) })
		}
	}
}

// BenchmarkRestorePolish measures the cost of polish steps after the
// learned estimate (256 px field, 16 frames).
func BenchmarkRestorePolish(b *testing.B) {
	for _, p := range []int{0, 2, 5, 10} {
		b.Run(fmt.Sprintf("polish%d", p), func(b *testing.B) { benchRestore(b, 256, 16, p, false) })
	}
}

// BenchmarkRestoreFit measures the full classical fit (256 px field, 16
// frames).
func BenchmarkRestoreFit(b *testing.B) { benchRestore(b, 256, 16, 0, true) }

// BenchmarkPrepare measures calibration-free preparation (burst means,
// co-registration, Fourier shift of the defocused frames) of a 1024 px
// field with 16 frames.
func BenchmarkPrepare(b *testing.B) {
	f := benchField(b, 1024, 16)
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, _, err := prepareField(f, nil, true, 0); err != nil {
			b.Fatal(err)
		}
	}
}
