package fft

import (
	"math"
	"math/bits"
)

// plan1 is a 1-D complex DFT of length n applied to a batch of v
// interleaved sequences: element j of lane q is at index j*v+q. Lengths
// whose prime factors are 2, 3 and 5 use a self-sorting mixed-radix
// Stockham algorithm (Van Loan 1992, Computational Frameworks for the FFT,
// ch. 1); other lengths use Bluestein's chirp-z algorithm (Bluestein 1970,
// IEEE Trans. Audio Electroacoust. 18, 451) on a power-of-two plan.
type plan1 struct {
	n      int
	stages []stage

	// Bluestein path (stages == nil, n > 1)
	chirp []complex128 // chirp[k] = exp(-πi k²/n)
	fb    []complex128 // DFT of the conjugate chirp, zero padded to len(work)
	sub   *plan1       // power-of-two plan of length len(work)
	work  []complex128
	sa    []complex128 // scratch for sub
	sb    []complex128
}

// stage is one radix-r pass of the Stockham algorithm on a sub-problem of
// length r*m with stride s (the product of the radices of earlier stages).
type stage struct {
	r, m, s int
	tw      []complex128 // tw[p*(r-1)+k-1] = exp(-2πi p k/(r m)), p < m, 1 ≤ k < r
	twi     []complex128 // conjugate of tw, for the inverse transform

	// Twiddles of a first radix-4 stage laid out for r4s1vec (forward
	// and inverse); nil unless r == 4, s == 1 and m is even.
	tv, tvi []float64
}

// vecTwiddles lays out radix-4 twiddles for r4s1vec: per pair of p, the
// vectors (wr, wr, wr', wr') and (-wi, wi, -wi', wi') for k = 1, 2, 3.
func vecTwiddles(tw []complex128, m int) []float64 {
	t := make([]float64, 0, 12*m)
	for p := 0; p < m; p += 2 {
		for k := 0; k < 3; k++ {
			a, b := tw[3*p+k], tw[3*(p+1)+k]
			t = append(t, real(a), real(a), real(b), real(b), -imag(a), imag(a), -imag(b), imag(b))
		}
	}
	return t
}

// factor splits n into radices 8, 4, 3, 5, 2 (at most one eight and one
// two). It returns nil if n has another prime factor.
func factor(n int) []int {
	var f []int
	// For powers of two with odd log2, one radix-8 stage replaces a
	// radix-4 and a radix-2 stage (one pass over the data fewer). The
	// portable code puts it first (more radix-8 stages measured no faster:
	// register pressure); the vector code has it as the last,
	// twiddle-free stage.
	last8 := false
	if n >= 8 && n&(n-1) == 0 && bits.TrailingZeros(uint(n))%2 == 1 {
		if useVec {
			last8 = true
		} else {
			f = append(f, 8)
		}
		n /= 8
	}
	for n%4 == 0 {
		f = append(f, 4)
		n /= 4
	}
	for _, r := range []int{3, 5} {
		for n%r == 0 {
			f = append(f, r)
			n /= r
		}
	}
	if n%2 == 0 {
		f = append(f, 2)
		n /= 2
	}
	if n != 1 {
		return nil
	}
	if last8 {
		f = append(f, 8)
	}
	return f
}

// expi returns exp(-2πi num/den) with the argument reduced exactly.
func expi(num, den int) complex128 {
	num %= den
	s, c := math.Sincos(-2 * math.Pi * float64(num) / float64(den))
	return complex(c, s)
}

