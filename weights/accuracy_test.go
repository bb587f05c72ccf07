package weights_test

import (
	"maps"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"testing"

	"pdwave/infer"
	"pdwave/model/burst"
	"pdwave/model/instrument"
	"pdwave/model/net"
	"pdwave/model/site"
	"pdwave/simulate"
	"pdwave/weights"
)

// boundPerGroup is the number of bursts per scene group of the bound's set.
const boundPerGroup = 6

// boundCase is one burst of the accuracy bound's fixed set.
type boundCase struct {
	group string // "granulation" or "real"
	scene string // the simulator's description of the scene
	data  [2][][]float64
	truth *burst.Truth
}

// boundSet simulates the fixed set the accuracy bound is measured on: the
// demo site (testdata/demo-site.yaml) at its median seeing, 16 frames,
// 64 px, with the simulator's default image formation (pupil sampled twice
// as finely as the network's grid, PSF support 128 px, pixel box), 4 bursts
// over synthetic granulation and 4 over windows of two real images
// (brick.fits and grass.fits of testdata/scenes, CC0, from scikit-image's
// data set), burst i drawn from PCG(0xacc0b0d, i) of its group. Nothing is
// cached: the set is made anew on every run (about 0.2 s per burst).
func boundSet(t *testing.T) []boundCase {
	t.Helper()
	st, err := site.Load("../testdata/demo-site.yaml")
	if err != nil {
		t.Fatal(err)
	}
	cfg, _, err := simulate.ConfigFromSite(st, instrument.Partial{})
	if err != nil {
		t.Fatal(err)
	}
	sim, err := simulate.New(cfg)
	if err != nil {
		t.Fatal(err)
	}
	dir, err := simulate.FindSceneDir()
	if err != nil {
		t.Fatal(err)
	}
	var scenes []simulate.Scene
	for _, name := range []string{"brick.fits", "grass.fits"} {
		im, err := simulate.NewImageScene(filepath.Join(dir, name))
		if err != nil {
			t.Fatal(err)
		}
		scenes = append(scenes, im)
	}
	gran := simulate.GranulationScene{}
	groups := []struct {
		name string
		src  []simulate.Scene // burst i uses src[i % len(src)]
		seq  uint64
	}{{"granulation", []simulate.Scene{gran}, 1}, {"real", scenes, 2}}
	var set []boundCase
	for _, g := range groups {
		for i := uint64(0); i < boundPerGroup; i++ {
			o := simulate.Options{Source: g.src[i%uint64(len(g.src))]}
			res, err := sim.Patch(rand.New(rand.NewPCG(0xacc0b0d+g.seq, i)), o)
			if err != nil {
				t.Fatalf("%s burst %d: %v", g.name, i, err)
			}
			b := res.Burst
			set = append(set, boundCase{group: g.name, scene: res.Scene, data: [2][][]float64{b.Data[0], b.Data[1]}, truth: b.Truth})
		}
	}
	return set
}

// medianErrors returns, per scene group, the median over its bursts of the
// network's residual fraction (infer.ResidualFraction) over Noll 2–10 and
// 2–21, and logs every burst.
func medianErrors(t *testing.T, label string, m *net.Model, set []boundCase) map[string][2]float64 {
	return medianErrorsTurned(t, label, m, set, 1)
}

// medianErrorsTurned is medianErrors for the learned estimate averaged over
// turns symmetries of the square (infer.NetEstimator.SetTurns; 1 = the
// network's own Estimator).
func medianErrorsTurned(t *testing.T, label string, m *net.Model, set []boundCase, turns int) map[string][2]float64 {
	t.Helper()
	est, err := net.NewEstimator(m)
	if err != nil {
		t.Fatal(err)
	}
	ne, err := infer.NewNetEstimator(m, est.Basis())
	if err != nil {
		t.Fatal(err)
	}
	if err := ne.SetTurns(turns); err != nil {
		t.Fatal(err)
	}
	per := map[string][2][]float64{}
	for i, c := range set {
		_, noll, err := est.Burst(c.data)
		if turns > 1 && err == nil {
			var native [][]float64
			if native, err = ne.Estimate([][][]float64{c.data[0], c.data[1]}); err == nil {
				noll, err = infer.RemoveMeanTilt(est.Basis(), native)
			}
		}
		if err != nil {
			t.Fatalf("%s: burst %d: %v", label, i, err)
		}
		e := per[c.group]
		for k, jmax := range []int{10, 21} {
			v, err := infer.ResidualFraction(noll, c.truth.Noll, jmax)
			if err != nil {
				t.Fatal(err)
			}
			e[k] = append(e[k], v)
		}
		per[c.group] = e
		t.Logf("%s: burst %d (%s): error/variance Noll 2–10 %.3f, 2–21 %.3f", label, i, c.scene, e[0][len(e[0])-1], e[1][len(e[1])-1])
	}
	out := map[string][2]float64{}
	for _, g := range slices.Sorted(maps.Keys(per)) {
		e := per[g]
		out[g] = [2]float64{median(e[0]), median(e[1])}
		t.Logf("%s: %s median error/variance: Noll 2–10 %.3f, 2–21 %.3f", label, g, out[g][0], out[g][1])
	}
	return out
}

