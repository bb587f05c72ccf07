package fft

import (
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/dsp/fourier"
)

func benchForward(b *testing.B, ny, nx int) {
	rng := rand.New(rand.NewPCG(1, 1))
	p := NewPlan(ny, nx)
	x := randComplex(rng, ny*nx)
	dst := make([]complex128, ny*nx)
	cpuLoop(b, func() { p.Forward(dst, x) })
}

func BenchmarkForward64(b *testing.B)  { benchForward(b, 64, 64) }
func BenchmarkForward128(b *testing.B) { benchForward(b, 128, 128) }
func BenchmarkForward256(b *testing.B) { benchForward(b, 256, 256) }
func BenchmarkForward96(b *testing.B)  { benchForward(b, 96, 96) }
func BenchmarkForward100(b *testing.B) { benchForward(b, 100, 100) }

func BenchmarkInverse64(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 1))
	p := NewPlan(64, 64)
	x := randComplex(rng, 64*64)
	dst := make([]complex128, 64*64)
	cpuLoop(b, func() { p.Inverse(dst, x) })
}

func benchForwardReal(b *testing.B, ny, nx int) {
	rng := rand.New(rand.NewPCG(1, 1))
	p := NewPlan(ny, nx)
	x := randReal(rng, ny*nx)
	dst := make([]complex128, ny*nx)
	cpuLoop(b, func() { p.ForwardReal(dst, x) })
}

func BenchmarkForwardReal64(b *testing.B)  { benchForwardReal(b, 64, 64) }
func BenchmarkForwardReal128(b *testing.B) { benchForwardReal(b, 128, 128) }

func benchInverseReal(b *testing.B, ny, nx int) {
	rng := rand.New(rand.NewPCG(1, 1))
	p := NewPlan(ny, nx)
	x := randComplex(rng, ny*nx)
	dst := make([]float64, ny*nx)
	cpuLoop(b, func() { p.InverseReal(dst, x) })
}

func BenchmarkInverseReal64(b *testing.B)  { benchInverseReal(b, 64, 64) }
func BenchmarkInverseReal128(b *testing.B) { benchInverseReal(b, 128, 128) }

// benchGonum is the baseline: a row/column loop over gonum's 1-D complex
// FFT on the same data (rows in place, columns copied through a buffer).
func benchGonum(b *testing.B, ny, nx int) {
	rng := rand.New(rand.NewPCG(1, 1))
	x := randComplex(rng, ny*nx)
	dst := make([]complex128, ny*nx)
	rows := fourier.NewCmplxFFT(nx)
	cols := fourier.NewCmplxFFT(ny)
	col := make([]complex128, ny)
	cpuLoop(b, func() {
		for y := 0; y < ny; y++ {
			rows.Coefficients(dst[y*nx:(y+1)*nx], x[y*nx:(y+1)*nx])
		}
		for c := 0; c < nx; c++ {
			for y := 0; y < ny; y++ {
				col[y] = dst[y*nx+c]
			}
			cols.Coefficients(col, col)
			for y := 0; y < ny; y++ {
				dst[y*nx+c] = col[y]
			}
		}
	})
}

func BenchmarkGonumRowColumn64(b *testing.B)  { benchGonum(b, 64, 64) }
func BenchmarkGonumRowColumn128(b *testing.B) { benchGonum(b, 128, 128) }
func BenchmarkGonumRowColumn256(b *testing.B) { benchGonum(b, 256, 256) }

// TestGonumAgrees checks that the baseline used in the benchmarks computes
// the same transform, so the speed comparison is like for like.
func TestGonumAgrees(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 9))
	for _, n := range []int{8, 12} {
		x := randComplex(rng, n*n)
		want := naiveDFT(x, n, n, -1)
		got := make([]complex128, n*n)
		row := fourier.NewCmplxFFT(n)
		col := make([]complex128, n)
		for y := 0; y < n; y++ {
			row.Coefficients(got[y*n:(y+1)*n], x[y*n:(y+1)*n])
		}
		for c := 0; c < n; c++ {
			for y := 0; y < n; y++ {
				col[y] = got[y*n+c]
			}
			row.Coefficients(col, col)
			for y := 0; y < n; y++ {
				got[y*n+c] = col[y]
			}
		}
		if e := maxRelErr(got, want); e > tol(n, n) {
			t.Errorf("gonum baseline %d×%d: rel err %.3g", n, n, e)
		}
	}
}
