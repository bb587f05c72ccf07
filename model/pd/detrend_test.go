package pd

import (
	"math"
	"testing"

	"pdwave/model/modes"
)

// TestDetrendRemovesPlanes: with Detrend, adding the same plane a + b·x +
// c·y to every image leaves the objective, its gradient and the noise
// estimate unchanged (the window-weighted least-squares plane absorbs it
// exactly, since the plane fit is linear in the data), and Restore returns
// the plane on top of the same restoration. Without Detrend the plane
// changes the objective: the control that shows the test can fail.
func TestDetrendRemovesPlanes(t *testing.T) {
	const n, frames, count = 32, 3, 8
	pr := makeProblem(t, n, frames, []float64{0, 1}, modes.KindZernike, count, 0.3, false, 5)
	tilted := make([][][]float64, len(pr.data))
	for k, ch := range pr.data {
		for _, im := range ch {
			o := make([]float64, len(im))
			for p, v := range im {
				x, y := float64(p%n), float64(p/n)
				o[p] = v + 0.5 + 0.03*x - 0.02*y
			}
			tilted[k] = append(tilted[k], o)
		}
	}
	eval := func(detrend bool, data [][][]float64) (float64, []float64, []float64) {
		s := NewObjective(pr.pupil, pr.basis, pr.div, frames, Settings{Detrend: detrend, PriorWeight: 0.01, NoiseFilter: true})
		if err := s.SetData(data); err != nil {
			t.Fatal(err)
		}
		g := make([]float64, s.NumParams())
		e := s.ValueGrad(g, pr.truth)
		r := make([]float64, n*n)
		s.Restore(r, pr.truth)
		return e, g, r
	}
	e0, g0, r0 := eval(true, pr.data)
	e1, g1, r1 := eval(true, tilted)
	if d := math.Abs(e1-e0) / e0; d > 1e-9 {
		t.Errorf("Detrend: objective changed by %.2g relative when a plane is added", d)
	}
	for i := range g0 {
		if d := math.Abs(g1[i] - g0[i]); d > 1e-9*(math.Abs(g0[i])+1e-3) {
			t.Errorf("Detrend: gradient %d changed from %g to %g", i, g0[i], g1[i])
			break
		}
	}
	// Restore adds the mean plane back: r1 − r0 is the plane itself.
	var worst float64
	for p := range r0 {
		x, y := float64(p%n), float64(p/n)
		worst = math.Max(worst, math.Abs(r1[p]-r0[p]-(0.5+0.03*x-0.02*y)))
	}
	if worst > 1e-9 {
		t.Errorf("Detrend: restoration with the plane differs from restoration + plane by %.2g", worst)
	}
	f0, _, _ := eval(false, pr.data)
	f1, _, _ := eval(false, tilted)
	if d := math.Abs(f1-f0) / f0; d < 1e-3 {
		t.Errorf("control: without Detrend the plane changed the objective by only %.2g relative", d)
	} else {
		t.Logf("objective change from the plane: %.2g without Detrend, %.2g with", d, math.Abs(e1-e0)/e0)
	}
}