func newPlan1(n int) *plan1 {
	p := &plan1{n: n}
	if n == 1 {
		return p
	}
	if f := factor(n); f != nil {
		s := 1
		for _, r := range f {
			m := n / (s * r)
			st := stage{r: r, m: m, s: s}
			st.tw = make([]complex128, m*(r-1))
			st.twi = make([]complex128, m*(r-1))
			for q := 0; q < m; q++ {
				for k := 1; k < r; k++ {
					w := expi(q*k, r*m)
					st.tw[q*(r-1)+k-1] = w
					st.twi[q*(r-1)+k-1] = conj(w)
				}
			}
			if r == 4 && s == 1 && m%2 == 0 {
				st.tv = vecTwiddles(st.tw, m)
				st.tvi = vecTwiddles(st.twi, m)
			}
			p.stages = append(p.stages, st)
			s *= r
		}
		return p
	}
	m := 1
	for m < 2*n-1 {
		m <<= 1
	}
	p.sub = newPlan1(m)
	p.chirp = make([]complex128, n)
	for k := range p.chirp {
		// exp(-πi k²/n) = exp(-2πi (k² mod 2n)/(2n)).
		p.chirp[k] = expi((k*k)%(2*n), 2*n)
	}
	p.fb = make([]complex128, m)
	p.fb[0] = conj(p.chirp[0])
	for k := 1; k < n; k++ {
		v := conj(p.chirp[k])
		p.fb[k] = v
		p.fb[m-k] = v
	}
	p.work = make([]complex128, m)
	p.sa = make([]complex128, m)
	p.sb = make([]complex128, m)
	p.sub.run(p.fb, p.fb, p.sa, p.sb, 1, false)
	return p
}

func conj(z complex128) complex128 { return complex(real(z), -imag(z)) }

// sameSlice reports whether a and b start at the same element.
func sameSlice(a, b []complex128) bool { return len(a) > 0 && len(b) > 0 && &a[0] == &b[0] }

// run computes the unnormalised DFT (inverse: exponent sign +) of v
// interleaved sequences of length n from src into dst. dst may be src.
// a and b are scratch buffers of at least n*v elements that must not
// overlap dst or src.
func (p *plan1) run(dst, src, a, b []complex128, v int, inv bool) {
	n := p.n * v
	dst, src = dst[:n], src[:n]
	if p.n == 1 {
		if !sameSlice(dst, src) {
			copy(dst, src)
		}
		return
	}
	if p.stages == nil {
		p.bluestein(dst, src, v, inv)
		return
	}
	a, b = a[:n], b[:n]
	R := len(p.stages)
	in := src
	for i := range p.stages {
		st := &p.stages[i]
		out := dst
		if (R-1-i)%2 == 1 {
			out = a
		}
		if i == 0 && sameSlice(out, src) {
			out = b
		}
		st.apply(out, in, v, inv)
		in = out
	}
	if !sameSlice(in, dst) {
		copy(dst, in)
	}
}

func (st *stage) apply(dst, src []complex128, v int, inv bool) {
	tw := st.tw
	if inv {
		tw = st.twi
	}
	s := st.s * v
	switch st.r {
	case 4:
		if s == 1 && useVec && st.tv != nil {
			if inv {
				r4s1vec(&dst[0], &src[0], st.m, &st.tvi[0], &maskNegEven)
			} else {
				r4s1vec(&dst[0], &src[0], st.m, &st.tv[0], &maskNegOdd)
			}
		} else if s == 1 {
			radix4s1(dst, src, st.m, tw, inv)
		} else {
			radix4(dst, src, st.m, s, tw, inv)
		}
	case 8:
		if useVec && st.m == 1 && s%2 == 0 {
			_ = dst[8*s-1]
			_ = src[8*s-1]
			mask := &maskNegOdd
			if inv {
				mask = &maskNegEven
			}
			r8last(&dst[0], &src[0], s, mask)
		} else if s == 1 {
			radix8s1(dst, src, st.m, tw, inv)
		} else {
			radix8(dst, src, st.m, s, tw, inv)
		}
	case 2:
		radix2(dst, src, st.m, s, tw)
	case 3:
		radix3(dst, src, st.m, s, tw, inv)
	case 5:
		radix5(dst, src, st.m, s, tw, inv)
	default:
		panic("fft: internal error: bad radix")
	}
}

// The radix-r stages below compute, for p < m and q < s,
//
//	dst[q + s*(r*p + k)] = w^{pk} Σ_j src[q + s*(p + j*m)] exp(∓2πi jk/r),
//
// w = exp(∓2πi/(r m)), the Stockham step derived from the Cooley–Tukey
// index split n = r·m (Van Loan 1992, ch. 1).

