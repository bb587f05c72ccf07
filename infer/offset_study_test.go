package infer

import (
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"testing"

	"pdwave/simulate"
)

// TestOffsetStudy, run only with PDWAVE_OFFSET_STUDY=1: how well the fit
// recovers a camera misregistration made by the simulator
// (simulate.Options.ChannelOffset, a tilt on the imaging pupil) on demo
// bursts over the scene mix. BURSTS (8) bursts per true offset (0, 0) and
// (0.7, −0.4) px; DR0 (5), FRAMES (16), MODES (36), HP, WINDOW, ITER, SEED
// (1), NODETREND, PATCH, OVERSAMPLE, PHOT; OBJ=1 also fits with the offset
// fixed at zero and prints both objectives. It prints each burst's fitted
// offset and error, and per offset the rms error and the error of the
// per-axis median.
func TestOffsetStudy(t *testing.T) {
	if os.Getenv("PDWAVE_OFFSET_STUDY") == "" {
		t.Skip("set PDWAVE_OFFSET_STUDY=1 to run the offset study")
	}
	sim, mix, cfg := offsetSetup(t, envF("DR0", 5), func(c *simulate.Config) {
		c.Frames = int(envF("FRAMES", 16))
		c.Patch = int(envF("PATCH", float64(c.Patch)))
		c.Oversample = int(envF("OVERSAMPLE", 0))
		c.Camera.Photons = envF("PHOT", c.Camera.Photons)
	})
	cfg.Modes = int(envF("MODES", 36))
	cfg.Metric.HighPass = envF("HP", cfg.Metric.HighPass)
	cfg.Metric.Window = envF("WINDOW", cfg.Metric.Window)
	cfg.Stop.Iterations = int(envF("ITER", float64(cfg.Stop.Iterations)))
	if os.Getenv("NODETREND") != "" {
		cfg.Metric.Detrend = false
	}
	f, err := NewFitter(cfg)
	if err != nil {
		t.Fatal(err)
	}
	cfg0 := cfg
	cfg0.Metric.FitChannelOffset = false
	f0, err := NewFitter(cfg0)
	if err != nil {
		t.Fatal(err)
	}
	n := int(envF("BURSTS", 8))
	seed := uint64(envF("SEED", 1))
	for _, off := range [][2]float64{{0, 0}, {0.7, -0.4}} {
		var sum2 float64
		var xs, ys []float64
		for i := 0; i < n; i++ {
			r, err := sim.Patch(rand.New(rand.NewPCG(seed, uint64(i))), simulate.Options{Source: mix, ChannelOffset: off})
			if err != nil {
				t.Fatal(err)
			}
			b := r.Burst
			res, err := f.Fit([][][]float64{b.Data[0], b.Data[1]}, nil)
			if err != nil {
				t.Fatal(err)
			}
			if os.Getenv("OBJ") != "" {
				r0, err := f0.Fit([][][]float64{b.Data[0], b.Data[1]}, nil)
				if err != nil {
					t.Fatal(err)
				}
				fmt.Printf("OBJ with offset %.6g (data %.6g, %d it, %s); fixed at zero %.6g (data %.6g, %d it)\n", res.MetricEnd, res.DataEnd, res.Iterations, res.Status, r0.MetricEnd, r0.DataEnd, r0.Iterations)
			}
			e := math.Hypot(res.ChannelOffset[0]-off[0], res.ChannelOffset[1]-off[1])
			sum2 += e * e
			xs, ys = append(xs, res.ChannelOffset[0]), append(ys, res.ChannelOffset[1])
			fmt.Printf("OFF true (%.2f, %.2f) fitted (%.3f, %.3f) error %.3f px  %s\n", off[0], off[1], res.ChannelOffset[0], res.ChannelOffset[1], e, r.Scene)
		}
		mx, my := medianOf(xs), medianOf(ys)
		fmt.Printf("OFFSUM true (%.2f, %.2f) rms error %.3f px over %d bursts; median (%.3f, %.3f), its error %.3f px\n", off[0], off[1], math.Sqrt(sum2/float64(n)), n, mx, my, math.Hypot(mx-off[0], my-off[1]))
	}
}
