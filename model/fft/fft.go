package fft

import "fmt"

// Plan computes 2-D discrete Fourier transforms of ny×nx complex or real
// data stored row-major (x fastest, index y*nx+x).
//
// A Plan owns scratch buffers and is therefore not safe for concurrent use;
// create one Plan per goroutine. Creating a Plan is comparatively costly
// (twiddle tables); reuse it for every transform of the same size.
type Plan struct {
	ny, nx int
	row    *plan1
	col    *plan1
	a, b   []complex128 // ny*nx scratch for the column pass
	half   []complex128 // ny×hp half spectrum for the real transforms
	hp     int          // row stride of half: nx/2+1 rounded up to even
	sa, sb []complex128 // nx scratch for the row pass
}

// NewPlan returns a plan for ny×nx transforms. It panics if ny < 1 or nx < 1.
func NewPlan(ny, nx int) *Plan {
	if ny < 1 || nx < 1 {
		panic(fmt.Sprintf("fft: invalid size %d×%d", ny, nx))
	}
	p := &Plan{ny: ny, nx: nx}
	p.row = newPlan1(nx)
	if ny == nx {
		p.col = p.row
	} else {
		p.col = newPlan1(ny)
	}
	p.a = make([]complex128, ny*nx)
	p.b = make([]complex128, ny*nx)
	// An even number of lanes keeps the column pass on the vector kernels;
	// the padding lane stays zero.
	p.hp = (nx/2 + 2) &^ 1
	p.half = make([]complex128, ny*p.hp)
	p.sa = make([]complex128, nx)
	p.sb = make([]complex128, nx)
	return p
}

// Size returns the plan's dimensions.
func (p *Plan) Size() (ny, nx int) { return p.ny, p.nx }

func (p *Plan) checkLen(name string, n int) {
	if n != p.ny*p.nx {
		panic(fmt.Sprintf("fft: %s has length %d, want %d×%d=%d", name, n, p.ny, p.nx, p.ny*p.nx))
	}
}

// Forward computes the unnormalised 2-D DFT
//
//	dst[k*nx+l] = Σ_{m,n} src[m*nx+n] exp(-2πi(km/ny + ln/nx)),
//
// the numpy fft2 convention. dst may alias src exactly (in-place); partial
// overlap is not allowed. It panics if len(dst) or len(src) != ny*nx.
func (p *Plan) Forward(dst, src []complex128) {
	p.checkLen("dst", len(dst))
	p.checkLen("src", len(src))
	p.transform(dst, src, false)
}

// Inverse computes the inverse 2-D DFT including the factor 1/(ny*nx)
// (numpy ifft2 convention):
//
//	dst[m*nx+n] = 1/(ny*nx) Σ_{k,l} src[k*nx+l] exp(+2πi(km/ny + ln/nx)).
//
// Inverse(Forward(x)) = x up to rounding. dst may alias src exactly;
// partial overlap is not allowed. It panics if len(dst) or len(src) != ny*nx.
func (p *Plan) Inverse(dst, src []complex128) {
	p.checkLen("dst", len(dst))
	p.checkLen("src", len(src))
	p.transform(dst, src, true)
	scale(dst, 1/float64(p.ny*p.nx))
}