func radix2(dst, src []complex128, m, s int, tw []complex128) {
	for p := 0; p < m; p++ {
		x0 := src[s*p : s*p+s]
		x1 := src[s*(p+m) : s*(p+m)+s]
		y0 := dst[2*s*p : 2*s*p+s]
		y1 := dst[2*s*p+s : 2*s*p+2*s]
		x1, y0, y1 = x1[:len(x0)], y0[:len(x0)], y1[:len(x0)]
		q0 := 0
		if useVec && len(x0) >= 2 {
			q0 = len(x0) &^ 1
			if p == 0 {
				r2vecNoTw(&y0[0], &y1[0], &x0[0], &x1[0], q0)
			} else {
				r2vec(&y0[0], &y1[0], &x0[0], &x1[0], q0, &tw[p])
			}
			if q0 == len(x0) {
				continue
			}
		}
		if p == 0 {
			for q := q0; q < len(x0); q++ {
				a, b := x0[q], x1[q]
				y0[q] = a + b
				y1[q] = a - b
			}
			continue
		}
		w := tw[p]
		for q := q0; q < len(x0); q++ {
			a := x0[q]
			b := x1[q]
			y0[q] = a + b
			y1[q] = (a - b) * w
		}
	}
}

// radix4s1 is radix4 for s == 1.
func radix4s1(dst, src []complex128, m int, tw []complex128, inv bool) {
	x0 := src[0:m]
	x1 := src[m : 2*m]
	x2 := src[2*m : 3*m]
	x3 := src[3*m : 4*m]
	x1, x2, x3 = x1[:len(x0)], x2[:len(x0)], x3[:len(x0)]
	tw = tw[:3*len(x0)]
	dst = dst[:4*len(x0)]
	for p, a0 := range x0 {
		a1, a2, a3 := x1[p], x2[p], x3[p]
		t0 := a0 + a2
		t1 := a0 - a2
		t2 := a1 + a3
		d := a1 - a3
		var t3 complex128
		if inv {
			t3 = complex(-imag(d), real(d))
		} else {
			t3 = complex(imag(d), -real(d))
		}
		w := tw[3*p : 3*p+3]
		y := dst[4*p : 4*p+4]
		y[0] = t0 + t2
		y[1] = (t1 + t3) * w[0]
		y[2] = (t0 - t2) * w[1]
		y[3] = (t1 - t3) * w[2]
	}
}

func radix4(dst, src []complex128, m, s int, tw []complex128, inv bool) {
	if useVec && s%2 == 0 && m > 1 {
		_ = dst[4*m*s-1]
		_ = src[4*m*s-1]
		_ = tw[3*m-1]
		mask := &maskNegOdd
		if inv {
			mask = &maskNegEven
		}
		r4stage(&dst[0], &src[0], m, s, &tw[0], mask)
		return
	}
	for p := 0; p < m; p++ {
		x0 := src[s*p : s*p+s]
		x1 := src[s*(p+m) : s*(p+m)+s]
		x2 := src[s*(p+2*m) : s*(p+2*m)+s]
		x3 := src[s*(p+3*m) : s*(p+3*m)+s]
		o := 4 * s * p
		y0 := dst[o : o+s]
		y1 := dst[o+s : o+2*s]
		y2 := dst[o+2*s : o+3*s]
		y3 := dst[o+3*s : o+4*s]
		x1, x2, x3 = x1[:len(x0)], x2[:len(x0)], x3[:len(x0)]
		y0, y1, y2, y3 = y0[:len(x0)], y1[:len(x0)], y2[:len(x0)], y3[:len(x0)]
		if inv {
			// Exchanging outputs 1 and 3 turns the forward radix-4
			// butterfly into the inverse one.
			y1, y3 = y3, y1
		}
		q0 := 0
		if useVec && len(x0) >= 2 {
			q0 = len(x0) &^ 1
			if p == 0 {
				r4vecNoTw(&y0[0], &y1[0], &y2[0], &y3[0], &x0[0], &x1[0], &x2[0], &x3[0], q0)
			} else {
				w := [3]complex128{tw[3*p], tw[3*p+1], tw[3*p+2]}
				if inv {
					w[0], w[2] = w[2], w[0]
				}
				r4vec(&y0[0], &y1[0], &y2[0], &y3[0], &x0[0], &x1[0], &x2[0], &x3[0], q0, &w)
			}
			if q0 == len(x0) {
				continue
			}
		}
		if p == 0 {
			for q := q0; q < len(x0); q++ {
				a0, a1, a2, a3 := x0[q], x1[q], x2[q], x3[q]
				t0 := a0 + a2
				t1 := a0 - a2
				t2 := a1 + a3
				d := a1 - a3
				t3 := complex(imag(d), -real(d))
				y0[q] = t0 + t2
				y1[q] = t1 + t3
				y2[q] = t0 - t2
				y3[q] = t1 - t3
			}
			continue
		}
		w1, w2, w3 := tw[3*p], tw[3*p+1], tw[3*p+2]
		if inv {
			w1, w3 = w3, w1
		}
		for q := q0; q < len(x0); q++ {
			a0, a1, a2, a3 := x0[q], x1[q], x2[q], x3[q]
			t0 := a0 + a2
			t1 := a0 - a2
			t2 := a1 + a3
			d := a1 - a3
			t3 := complex(imag(d), -real(d))
			y0[q] = t0 + t2
			y1[q] = (t1 + t3) * w1
			y2[q] = (t0 - t2) * w2
			y3[q] = (t1 - t3) * w3
		}
	}
}

