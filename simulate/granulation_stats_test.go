package simulate

import (
	"math"
	"slices"

	"gonum.org/v1/gonum/stat"

	"pdwave/model/fft"
)

// granStats are the statistics of a granulation image measured as an
// observer would, from the image alone.
type granStats struct {
	CellMean, CellP10, CellP90 float64 // lane-bounded cells: equivalent diameters 2√(A/π), arcsec
	GranMean                   float64 // granules (brighter than the mean): mean equivalent diameter, arcsec
	Cells, Granules            int     // regions counted (not touching the border)
	PeakScale                  float64 // 1/(frequency of the peak of E(k)) between 0.5 and 6 arcsec, arcsec
	Slope                      float64 // log-log slope of E(k) between scales of 1.2 and 0.5 arcsec
	MesoSlope                  float64 // log-log slope of E(k) between scales of 12 and 4 arcsec
	Skew, Bright               float64 // intensity skewness; area fraction brighter than the mean
}

// fracAbove returns the fraction of pixels above the mean.
func fracAbove(im []float64) float64 {
	m := stat.Mean(im, nil)
	var k int
	for _, v := range im {
		if v > m {
			k++
		}
	}
	return float64(k) / float64(len(im))
}

// labels returns the 4-connected regions of mask (n×n): a label per
// pixel (−1 outside the mask) and the number of regions.
func labels(mask []bool, n int) ([]int32, int) {
	lab := make([]int32, n*n)
	for i := range lab {
		lab[i] = -1
	}
	var next int32
	stack := make([]int, 0, 1024)
	for s := range mask {
		if !mask[s] || lab[s] >= 0 {
			continue
		}
		lab[s] = next
		stack = append(stack[:0], s)
		for len(stack) > 0 {
			i := stack[len(stack)-1]
			stack = stack[:len(stack)-1]
			x := i % n
			for _, j := range [4]int{i - 1, i + 1, i - n, i + n} {
				if j < 0 || j >= n*n || (j == i-1 && x == 0) || (j == i+1 && x == n-1) {
					continue
				}
				if mask[j] && lab[j] < 0 {
					lab[j] = next
					stack = append(stack, j)
				}
			}
		}
		next++
	}
	return lab, int(next)
}

// grow hands unlabelled pixels to a labelled 4-neighbour, steps times
// (so a lane a few pixels wide is split between the cells either side).
func grow(lab []int32, n, steps int) {
	prev := make([]int32, len(lab))
	for s := 0; s < steps; s++ {
		copy(prev, lab)
		for i, l := range prev {
			if l >= 0 {
				continue
			}
			x := i % n
			for _, j := range [4]int{i - 1, i + 1, i - n, i + n} {
				if j < 0 || j >= n*n || (j == i-1 && x == 0) || (j == i+1 && x == n-1) {
					continue
				}
				if prev[j] >= 0 {
					lab[i] = prev[j]
					break
				}
			}
		}
	}
}

// areas returns the pixel counts of the regions that do not touch the
// border.
func areas(lab []int32, count, n int) []int {
	cnt := make([]int, count)
	edge := make([]bool, count)
	for i, l := range lab {
		if l < 0 {
			continue
		}
		cnt[l]++
		if x, y := i%n, i/n; x == 0 || y == 0 || x == n-1 || y == n-1 {
			edge[l] = true
		}
	}
	var out []int
	for l, c := range cnt {
		if !edge[l] {
			out = append(out, c)
		}
	}
	return out
}

// diameters turns pixel counts into equivalent diameters 2√(A/π), arcsec,
// dropping regions under minPx pixels (noise specks).
func diameters(areas []int, ps float64, minPx int) []float64 {
	var d []float64
	for _, a := range areas {
		if a >= minPx {
			d = append(d, 2*math.Sqrt(float64(a)/math.Pi)*ps)
		}
	}
	return d
}