// median returns the median of a (midpoint of the two middle values for an
// even count); a is sorted in place.
func median(a []float64) float64 {
	slices.Sort(a)
	n := len(a)
	if n%2 == 1 {
		return a[n/2]
	}
	return (a[n/2-1] + a[n/2]) / 2
}

// accuracyBound is the largest median error fraction (infer.ResidualFraction)
// TestBuiltInAccuracyBound accepts per scene group, over Noll 2–10 and
// 2–21: about 1.3× what the shipped demo.safetensors scored on boundSet,
// measured on this set, 2026-12-02 (amd64, AVX2 kernels):
//
//	granulation  Noll 2–10 0.172, 2–21 0.240  → bounds 0.22, 0.31
//	real         Noll 2–10 0.320, 2–21 0.400  → bounds 0.42, 0.52
//
// (the real group's bursts over brick.fits score 0.41–0.87, those over
// grass.fits 0.16–0.24 over Noll 2–10). Retrained weights that are better
// may tighten these; weights that are worse must not loosen them unnoticed.
var accuracyBound = map[string][2]float64{
	"granulation": {0.22, 0.31},
	"real":        {0.42, 0.52},
}

// TestBuiltInAccuracyBound bounds the accuracy of the shipped network on a
// small fixed set of simulated bursts (boundSet): the median error per
// scene group must stay within accuracyBound, so that a broken or emptied
// weight file, or a change to the features or the forward pass that the
// weights were not trained for, fails go test. As a control, the same
// network with every weight tensor zeroed (it then predicts zero, leaving
// all of the true variance: error fraction 1) must score at least 1.5× the
// bound, showing the bound separates a working network from none.
func TestBuiltInAccuracyBound(t *testing.T) {
	set := boundSet(t)
	m, err := weights.Default()
	if err != nil {
		t.Fatal(err)
	}
	got := medianErrors(t, "built-in", m, set)
	for _, p := range m.Params {
		clear(p.Data)
	}
	zero := medianErrors(t, "zeroed control", m, set)
	for _, g := range []string{"granulation", "real"} {
		for k, span := range []string{"2–10", "2–21"} {
			bound := accuracyBound[g][k]
			if v := got[g][k]; !(v <= bound) {
				t.Errorf("%s scenes, Noll %s: built-in weights leave median error/variance %.3f, bound %.2f", g, span, v, bound)
			}
			if v := zero[g][k]; !(v >= 1.5*bound) {
				t.Errorf("%s scenes, Noll %s: zeroed control scores %.3f, not clearly above the bound %.2f (want ≥ %.2f)", g, span, v, bound, 1.5*bound)
			}
		}
	}
}

// TestCandidateAccuracy, run only with PDWAVE_EVAL_WEIGHTS=FILE: the
// accuracy of FILE's network on boundSet, as TestBuiltInAccuracyBound
// measures the built-in weights, for TURNS (default 1) symmetries of the
// square averaged over; it only logs.
func TestCandidateAccuracy(t *testing.T) {
	path := os.Getenv("PDWAVE_EVAL_WEIGHTS")
	if path == "" {
		t.Skip("set PDWAVE_EVAL_WEIGHTS=FILE to score a weight file on the bound set")
	}
	m, err := net.Load(path)
	if err != nil {
		t.Fatal(err)
	}
	turns := 1
	if v := os.Getenv("TURNS"); v != "" {
		if turns, err = strconv.Atoi(v); err != nil {
			t.Fatal(err)
		}
	}
	medianErrorsTurned(t, path, m, boundSet(t), turns)
}
