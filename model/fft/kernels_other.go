//go:build !amd64 || purego

package fft

import "unsafe"

// useVec is false where no vector kernels exist; the portable functions
// below keep the same contract and are never called in that case.
var useVec = false

func r4vec(y0, y1, y2, y3, x0, x1, x2, x3 *complex128, n int, w *[3]complex128) {
	ys := [4][]complex128{unsafe.Slice(y0, n), unsafe.Slice(y1, n), unsafe.Slice(y2, n), unsafe.Slice(y3, n)}
	xs := [4][]complex128{unsafe.Slice(x0, n), unsafe.Slice(x1, n), unsafe.Slice(x2, n), unsafe.Slice(x3, n)}
	for q := 0; q < n; q++ {
		t0 := xs[0][q] + xs[2][q]
		t1 := xs[0][q] - xs[2][q]
		t2 := xs[1][q] + xs[3][q]
		d := xs[1][q] - xs[3][q]
		t3 := complex(imag(d), -real(d))
		ys[0][q] = t0 + t2
		ys[1][q] = (t1 + t3) * w[0]
		ys[2][q] = (t0 - t2) * w[1]
		ys[3][q] = (t1 - t3) * w[2]
	}
}

func r4vecNoTw(y0, y1, y2, y3, x0, x1, x2, x3 *complex128, n int) {
	w := [3]complex128{1, 1, 1}
	r4vec(y0, y1, y2, y3, x0, x1, x2, x3, n, &w)
}

func r2vec(y0, y1, x0, x1 *complex128, n int, w *complex128) {
	a, b := unsafe.Slice(x0, n), unsafe.Slice(x1, n)
	c, d := unsafe.Slice(y0, n), unsafe.Slice(y1, n)
	for q := 0; q < n; q++ {
		c[q] = a[q] + b[q]
		d[q] = (a[q] - b[q]) * *w
	}
}

func r2vecNoTw(y0, y1, x0, x1 *complex128, n int) {
	w := complex128(1)
	r2vec(y0, y1, x0, x1, n, &w)
}

var (
	maskNegOdd  = [4]uint64{0, 1 << 63, 0, 1 << 63}
	maskNegEven = [4]uint64{1 << 63, 0, 1 << 63, 0}
)

// r4s1vec is the portable equivalent of the amd64 kernel (see
// kernels_amd64.s); it is not used when useVec is false.
func r4s1vec(y, x *complex128, m int, tv *float64, mask *[4]uint64) {
	xs := unsafe.Slice(x, 4*m)
	ys := unsafe.Slice(y, 4*m)
	t := unsafe.Slice(tv, 12*m)
	inv := mask[0] != 0
	for p := 0; p < m; p++ {
		a0, a1, a2, a3 := xs[p], xs[p+m], xs[p+2*m], xs[p+3*m]
		t0, t1, t2, d := a0+a2, a0-a2, a1+a3, a1-a3
		t3 := complex(imag(d), -real(d))
		if inv {
			t3 = -t3
		}
		b := [4]complex128{t0 + t2, t1 + t3, t0 - t2, t1 - t3}
		ys[4*p] = b[0]
		for k := 1; k < 4; k++ {
			o := (p/2)*24 + (k-1)*8 + 2*(p%2)
			ys[4*p+k] = b[k] * complex(t[o], t[o+5])
		}
	}
}