// ForwardReal computes the full ny*nx spectrum (Hermitian:
// dst[k,l] = conj(dst[-k,-l])) of the real input src, with the same
// convention as Forward. It costs about half a complex Forward: pairs of
// real rows are packed into one complex row, only the nx/2+1 independent
// columns are transformed, and the rest is filled in by symmetry. It panics
// if len(dst) or len(src) != ny*nx. dst and src have different types and
// must not share memory.
func (p *Plan) ForwardReal(dst []complex128, src []float64) {
	p.checkLen("dst", len(dst))
	p.checkLen("src", len(src))
	ny, nx := p.ny, p.nx
	h, hp := nx/2+1, p.hp
	c := p.half
	// Pack rows: z_j = r_{2j} + i r_{2j+1}.
	np := (ny + 1) / 2
	z := p.a[:np*nx]
	for j := 0; j < np; j++ {
		zj := z[j*nx : (j+1)*nx]
		r0 := src[2*j*nx : (2*j+1)*nx]
		if 2*j+1 == ny {
			for x, v := range r0 {
				zj[x] = complex(v, 0)
			}
			break
		}
		r1 := src[(2*j+1)*nx : (2*j+2)*nx]
		r1 = r1[:len(zj)]
		x0 := 0
		if useVec && nx >= 4 {
			x0 = nx &^ 3
			interleave(&zj[0], &r0[0], &r1[0], x0/4)
		}
		for x := x0; x < nx; x++ {
			zj[x] = complex(r0[x], r1[x])
		}
	}
	p.rows(z, np, false)
	// Unpack: with Z = DFT(z_j) the row spectra are
	// R_{2j}[l] = (Z[l] + conj Z[-l])/2, R_{2j+1}[l] = (Z[l] - conj Z[-l])/(2i).
	for j := 0; j < np; j++ {
		zj := z[j*nx : (j+1)*nx]
		c0 := c[2*j*hp : 2*j*hp+h]
		if 2*j+1 == ny {
			copy(c0, zj[:h])
			break
		}
		c1 := c[(2*j+1)*hp : (2*j+1)*hp+h]
		c1 = c1[:len(c0)]
		c0[0] = complex(real(zj[0]), 0)
		c1[0] = complex(imag(zj[0]), 0)
		zr := zj[nx-h+1 : nx] // zr[len(zr)-l] = Z[nx-l]
		l0 := 1
		if pairs := (h - 1) / 2; useVec && pairs > 0 {
			unpackRows(&c0[1], &c1[1], &zj[1], &zj[nx-2], pairs)
			l0 += 2 * pairs
		}
		for l := l0; l < len(c0); l++ {
			zl := zj[l]
			zm := zr[len(zr)-l]
			c0[l] = complex(0.5*(real(zl)+real(zm)), 0.5*(imag(zl)-imag(zm)))
			c1[l] = complex(0.5*(imag(zl)+imag(zm)), 0.5*(real(zm)-real(zl)))
		}
	}
	// Columns of the half spectrum, all h at once.
	p.cols(c, c, hp, false)
	// Expand: X[k,l] = conj X[-k,-l] for l >= h.
	for k := 0; k < ny; k++ {
		d := dst[k*nx : (k+1)*nx]
		copy(d, c[k*hp:k*hp+h])
		km := (ny - k) % ny
		cm := c[km*hp : km*hp+h]
		l0 := h
		if pairs := (nx - h) / 2; useVec && pairs > 0 {
			conjRev(&d[h], &cm[nx-h-1], pairs)
			l0 += 2 * pairs
		}
		for l := l0; l < nx; l++ {
			d[l] = conj(cm[nx-l])
		}
	}
}

// InverseReal stores in dst the real part of Inverse(src), including the
// 1/(ny*nx) factor. src is not modified and need not be Hermitian (the
// anti-Hermitian part only contributes the discarded imaginary part). It
// costs about half a complex Inverse. It panics if len(dst) or len(src) !=
// ny*nx. dst and src must not share memory.
func (p *Plan) InverseReal(dst []float64, src []complex128) {
	p.checkLen("dst", len(dst))
	p.checkLen("src", len(src))
	ny, nx := p.ny, p.nx
	h, hp := nx/2+1, p.hp
	c := p.half
	// Hermitian part H[k,l] = (S[k,l] + conj S[-k,-l])/2, columns l < h:
	// Re IDFT(S) = IDFT(H).
	for k := 0; k < ny; k++ {
		km := (ny - k) % ny
		s0 := src[k*nx : (k+1)*nx]
		sm := src[km*nx : (km+1)*nx]
		c0 := c[k*hp : k*hp+h]
		c0[0] = complex(0.5*(real(s0[0])+real(sm[0])), 0.5*(imag(s0[0])-imag(sm[0])))
		l0 := 1
		if pairs := (h - 1) / 2; useVec && pairs > 0 {
			hermHalf(&c0[1], &s0[1], &sm[nx-2], pairs)
			l0 += 2 * pairs
		}
		for l := l0; l < len(c0); l++ {
			a, b := s0[l], sm[nx-l]
			c0[l] = complex(0.5*(real(a)+real(b)), 0.5*(imag(a)-imag(b)))
		}
	}
	p.cols(c, c, hp, true)
	// Each row G_y of the result is Hermitian along x, so
	// z_j = IDFT(G_{2j} + i G_{2j+1}) has real part g_{2j} and imaginary
	// part g_{2j+1}. Columns 0 and nx/2 of a Hermitian row are real.
	np := (ny + 1) / 2
	z := p.a[:np*nx]
	for j := 0; j < np; j++ {
		zj := z[j*nx : (j+1)*nx]
		g0 := c[2*j*hp : 2*j*hp+h]
		if 2*j+1 == ny {
			zj[0] = complex(real(g0[0]), 0)
			for l := 1; l < h; l++ {
				zj[l] = g0[l]
				zj[nx-l] = conj(g0[l])
			}
			if nx%2 == 0 {
				zj[nx/2] = complex(real(g0[nx/2]), 0)
			}
			break
		}
		g1 := c[(2*j+1)*hp : (2*j+1)*hp+h]
		g1 = g1[:len(g0)]
		zj[0] = complex(real(g0[0]), real(g1[0]))
		zr := zj[nx-h+1 : nx] // zr[len(zr)-l] = z[nx-l]
		l0 := 1
		if pairs := (h - 1) / 2; useVec && pairs > 0 {
			packInv(&zj[1], &zj[nx-2], &g0[1], &g1[1], pairs)
			l0 += 2 * pairs
		}
		for l := l0; l < len(g0); l++ {
			a, b := g0[l], g1[l]
			// a + i b and conj(a) + i conj(b).
			zj[l] = complex(real(a)-imag(b), imag(a)+real(b))
			zr[len(zr)-l] = complex(real(a)+imag(b), real(b)-imag(a))
		}
		if nx%2 == 0 {
			zj[nx/2] = complex(real(g0[nx/2]), real(g1[nx/2]))
		}
	}
	p.rows(z, np, true)
	scale := 1 / float64(ny*nx)
	for j := 0; j < np; j++ {
		zj := z[j*nx : (j+1)*nx]
		d0 := dst[2*j*nx : (2*j+1)*nx]
		d0 = d0[:len(zj)]
		if 2*j+1 == ny {
			for x, v := range zj {
				d0[x] = real(v) * scale
			}
			break
		}
		d1 := dst[(2*j+1)*nx : (2*j+2)*nx]
		d1 = d1[:len(zj)]
		x0 := 0
		if useVec && nx >= 4 {
			x0 = nx &^ 3
			deinterleave(&d0[0], &d1[0], &zj[0], x0/4, scale)
		}
		for x := x0; x < nx; x++ {
			d0[x] = real(zj[x]) * scale
			d1[x] = imag(zj[x]) * scale
		}
	}
}