// spectrum1D returns the one-dimensional power spectrum E(k) of im (n×n,
// mean removed): the power summed over integer frequency rings
// 0..n/2−1, the convention of the granulation spectra in the literature.
func spectrum1D(im []float64, n int) []float64 {
	m := stat.Mean(im, nil)
	src := make([]float64, n*n)
	for i, v := range im {
		src[i] = v - m
	}
	spec := make([]complex128, n*n)
	fft.NewPlan(n, n).ForwardReal(spec, src)
	power := make([]float64, n/2)
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			r := int(math.Round(math.Hypot(float64(signedFreq(x, n)), float64(signedFreq(y, n)))))
			if r > 0 && r < n/2 {
				v := spec[y*n+x]
				power[r] += real(v)*real(v) + imag(v)*imag(v)
			}
		}
	}
	return power
}

// logSlope fits log E against log k over the rings of scales from big to
// small arcsec (n px of ps arcsec).
func logSlope(e []float64, n int, ps, big, small float64) float64 {
	var xs, ys []float64
	for r := int(math.Ceil(float64(n) * ps / big)); r <= int(float64(n)*ps/small) && r < len(e); r++ {
		xs = append(xs, math.Log(float64(r)))
		ys = append(ys, math.Log(e[r]))
	}
	_, b := stat.LinearRegression(xs, ys, nil, false)
	return b
}

// valleys marks the pixels of im (n×n) that lie lower than both
// neighbours at distance a = 1…reach px along one of four directions by
// more than tol: the centre lines of dark lanes, whatever their depth.
func valleys(im []float64, n, reach int, tol float64) []bool {
	mask := make([]bool, n*n)
	dirs := [4][2]int{{1, 0}, {0, 1}, {1, 1}, {1, -1}}
	for y := reach; y < n-reach; y++ {
		for x := reach; x < n-reach; x++ {
			v := im[y*n+x]
		search:
			for _, d := range dirs {
				for a := 1; a <= reach; a++ {
					l := im[(y-a*d[1])*n+x-a*d[0]]
					r := im[(y+a*d[1])*n+x+a*d[0]]
					if v < l-tol && v < r-tol {
						mask[y*n+x] = true
						break search
					}
				}
			}
		}
	}
	return mask
}

// measureGranulation measures an n×n granulation image at ps arcsec/px.
// Cells: the regions between the lane centre lines (valleys deeper than
// 1 % of the mean within 0.15 arcsec), each then grown over the lane
// pixels beside it; granules: the regions brighter than the mean.
// Regions under 0.25 arcsec across or touching the border are left out.
func measureGranulation(im []float64, n int, ps float64) granStats {
	var st granStats
	mean := stat.Mean(im, nil)
	reach := max(1, int(math.Round(0.15/ps)))
	lane := valleys(im, n, reach, 0.01*mean)
	cellMask := make([]bool, n*n)
	granMask := make([]bool, n*n)
	for i, v := range im {
		cellMask[i] = !lane[i]
		granMask[i] = v > mean
	}
	minPx := int(math.Ceil(math.Pi / 4 * math.Pow(0.25/ps, 2))) // 0.25 arcsec
	cl, nc := labels(cellMask, n)
	grow(cl, n, reach+1)
	cd := diameters(areas(cl, nc, n), ps, minPx)
	gl, ng := labels(granMask, n)
	gd := diameters(areas(gl, ng, n), ps, minPx)
	st.Cells, st.Granules = len(cd), len(gd)
	if len(cd) > 1 {
		st.CellMean = stat.Mean(cd, nil)
		slices.Sort(cd)
		st.CellP10 = stat.Quantile(0.1, stat.Empirical, cd, nil)
		st.CellP90 = stat.Quantile(0.9, stat.Empirical, cd, nil)
	}
	if len(gd) > 0 {
		st.GranMean = stat.Mean(gd, nil)
	}
	e := spectrum1D(im, n)
	best := 0
	for r := int(float64(n) * ps / 6); r <= int(float64(n)*ps/0.5) && r < n/2; r++ {
		if best == 0 || e[r] > e[best] {
			best = r
		}
	}
	st.PeakScale = float64(n) * ps / float64(best)
	st.Slope = logSlope(e, n, ps, 1.2, 0.5)
	st.MesoSlope = logSlope(e, n, ps, 12, 4)
	st.Skew = stat.Skew(im, nil)
	st.Bright = fracAbove(im)
	return st
}
