package fft

// sqrt½ = 1/√2, the real and imaginary magnitude of exp(-iπ/4).
const sqrtHalf = 0.70710678118654752440084436210484903928483593768847

// radix8 is the radix-8 Stockham stage (see radix2). The forward
// butterfly is split into two radix-4 butterflies on the even and odd
// inputs joined by the factors exp(-iπk/4); the inverse butterfly is the
// forward one with outputs k and 8-k exchanged, since
// IDFT(x)[k] = DFT(x)[-k].
func radix8(dst, src []complex128, m, s int, tw []complex128, inv bool) {
	for p := 0; p < m; p++ {
		x0 := src[s*p : s*p+s]
		x1 := src[s*(p+m) : s*(p+m)+s]
		x2 := src[s*(p+2*m) : s*(p+2*m)+s]
		x3 := src[s*(p+3*m) : s*(p+3*m)+s]
		x4 := src[s*(p+4*m) : s*(p+4*m)+s]
		x5 := src[s*(p+5*m) : s*(p+5*m)+s]
		x6 := src[s*(p+6*m) : s*(p+6*m)+s]
		x7 := src[s*(p+7*m) : s*(p+7*m)+s]
		o := 8 * s * p
		y0 := dst[o : o+s]
		y1 := dst[o+s : o+2*s]
		y2 := dst[o+2*s : o+3*s]
		y3 := dst[o+3*s : o+4*s]
		y4 := dst[o+4*s : o+5*s]
		y5 := dst[o+5*s : o+6*s]
		y6 := dst[o+6*s : o+7*s]
		y7 := dst[o+7*s : o+8*s]
		w := tw[7*p : 7*p+7]
		w1, w2, w3, w4, w5, w6, w7 := w[0], w[1], w[2], w[3], w[4], w[5], w[6]
		if inv {
			y1, y7 = y7, y1
			y2, y6 = y6, y2
			y3, y5 = y5, y3
			w1, w7 = w7, w1
			w2, w6 = w6, w2
			w3, w5 = w5, w3
		}
		n := len(x0)
		x1, x2, x3, x4, x5, x6, x7 = x1[:n], x2[:n], x3[:n], x4[:n], x5[:n], x6[:n], x7[:n]
		y0, y1, y2, y3, y4, y5, y6, y7 = y0[:n], y1[:n], y2[:n], y3[:n], y4[:n], y5[:n], y6[:n], y7[:n]
		if p == 0 {
			for q, a0 := range x0 {
				a1, a2, a3, a4, a5, a6, a7 := x1[q], x2[q], x3[q], x4[q], x5[q], x6[q], x7[q]
				// Even part: DFT4(a0, a2, a4, a6).
				e0 := a0 + a4
				e1 := a0 - a4
				e2 := a2 + a6
				d := a2 - a6
				e3 := complex(imag(d), -real(d))
				E0, E2 := e0+e2, e0-e2
				E1, E3 := e1+e3, e1-e3
				// Odd part: DFT4(a1, a3, a5, a7).
				o0 := a1 + a5
				o1 := a1 - a5
				o2 := a3 + a7
				d = a3 - a7
				o3 := complex(imag(d), -real(d))
				O0, O2 := o0+o2, o0-o2
				O1, O3 := o1+o3, o1-o3
				// Twiddles exp(-iπk/4), k = 1, 2, 3.
				O1 = complex((real(O1)+imag(O1))*sqrtHalf, (imag(O1)-real(O1))*sqrtHalf)
				O2 = complex(imag(O2), -real(O2))
				O3 = complex((imag(O3)-real(O3))*sqrtHalf, -(real(O3)+imag(O3))*sqrtHalf)
				y0[q] = E0 + O0
				y4[q] = E0 - O0
				y1[q] = E1 + O1
				y5[q] = E1 - O1
				y2[q] = E2 + O2
				y6[q] = E2 - O2
				y3[q] = E3 + O3
				y7[q] = E3 - O3
			}
			continue
		}
		for q, a0 := range x0 {
			a1, a2, a3, a4, a5, a6, a7 := x1[q], x2[q], x3[q], x4[q], x5[q], x6[q], x7[q]
			e0 := a0 + a4
			e1 := a0 - a4
			e2 := a2 + a6
			d := a2 - a6
			e3 := complex(imag(d), -real(d))
			E0, E2 := e0+e2, e0-e2
			E1, E3 := e1+e3, e1-e3
			o0 := a1 + a5
			o1 := a1 - a5
			o2 := a3 + a7
			d = a3 - a7
			o3 := complex(imag(d), -real(d))
			O0, O2 := o0+o2, o0-o2
			O1, O3 := o1+o3, o1-o3
			O1 = complex((real(O1)+imag(O1))*sqrtHalf, (imag(O1)-real(O1))*sqrtHalf)
			O2 = complex(imag(O2), -real(O2))
			O3 = complex((imag(O3)-real(O3))*sqrtHalf, -(real(O3)+imag(O3))*sqrtHalf)
			y0[q] = E0 + O0
			y4[q] = (E0 - O0) * w4
			y1[q] = (E1 + O1) * w1
			y5[q] = (E1 - O1) * w5
			y2[q] = (E2 + O2) * w2
			y6[q] = (E2 - O2) * w6
			y3[q] = (E3 + O3) * w3
			y7[q] = (E3 - O3) * w7
		}
	}
}