// Radix-3 constants: exp(-2πi/3) = -1/2 - i√3/2.
const sin60 = 0.86602540378443864676372317075293618347140262690519

func radix3(dst, src []complex128, m, s int, tw []complex128, inv bool) {
	c := -sin60 // forward: b1 = t + i·c·d with c = -sin(2π/3)
	if inv {
		c = sin60
	}
	for p := 0; p < m; p++ {
		x0 := src[s*p : s*p+s]
		x1 := src[s*(p+m) : s*(p+m)+s]
		x2 := src[s*(p+2*m) : s*(p+2*m)+s]
		o := 3 * s * p
		y0 := dst[o : o+s]
		y1 := dst[o+s : o+2*s]
		y2 := dst[o+2*s : o+3*s]
		x1, x2 = x1[:len(x0)], x2[:len(x0)]
		y0, y1, y2 = y0[:len(x0)], y1[:len(x0)], y2[:len(x0)]
		w1, w2 := tw[2*p], tw[2*p+1]
		q0 := 0
		if useVec && len(x0) >= 2 {
			q0 = len(x0) &^ 1
			var wt [4][4]float64
			if inv {
				// IDFT(x)[k] = DFT(x)[-k]: forward kernel, outputs 1 and 2
				// exchanged.
				setBroadcast(wt[0:2], w2)
				setBroadcast(wt[2:4], w1)
				r3vec(&y0[0], &y2[0], &y1[0], &x0[0], &x1[0], &x2[0], q0, &wt)
			} else {
				setBroadcast(wt[0:2], w1)
				setBroadcast(wt[2:4], w2)
				r3vec(&y0[0], &y1[0], &y2[0], &x0[0], &x1[0], &x2[0], q0, &wt)
			}
		}
		for q := q0; q < len(x0); q++ {
			a0, a1, a2 := x0[q], x1[q], x2[q]
			t1 := a1 + a2
			t := a0 - 0.5*t1
			d := a1 - a2
			u := complex(-c*imag(d), c*real(d)) // i·c·d
			y0[q] = a0 + t1
			y1[q] = (t + u) * w1
			y2[q] = (t - u) * w2
		}
	}
}

// Radix-5 constants: cos and sin of 2π/5 and 4π/5.
var (
	c51 = math.Cos(2 * math.Pi / 5)
	c52 = math.Cos(4 * math.Pi / 5)
	s51 = math.Sin(2 * math.Pi / 5)
	s52 = math.Sin(4 * math.Pi / 5)
)

