package pd

import "math"

// highPass subtracts from an N×N image its Gaussian blur. The blur is a
// separable normalised convolution within the patch (Knutsson & Westin
// 1993, Proc. CVPR, 515: each output is the kernel-weighted mean of the
// pixels that exist), so the patch edge adds no dark border. Away from the
// edges it is the linear shift-invariant filter 1 − G, which commutes with
// the convolution by every PSF: the high-passed images are exactly images
// of the high-passed object, and the phase-diversity model holds for them
// as for the raw data. It owns its scratch; not safe for concurrent use.
type highPass struct {
	n    int
	kern []float64 // Gaussian taps at distance 0…r
	tmp  []float64 // row-blurred image
	out  []float64 // the high-passed image
}

// newHighPass returns the filter for N×N images with a Gaussian of
// standard deviation sigma pixels (> 0), truncated at 3σ.
func newHighPass(n int, sigma float64) *highPass {
	r := min(int(math.Ceil(3*sigma)), n-1)
	h := &highPass{n: n, kern: make([]float64, r+1), tmp: make([]float64, n*n), out: make([]float64, n*n)}
	for i := range h.kern {
		h.kern[i] = math.Exp(-0.5 * float64(i*i) / (sigma * sigma))
	}
	return h
}

// apply returns im minus its blur, in the filter's own buffer (valid
// until the next call). It allocates nothing.
func (h *highPass) apply(im []float64) []float64 {
	n := h.n
	for y := 0; y < n; y++ {
		row := im[y*n : (y+1)*n]
		for x := range row {
			h.tmp[y*n+x] = h.mean(row, x, 1)
		}
	}
	for x := 0; x < n; x++ {
		col := h.tmp[x:]
		for y := 0; y < n; y++ {
			h.out[y*n+x] = im[y*n+x] - h.mean(col, y, n)
		}
	}
	return h.out
}

// mean returns the kernel-weighted mean of v[i·stride] around index c
// over the indices 0…n−1 that exist.
func (h *highPass) mean(v []float64, c, stride int) float64 {
	r := len(h.kern) - 1
	lo, hi := max(-r, -c), min(r, h.n-1-c)
	var s, w float64
	for d := lo; d <= hi; d++ {
		k := h.kern[abs(d)]
		s += k * v[(c+d)*stride]
		w += k
	}
	return s / w
}

func abs(d int) int {
	if d < 0 {
		return -d
	}
	return d
}
