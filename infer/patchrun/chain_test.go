package patchrun

import (
	"errors"
	"math"
	"math/rand/v2"
	"reflect"
	"testing"

	"pdwave/infer"
	"pdwave/model/instrument"
	"pdwave/model/modes"
	"pdwave/model/optics"
	"pdwave/simulate"
)

// testFit is a small fit: the invented demo site's telescope
// (testdata/demo-site.yaml: D = 0.5 m, obscuration 0.15, F# 40,
// λ = 600 nm, 0.12 arcsec pixels) on 32 px patches, 4 frames, 8 modes.
func testFit(t *testing.T, iterations int) *infer.Fitter {
	t.Helper()
	fc := infer.DefaultConfig()
	fc.Telescope = optics.Telescope{Diameter: 0.5, Obscuration: 0.15, FocalRatio: 40, Wavelength: 600e-9, PixelScale: 0.12 / 206264.806}
	fc.Patch, fc.Frames, fc.Modes, fc.DOverR0 = 32, 4, 8, 3
	fc.Stop = infer.Stop{Iterations: iterations}
	f, err := infer.NewFitter(fc)
	if err != nil {
		t.Fatal(err)
	}
	return f
}

// testPatch simulates one burst patch for f's configuration (granulation,
// one turbulent layer, photon noise).
func testPatch(t *testing.T, f *infer.Fitter) [][][]float64 {
	t.Helper()
	fc := f.Config()
	sim, err := simulate.New(simulate.Config{
		Instrument: instrument.Instrument{Telescope: fc.Telescope, Diversity: []float64{0, fc.SecondDiversity()},
			Patch: fc.Patch, Basis: modes.KindKL, Modes: fc.Modes},
		Turbulence:    simulate.Turbulence{R0: fc.Telescope.Diameter / fc.DOverR0, L0: 30, Layers: []simulate.Layer{{Weight: 1, Speed: 5}}},
		FrameInterval: 0.005,
		Camera:        simulate.Camera{Photons: 10000},
		Frames:        fc.Frames,
	})
	if err != nil {
		t.Fatal(err)
	}
	res, err := sim.Patch(rand.New(rand.NewPCG(5, 1)), simulate.Options{Workers: 1})
	if err != nil {
		t.Fatal(err)
	}
	return res.Burst.Patch(0, 0, fc.Patch)
}

// fixedEstimator returns the same coefficients for every patch.
type fixedEstimator struct {
	b   *modes.Basis
	c   [][]float64
	err error
}

func (e fixedEstimator) Basis() *modes.Basis { return e.b }
func (e fixedEstimator) Estimate([][][]float64) ([][]float64, error) {
	out := make([][]float64, len(e.c))
	for j := range e.c {
		out[j] = append([]float64(nil), e.c[j]...)
	}
	return out, e.err
}

// TestChain: the stages give exactly what the fitters give when called
// by hand (polish from the constrained learned coefficients; the fit from
// zero or from the polish), with the times adding up. Planted and seen to
// fail: FitFromZero ignored, the polish started from the raw learned
// coefficients.
func TestChain(t *testing.T) {
	fit, polish := testFit(t, 25), testFit(t, 3)
	data := testPatch(t, fit)
	c := make([][]float64, 4)
	for j := range c {
		c[j] = []float64{0.3, -0.2, 0.1, 0, 0.05, 0, 0, 0.02}
	}
	zeroFirst := func(in [][]float64) [][]float64 {
		out := make([][]float64, len(in))
		for j := range in {
			out[j] = append([]float64{0}, in[j][1:]...)
		}
		return out
	}
	learned := fixedEstimator{b: fit.Basis(), c: c}
	wantPolish, err := polish.Fit(data, zeroFirst(c))
	if err != nil {
		t.Fatal(err)
	}
	for _, fromZero := range []bool{true, false} {
		ch := Chain{Learned: learned, Polish: polish, Fit: fit, FitFromZero: fromZero, Constrain: zeroFirst}
		est, err := ch.Estimate(data)
		if err != nil {
			t.Fatal(err)
		}
		var start [][]float64
		if !fromZero {
			start = wantPolish.Coeffs
		}
		wantFit, err := fit.Fit(data, start)
		if err != nil {
			t.Fatal(err)
		}
		if !reflect.DeepEqual(est.Raw, c) || !reflect.DeepEqual(est.Learned.Coeffs, zeroFirst(c)) {
			t.Errorf("learned stage %v, raw %v", est.Learned.Coeffs, est.Raw)
		}
		if !reflect.DeepEqual(est.Polished.Coeffs, wantPolish.Coeffs) || est.Polished.Iterations != wantPolish.Iterations {
			t.Errorf("from zero %v: polish differs from Fitter.Fit from the constrained learned coefficients", fromZero)
		}
		if !reflect.DeepEqual(est.Fitted.Coeffs, wantFit.Coeffs) || !reflect.DeepEqual(est.Final(), wantFit.Coeffs) {
			t.Errorf("from zero %v: fit differs from Fitter.Fit by hand", fromZero)
		}
		before := est.Polished.Total
		if fromZero {
			before = 0
		}
		if est.Polished.Total != est.Learned.Seconds+est.Polished.Seconds || est.Fitted.Total != before+est.Fitted.Seconds {
			t.Errorf("from zero %v: totals learned %+v polished %+v fitted %+v", fromZero, *est.Learned, *est.Polished, *est.Fitted)
		}
	}
}

// TestChainStages: a chain of the fit alone starts it from zero; one of
// the learned estimate alone ends there; failures name their stage; a
// chain without a stage fails.
func TestChainStages(t *testing.T) {
	fit := testFit(t, 10)
	data := testPatch(t, fit)
	est, err := (&Chain{Fit: fit}).Estimate(data)
	if err != nil {
		t.Fatal(err)
	}
	want, _ := fit.Fit(data, nil)
	if est.Learned != nil || est.Polished != nil || !reflect.DeepEqual(est.Final(), want.Coeffs) {
		t.Errorf("fit-only chain: %+v", est)
	}
	c := [][]float64{make([]float64, 8), make([]float64, 8), make([]float64, 8), make([]float64, 8)}
	c[2][3] = math.Pi
	est, err = (&Chain{Learned: fixedEstimator{b: fit.Basis(), c: c}}).Estimate(data)
	if err != nil || est.Fitted != nil || !reflect.DeepEqual(est.Final(), c) {
		t.Errorf("learned-only chain: %+v, %v", est, err)
	}
	bad := errors.New("no network")
	_, err = (&Chain{Learned: fixedEstimator{b: fit.Basis(), c: c, err: bad}, Fit: fit}).Estimate(data)
	var se *StageError
	if !errors.As(err, &se) || se.Stage != StageLearned || !errors.Is(err, bad) || err.Error() != "learned: no network" {
		t.Errorf("learned failure: %v", err)
	}
	_, err = (&Chain{Fit: fit}).Estimate(data[:1])
	if !errors.As(err, &se) || se.Stage != StageFit {
		t.Errorf("fit failure on one channel: %v", err)
	}
	if _, err := (&Chain{Polish: fit}).Estimate(data); err != ErrNoStage {
		t.Errorf("chain without a stage: %v", err)
	}
}
