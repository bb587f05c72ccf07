package infer

import (
	"fmt"

	"gonum.org/v1/gonum/floats"
	"gonum.org/v1/gonum/mat"

	"pdwave/model/modes"
)

// The symmetries of a square patch and what they do to the wavefront.
//
// With the PSF h(x) = |F⁻¹{P·exp(iφ)}(x)|², an image transformed by an
// orthogonal map L of the pixel grid, h'(x) = h(L x), is formed by the
// pupil transformed the same way, φ'(v) = φ(L v): substitute v = Lᵀu in
// the Fourier sum (Goodman, Introduction to Fourier Optics, the similarity
// theorem for rotations and reflections). The circular pupil and the
// defocus diversity are invariant under the eight maps of the square's
// dihedral group, so a burst turned by L is a burst of the wavefronts
// φ∘L. The turn about the image centre ((n−1)/2) and about the pupil
// centre (n/2) differ by a shift common to all frames: a burst-mean tilt,
// which phase diversity cannot see and every estimate removes.

// Turns is the number of dihedral transforms of a square (identity, three
// rotations, four reflections).
const Turns = 8

// TurnPixel maps output pixel (y, x) of an n×n square to its source pixel
// under transform t ∈ [0, Turns): t < 4 rotates by t quarter turns; t ≥ 4
// first reflects x, then rotates by t − 4.
func TurnPixel(t, y, x, n int) (int, int) {
	if t >= 4 {
		x = n - 1 - x
		t -= 4
	}
	switch t {
	case 1:
		return x, n - 1 - y
	case 2:
		return n - 1 - y, n - 1 - x
	case 3:
		return n - 1 - x, y
	}
	return y, x
}

// TurnImage stores in dst the n×n image src under transform t (see
// TurnPixel): dst(y, x) = src(TurnPixel(t, y, x)). dst must not alias src.
// It panics on wrong lengths or t outside [0, Turns).
func TurnImage(dst, src []float64, n, t int) {
	if len(dst) != n*n || len(src) != n*n || t < 0 || t >= Turns {
		panic(fmt.Sprintf("infer: TurnImage lengths %d, %d for n = %d, transform %d", len(dst), len(src), n, t))
	}
	if n == 0 {
		return
	}
	// The map is affine: along a row the source index moves by a fixed step.
	step := 0
	if n > 1 {
		y1, x1 := TurnPixel(t, 0, 1, n)
		y0, x0 := TurnPixel(t, 0, 0, n)
		step = (y1-y0)*n + (x1 - x0)
	}
	for y := 0; y < n; y++ {
		sy, sx := TurnPixel(t, y, 0, n)
		i := sy*n + sx
		row := dst[y*n : y*n+n]
		for x := range row {
			row[x] = src[i]
			i += step
		}
	}
}

// TurnBack holds, for a basis, the matrices that take the native
// coefficients of a burst turned by t back to those of the burst as
// recorded: if the turned burst's wavefront has coefficients c', the
// recorded one has Back[t]·c'.
type TurnBack struct {
	basis *modes.Basis
	back  [Turns]*mat.Dense
}

// NewTurnBack computes the matrices for b by projecting each mode, turned
// about the pupil centre (N/2, N/2), back on b (modes.Basis.Project, over
// the basis' default mask). It returns an error if a turned pupil pixel
// leaves the grid.
func NewTurnBack(b *modes.Basis) (*TurnBack, error) {
	n, c := b.N, b.N/2
	tb := &TurnBack{basis: b}
	src, dst := make([]float64, n*n), make([]float64, n*n)
	unit, col := make([]float64, b.Count), make([]float64, b.Count)
	for t := 0; t < Turns; t++ {
		m := mat.NewDense(b.Count, b.Count, nil)
		for k := 0; k < b.Count; k++ {
			clear(unit)
			unit[k] = 1
			b.Phase(src, unit)
			clear(dst)
			// The turned burst sees φ'(v) = φ(L v); the recorded wavefront
			// is φ(w) = φ'(L⁻¹ w): the value of mode k at pupil pixel v of the
			// turned frame belongs at w = L v of the recorded one.
			for _, i := range b.Index {
				vy, vx := i/n-c, i%n-c
				wy, wx := TurnPixel(t, vy+c, vx+c, 2*c+1)
				if wy < 0 || wy >= n || wx < 0 || wx >= n {
					return nil, fmt.Errorf("infer: turned pupil pixel (%d, %d) off the %d grid", wy, wx, n)
				}
				dst[wy*n+wx] = src[i]
			}
			b.Project(col, dst, nil)
			m.SetCol(k, col)
		}
		tb.back[t] = m
	}
	return tb, nil
}

// Back stores in dst (length Count) the native coefficients of the
// recorded burst's wavefront given those of the burst turned by t, c.
// dst must not alias c. It panics on wrong lengths or t; it allocates
// nothing.
func (tb *TurnBack) Back(dst, c []float64, t int) {
	mulRows(dst, tb.back[t], c)
}

// mulRows sets dst = a·c for the dense matrix a (len(dst) × len(c))
// without allocating. dst must not alias c; it panics on wrong lengths.
func mulRows(dst []float64, a *mat.Dense, c []float64) {
	r, k := a.Dims()
	if len(dst) != r || len(c) != k {
		panic(fmt.Sprintf("infer: %d×%d matrix times %d values into %d", r, k, len(c), len(dst)))
	}
	for i := range dst {
		dst[i] = floats.Dot(a.RawRowView(i), c)
	}
}
