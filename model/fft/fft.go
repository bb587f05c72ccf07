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
	ra, rb []complex128 // nx scratch for the row pass
	tmp    []complex128 // ny*nx scratch for the real transforms
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
	p.ra = make([]complex128, nx)
	p.rb = make([]complex128, nx)
	p.tmp = make([]complex128, ny*nx)
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
	s := complex(1/float64(p.ny*p.nx), 0)
	for i := range dst {
		dst[i] *= s
	}
}

// ForwardReal computes the full ny*nx spectrum (Hermitian:
// dst[k,l] = conj(dst[-k,-l])) of the real input src, with the same
// convention as Forward. It panics if len(dst) or len(src) != ny*nx.
// dst and src are of different types and cannot alias.
func (p *Plan) ForwardReal(dst []complex128, src []float64) {
	p.checkLen("dst", len(dst))
	p.checkLen("src", len(src))
	for i, v := range src {
		dst[i] = complex(v, 0)
	}
	p.transform(dst, dst, false)
}

// InverseReal stores in dst the real part of Inverse(src), including the
// 1/(ny*nx) factor. src is not modified. If src is Hermitian the
// discarded imaginary part is zero up to rounding. It panics if len(dst) or
// len(src) != ny*nx.
func (p *Plan) InverseReal(dst []float64, src []complex128) {
	p.checkLen("dst", len(dst))
	p.checkLen("src", len(src))
	copy(p.tmp, src)
	p.transform(p.tmp, p.tmp, true)
	s := 1 / float64(p.ny*p.nx)
	for i, v := range p.tmp {
		dst[i] = real(v) * s
	}
}

// transform performs the unnormalised 2-D transform of src into dst;
// dst may be src.
func (p *Plan) transform(dst, src []complex128, inverse bool) {
	ny, nx := p.ny, p.nx
	// Columns: all nx columns at once as interleaved lanes.
	p.col.run(dst, src, p.a, p.b, nx, inverse)
	// Rows, in place.
	for y := 0; y < ny; y++ {
		r := dst[y*nx : (y+1)*nx]
		p.row.run(r, r, p.ra, p.rb, 1, inverse)
	}
}

// Shift performs an fftshift of the ny×nx real array src into dst: the
// element at (y, x) moves to ((y+ny/2) mod ny, (x+nx/2) mod nx), so the
// zero frequency lands on (ny/2, nx/2). For odd sizes this matches numpy's
// fftshift. dst must not alias src. It panics if len(dst) or len(src) !=
// ny*nx.
func Shift(dst, src []float64, ny, nx int) {
	if len(dst) != ny*nx || len(src) != ny*nx {
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
// (ny/2, nx/2). dst must not alias src. It panics on wrong lengths.
func ShiftComplex(dst, src []complex128, ny, nx int) {
	if len(dst) != ny*nx || len(src) != ny*nx {
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
