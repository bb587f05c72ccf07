package burst

import (
	"fmt"
	"math"
	"slices"
)

// MaxBadFraction is the largest fraction of one frame's pixels the reader
// fills (undefined pixels and pixels a Calibrator marks bad); a frame with
// more is refused. At 5 % the filled pixels are still isolated or small
// clusters in practice (a detector's defects are usually well below 1 %;
// common practice), while a larger share means a wrong calibration file,
// a masked border or a broken frame, which filling would hide.
const MaxBadFraction = 0.05

// Calibrator calibrates a burst's frames as they are read, before the
// camera geometry is applied (calibration frames are in the stored
// orientation of their camera).
type Calibrator interface {
	// Calibrate calibrates, in place, the frames of channel c (0 focused,
	// 1 defocused), each nx×ny as stored, and sets the pixels it knows to
	// be bad to NaN (the reader then fills them with the undefined
	// pixels). It errors, naming the file, when its frames are not nx×ny.
	Calibrate(c, nx, ny int, frames [][]float64) error
}

// FillUndefined replaces every NaN or ±Inf pixel of the nx×ny image im in
// place by the median of its defined 8-neighbours and returns how many it
// replaced. It works in passes: each pass fills, from the values before
// the pass, the undefined pixels that have a defined neighbour, so the
// result does not depend on the scan order and clusters fill inwards from
// their edges. A median of the good neighbours keeps isolated bad pixels
// from biasing the phase-diversity metric (which compares the channels'
// spectra pixel by pixel) and does not spread an outlier as a mean would
// (common practice for bad-pixel repair). An image with no defined pixel
// is left as it is (the count is then len(im)). It panics if len(im) ≠
// nx·ny.
func FillUndefined(im []float64, nx, ny int) int {
	if len(im) != nx*ny {
		panic(fmt.Sprintf("burst.FillUndefined: %d pixels for %d×%d", len(im), nx, ny))
	}
	var todo []int
	for i, v := range im {
		if undefined(v) {
			todo = append(todo, i)
		}
	}
	n := len(todo)
	type fill struct {
		i int
		v float64
	}
	var nb [8]float64
	for len(todo) > 0 {
		var fills []fill
		var rest []int
		for _, i := range todo {
			x, y := i%nx, i/nx
			k := 0
			for dy := -1; dy <= 1; dy++ {
				for dx := -1; dx <= 1; dx++ {
					xx, yy := x+dx, y+dy
					if (dx == 0 && dy == 0) || xx < 0 || yy < 0 || xx >= nx || yy >= ny {
						continue
					}
					if v := im[yy*nx+xx]; !undefined(v) {
						nb[k], k = v, k+1
					}
				}
			}
			if k == 0 {
				rest = append(rest, i)
				continue
			}
			fills = append(fills, fill{i, median(nb[:k])})
		}
		if len(fills) == 0 {
			break // no defined pixel at all
		}
		for _, f := range fills {
			im[f.i] = f.v
		}
		todo = rest
	}
	return n
}

func undefined(v float64) bool { return math.IsNaN(v) || math.IsInf(v, 0) }

// median returns the median of v (the mean of the two middle values for
// an even count), reordering v.
func median(v []float64) float64 {
	slices.Sort(v)
	n := len(v)
	return (v[(n-1)/2] + v[n/2]) / 2
}
