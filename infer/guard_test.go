package infer

import (
	"math/rand/v2"
	"testing"

	"pdwave/model/modes"
	"pdwave/model/pd"
)

// TestGuardFlagsAndDrops: with a limit no wavefront can meet, the guard
// flags the fit as implausible, refits it and, still above the limit, drops
// the correction (all but the registered tilts zero); with the guard off
// (limit 0) nothing is flagged and the fit keeps its coefficients. The
// limit itself (1.8 by default) was chosen on the scene mix (DefaultConfig).
func TestGuardFlagsAndDrops(t *testing.T) {
	src := demoSource(t)
	data, _, err := src(StudyCase{DOverR0: 5, Patch: 64, Frames: 8, DiversityPV: 1}, rand.New(rand.NewPCG(2, 3)))
	if err != nil {
		t.Fatal(err)
	}
	fit := func(limit float64) *Result {
		cfg := DefaultConfig()
		cfg.Telescope = demoTelescope()
		cfg.Frames, cfg.Modes = 8, 21
		cfg.Stop.Iterations = 40
		cfg.Chi2Limit = limit
		f, err := NewFitter(cfg)
		if err != nil {
			t.Fatal(err)
		}
		r, err := f.Fit(data, nil)
		if err != nil {
			t.Fatal(err)
		}
		return r
	}
	off := fit(0)
	if off.Flags != 0 {
		t.Errorf("guard off: flags %q", off.Flags)
	}
	on := fit(1e-9)
	if want := FlagImplausible | FlagRefitted | FlagRejected; on.Flags != want {
		t.Fatalf("impossible limit: flags %q, want %q", on.Flags, want)
	}
	tilt := pd.TiltModes(mustBasisOf(t))
	var kept, dropped float64
	for j := range on.Coeffs {
		for k, v := range on.Coeffs[j] {
			if k == tilt[0] || k == tilt[1] {
				continue
			}
			dropped += v * v
			kept += off.Coeffs[j][k] * off.Coeffs[j][k]
		}
	}
	if dropped > 1e-12*kept || !(kept > 0) {
		t.Errorf("rejected fit keeps Σα² = %g outside the tilts (unguarded fit %g)", dropped, kept)
	}
	t.Logf("unguarded PriorChi2 %.3g; rejected fit flags %q", fit(2).Chi2, on.Flags)
}

// mustBasisOf returns the basis of the guard test's fitter.
func mustBasisOf(t *testing.T) *modes.Basis {
	t.Helper()
	cfg := DefaultConfig()
	cfg.Telescope = demoTelescope()
	cfg.Frames, cfg.Modes = 8, 21
	f, err := NewFitter(cfg)
	if err != nil {
		t.Fatal(err)
	}
	return f.Basis()
}
