package fft

import (
	"math"
	"math/bits"
)

// plan1 is a 1-D complex DFT of length n, computed in place without
// normalisation. Powers of two use an iterative radix-2 transform; other
// lengths use Bluestein's chirp-z algorithm on a power-of-two plan
// (Bluestein 1970, IEEE Trans. Audio Electroacoust. 18, 451).
type plan1 struct {
	n int

	// power-of-two path
	tw  []complex128 // tw[k] = exp(-2πik/n), k < n/2
	rev []int        // bit-reversal permutation

	// Bluestein path
	chirp []complex128 // chirp[k] = exp(-πi k²/n)
	fb    []complex128 // FFT of the conjugate chirp, zero padded to m
	sub   *plan1       // power-of-two plan of length m
	work  []complex128 // length m
}

func isPow2(n int) bool { return n > 0 && n&(n-1) == 0 }

func newPlan1(n int) *plan1 {
	p := &plan1{n: n}
	if isPow2(n) {
		p.tw = make([]complex128, n/2)
		for k := range p.tw {
			s, c := math.Sincos(-2 * math.Pi * float64(k) / float64(n))
			p.tw[k] = complex(c, s)
		}
		p.rev = make([]int, n)
		lg := bits.TrailingZeros(uint(n))
		for i := range p.rev {
			if lg == 0 {
				p.rev[i] = 0
			} else {
				p.rev[i] = int(bits.Reverse(uint(i)) >> (bits.UintSize - lg))
			}
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
		// k² mod 2n keeps the argument small for accuracy.
		k2 := (k * k) % (2 * n)
		s, c := math.Sincos(-math.Pi * float64(k2) / float64(n))
		p.chirp[k] = complex(c, s)
	}
	p.fb = make([]complex128, m)
	p.fb[0] = conj(p.chirp[0])
	for k := 1; k < n; k++ {
		v := conj(p.chirp[k])
		p.fb[k] = v
		p.fb[m-k] = v
	}
	p.sub.forward(p.fb)
	p.work = make([]complex128, m)
	return p
}

func conj(z complex128) complex128 { return complex(real(z), -imag(z)) }

// forward computes x ← DFT(x) in place, unnormalised, sign −.
func (p *plan1) forward(x []complex128) {
	if p.chirp != nil {
		p.bluestein(x)
		return
	}
	n := p.n
	if n == 1 {
		return
	}
	for i, j := range p.rev {
		if i < j {
			x[i], x[j] = x[j], x[i]
		}
	}
	for size := 2; size <= n; size <<= 1 {
		half := size >> 1
		step := n / size
		for start := 0; start < n; start += size {
			for k := 0; k < half; k++ {
				w := p.tw[k*step]
				a := x[start+k]
				b := x[start+k+half] * w
				x[start+k] = a + b
				x[start+k+half] = a - b
			}
		}
	}
}

// inverse computes x ← conj(DFT(conj(x))), i.e. the unnormalised inverse DFT.
func (p *plan1) inverse(x []complex128) {
	for i, v := range x[:p.n] {
		x[i] = conj(v)
	}
	p.forward(x)
	for i, v := range x[:p.n] {
		x[i] = conj(v)
	}
}

func (p *plan1) bluestein(x []complex128) {
	n, m := p.n, len(p.work)
	w := p.work
	for k := 0; k < n; k++ {
		w[k] = x[k] * p.chirp[k]
	}
	for k := n; k < m; k++ {
		w[k] = 0
	}
	p.sub.forward(w)
	for k := range w {
		w[k] *= p.fb[k]
	}
	p.sub.inverse(w)
	scale := complex(1/float64(m), 0)
	for k := 0; k < n; k++ {
		x[k] = w[k] * p.chirp[k] * scale
	}
}