func radix5(dst, src []complex128, m, s int, tw []complex128, inv bool) {
	// Forward: b1 = a0 + c1 t1 + c2 t2 - i(s1 t3 + s2 t4),
	//          b2 = a0 + c2 t1 + c1 t2 - i(s2 t3 - s1 t4), b3, b4 conjugate
	// partners; the inverse flips the sign of the sine terms.
	c1, c2 := c51, c52
	sn1, sn2 := -s51, -s52
	if inv {
		sn1, sn2 = s51, s52
	}
	for p := 0; p < m; p++ {
		x0 := src[s*p : s*p+s]
		x1 := src[s*(p+m) : s*(p+m)+s]
		x2 := src[s*(p+2*m) : s*(p+2*m)+s]
		x3 := src[s*(p+3*m) : s*(p+3*m)+s]
		x4 := src[s*(p+4*m) : s*(p+4*m)+s]
		o := 5 * s * p
		y0 := dst[o : o+s]
		y1 := dst[o+s : o+2*s]
		y2 := dst[o+2*s : o+3*s]
		y3 := dst[o+3*s : o+4*s]
		y4 := dst[o+4*s : o+5*s]
		x1, x2, x3, x4 = x1[:len(x0)], x2[:len(x0)], x3[:len(x0)], x4[:len(x0)]
		y0, y1, y2, y3, y4 = y0[:len(x0)], y1[:len(x0)], y2[:len(x0)], y3[:len(x0)], y4[:len(x0)]
		w1, w2, w3, w4 := tw[4*p], tw[4*p+1], tw[4*p+2], tw[4*p+3]
		q0 := 0
		if useVec && len(x0) >= 2 {
			q0 = len(x0) &^ 1
			var wt [8][4]float64
			if inv {
				// Forward kernel with outputs k and 5-k exchanged.
				setBroadcast(wt[0:2], w4)
				setBroadcast(wt[2:4], w3)
				setBroadcast(wt[4:6], w2)
				setBroadcast(wt[6:8], w1)
				r5vec(&y0[0], &y4[0], &y3[0], &y2[0], &y1[0], &x0[0], &x1[0], &x2[0], &x3[0], &x4[0], q0, &wt)
			} else {
				setBroadcast(wt[0:2], w1)
				setBroadcast(wt[2:4], w2)
				setBroadcast(wt[4:6], w3)
				setBroadcast(wt[6:8], w4)
				r5vec(&y0[0], &y1[0], &y2[0], &y3[0], &y4[0], &x0[0], &x1[0], &x2[0], &x3[0], &x4[0], q0, &wt)
			}
		}
		for q := q0; q < len(x0); q++ {
			a0, a1, a2, a3, a4 := x0[q], x1[q], x2[q], x3[q], x4[q]
			t1 := a1 + a4
			t2 := a2 + a3
			t3 := a1 - a4
			t4 := a2 - a3
			r1 := a0 + complex(c1, 0)*t1 + complex(c2, 0)*t2
			r2 := a0 + complex(c2, 0)*t1 + complex(c1, 0)*t2
			e1 := complex(sn1, 0)*t3 + complex(sn2, 0)*t4
			e2 := complex(sn2, 0)*t3 - complex(sn1, 0)*t4
			i1 := complex(-imag(e1), real(e1)) // i·e1
			i2 := complex(-imag(e2), real(e2))
			y0[q] = a0 + t1 + t2
			y1[q] = (r1 + i1) * w1
			y4[q] = (r1 - i1) * w4
			y2[q] = (r2 + i2) * w2
			y3[q] = (r2 - i2) * w3
		}
	}
}

// setBroadcast stores w as the vectors (wr, wr, wr, wr) and
// (-wi, wi, -wi, wi) used by the vector kernels for a complex product.
func setBroadcast(dst [][4]float64, w complex128) {
	wr, wi := real(w), imag(w)
	dst[0] = [4]float64{wr, wr, wr, wr}
	dst[1] = [4]float64{-wi, wi, -wi, wi}
}

// bluestein computes the DFT of each of the v lanes through a circular
// convolution of length len(p.work). The inverse uses
// IDFT(x) = conj(DFT(conj(x))).
func (p *plan1) bluestein(dst, src []complex128, v int, inv bool) {
	n, w := p.n, p.work
	m := len(w)
	scale := 1 / float64(m)
	for q := 0; q < v; q++ {
		for k := 0; k < n; k++ {
			x := src[k*v+q]
			if inv {
				x = conj(x)
			}
			w[k] = x * p.chirp[k]
		}
		clear(w[n:])
		p.sub.run(w, w, p.sa, p.sb, 1, false)
		for k := range w {
			w[k] *= p.fb[k]
		}
		p.sub.run(w, w, p.sa, p.sb, 1, true)
		for k := 0; k < n; k++ {
			x := w[k] * p.chirp[k] * complex(scale, 0)
			if inv {
				x = conj(x)
			}
			dst[k*v+q] = x
		}
	}
}