// radix8s1 is radix8 for s == 1.
func radix8s1(dst, src []complex128, m int, tw []complex128, inv bool) {
	x0 := src[0:m]
	x1 := src[m : 2*m]
	x2 := src[2*m : 3*m]
	x3 := src[3*m : 4*m]
	x4 := src[4*m : 5*m]
	x5 := src[5*m : 6*m]
	x6 := src[6*m : 7*m]
	x7 := src[7*m : 8*m]
	n := len(x0)
	x1, x2, x3, x4, x5, x6, x7 = x1[:n], x2[:n], x3[:n], x4[:n], x5[:n], x6[:n], x7[:n]
	tw = tw[:7*n]
	dst = dst[:8*n]
	// Output slot of forward butterfly output k (k and 8-k exchanged for
	// the inverse); twiddles are looked up by slot.
	i1, i2, i3, i5, i6, i7 := 1, 2, 3, 5, 6, 7
	if inv {
		i1, i2, i3, i5, i6, i7 = 7, 6, 5, 3, 2, 1
	}
	for p, a0 := range x0 {
		a1, a2, a3, a4, a5, a6, a7 := x1[p], x2[p], x3[p], x4[p], x5[p], x6[p], x7[p]
		e0 := a0 + a4
		e1 := a0 - a4
		e2 := a2 + a6
		d := a2 - a6
		e3 := complex(imag(d), -real(d))
		E0, E2 := e0+e2, e0-e2
		E1, E3 := e1+e3, e1-e3
		o0 := a1 + a5
		o1 := a1 - a5
		o2 := a3 + a7
		d = a3 - a7
		o3 := complex(imag(d), -real(d))
		O0, O2 := o0+o2, o0-o2
		O1, O3 := o1+o3, o1-o3
		O1 = complex((real(O1)+imag(O1))*sqrtHalf, (imag(O1)-real(O1))*sqrtHalf)
		O2 = complex(imag(O2), -real(O2))
		O3 = complex((imag(O3)-real(O3))*sqrtHalf, -(real(O3)+imag(O3))*sqrtHalf)
		w := tw[7*p : 7*p+7]
		y := dst[8*p : 8*p+8]
		y[0] = E0 + O0
		y[4] = (E0 - O0) * w[3]
		y[i1] = (E1 + O1) * w[i1-1]
		y[i5] = (E1 - O1) * w[i5-1]
		y[i2] = (E2 + O2) * w[i2-1]
		y[i6] = (E2 - O2) * w[i6-1]
		y[i3] = (E3 + O3) * w[i3-1]
		y[i7] = (E3 - O3) * w[i7-1]
	}
}