// scale multiplies x by s.
func scale(x []complex128, s float64) {
	i0 := 0
	if useVec && len(x) >= 2 {
		i0 = len(x) &^ 1
		scalevec(&x[0], i0, s)
	}
	for i := i0; i < len(x); i++ {
		x[i] = complex(real(x[i])*s, imag(x[i])*s)
	}
}

// transform performs the unnormalised 2-D transform of src into dst;
// dst may be src.
func (p *Plan) transform(dst, src []complex128, inverse bool) {
	p.cols(dst, src, p.nx, inverse)
	p.rows(dst, p.ny, inverse)
}

// cols transforms the columns of the ny×w arrays src into dst (dst may be
// src): the columns are the interleaved lanes of one batched 1-D transform,
// so every butterfly runs over w contiguous values. (Copying panels of
// columns to contiguous scratch for cache locality measured slower for
// 128² to 1024².)
func (p *Plan) cols(dst, src []complex128, w int, inverse bool) {
	p.col.run(dst, src, p.a, p.b, w, inverse)
}

// rows transforms in place the first n rows (length nx) of x.
func (p *Plan) rows(x []complex128, n int, inverse bool) {
	nx := p.nx
	for y := 0; y < n; y++ {
		r := x[y*nx : (y+1)*nx]
		p.row.run(r, r, p.sa, p.sb, 1, inverse)
	}
}

// Shift performs an fftshift of the ny×nx real array src into dst: the
// element at (y, x) moves to ((y+ny/2) mod ny, (x+nx/2) mod nx), so the
// zero frequency lands on (ny/2, nx/2). This is numpy's fftshift for even
// and odd sizes (for odd sizes its inverse, ifftshift, differs). dst must
// not alias src. It panics if ny < 1, nx < 1 or len(dst) or len(src) !=
// ny*nx.
func Shift(dst, src []float64, ny, nx int) {
	if ny < 1 || nx < 1 || len(dst) != ny*nx || len(src) != ny*nx {
		panic(fmt.Sprintf("fft: Shift lengths %d, %d, want %d×%d", len(dst), len(src), ny, nx))
	}
	hy, hx := ny/2, nx/2
	for y := 0; y < ny; y++ {
		ty := y + hy
		if ty >= ny {
			ty -= ny
		}
		s := src[y*nx : (y+1)*nx]
		d := dst[ty*nx : (ty+1)*nx]
		copy(d[hx:], s[:nx-hx])
		copy(d[:hx], s[nx-hx:])
	}
}

// ShiftComplex is Shift for complex arrays: zero frequency moves to
// (ny/2, nx/2). dst must not alias src. It panics on non-positive sizes
// or wrong lengths.
func ShiftComplex(dst, src []complex128, ny, nx int) {
	if ny < 1 || nx < 1 || len(dst) != ny*nx || len(src) != ny*nx {
		panic(fmt.Sprintf("fft: ShiftComplex lengths %d, %d, want %d×%d", len(dst), len(src), ny, nx))
	}
	hy, hx := ny/2, nx/2
	for y := 0; y < ny; y++ {
		ty := y + hy
		if ty >= ny {
			ty -= ny
		}
		s := src[y*nx : (y+1)*nx]
		d := dst[ty*nx : (ty+1)*nx]
		copy(d[hx:], s[:nx-hx])
		copy(d[:hx], s[nx-hx:])
	}
}
