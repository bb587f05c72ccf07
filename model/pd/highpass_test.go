package pd

import (
	"math"
	"math/rand/v2"
	"testing"

	"pdwave/model/modes"
)

// TestHighPassWidth: σ is HighPass·N, raised to 0.4·λ/r0 in pixels by the
// seeing floor. On a grid where the pupil radius is R px, λ/D is N/(2R)
// px (the OTF cut-off is 2R frequency pixels).
func TestHighPassWidth(t *testing.T) {
	pr := makeProblem(t, 32, 2, []float64{0, 1}, modes.KindZernike, 6, 0.4, false, 5)
	lamD := 32 / (2 * pr.pupil.Radius)
	for _, c := range []struct {
		hp, dr0, want float64
	}{
		{0, 10, 0},
		{1.0 / 16, 0, 2},
		{1.0 / 16, 1, 2},                // floor 0.4·λ/D below 2 px
		{1.0 / 16, 10, 0.4 * 10 * lamD}, // floor above
		{0.25, 10, math.Max(8, 4*lamD)},
	} {
		s := NewObjective(pr.pupil, pr.basis, pr.div, 2, Settings{HighPass: c.hp, HighPassSeeing: c.dr0})
		if got := s.HighPassWidth(); math.Abs(got-c.want) > 1e-12 {
			t.Errorf("HighPass %g, D/r0 %g: σ = %.6g px, want %.6g (λ/D = %.4g px)", c.hp, c.dr0, got, c.want, lamD)
		}
	}
}

// TestHighPassCommutes: away from the patch edges the high-pass is the
// shift-invariant filter 1 − G, so filtering a shifted image equals
// shifting the filtered image (what makes the high-passed images images
// of the high-passed object). Checked on an integer shift of a random
// image, over the pixels farther than 3σ from every edge.
func TestHighPassCommutes(t *testing.T) {
	const n, sh = 48, 5
	rng := rand.New(rand.NewPCG(3, 4))
	big := make([]float64, (n+sh)*(n+sh))
	for i := range big {
		big[i] = rng.Float64()
	}
	cut := func(o int) []float64 {
		im := make([]float64, n*n)
		for y := 0; y < n; y++ {
			copy(im[y*n:(y+1)*n], big[(y+o)*(n+sh)+o:])
		}
		return im
	}
	h := newHighPass(n, 2.5)
	a := append([]float64(nil), h.apply(cut(0))...)
	b := h.apply(cut(sh))
	r := len(h.kern) - 1
	var worst float64
	for y := r; y < n-r-sh; y++ {
		for x := r; x < n-r-sh; x++ {
			worst = math.Max(worst, math.Abs(a[(y+sh)*n+x+sh]-b[y*n+x]))
		}
	}
	if worst > 1e-12 {
		t.Errorf("interior of the high-pass is not shift invariant: largest difference %.3g", worst)
	}
}
