package infer

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat"

	"pdwave/model/fft"
	"pdwave/model/optics"
)

// ImageScore is how far a restored image is from the diffraction-limited
// object (ScoreImage).
type ImageScore struct {
	// Error is the relative rms error after registration:
	//
	//	E = rms(r/⟨r⟩ − t/⟨t⟩) / rms(t/⟨t⟩ − 1)
	//
	// over the inner region (Edge pixels cut on every side), with r the
	// registered restored image, t the reference and ⟨·⟩ the mean over the
	// region. Normalising by the mean (not by a fitted gain) keeps
	// over- and under-restoration in the error: returning the reference's
	// mean everywhere scores 1, the reference itself 0.
	Error float64
	// Contrast and RefContrast are the rms contrasts rms(x/⟨x⟩ − 1) of the
	// registered image and of the reference over the region.
	Contrast, RefContrast float64
	// DX, DY is the shift applied to the image to register it, pixels.
	DX, DY float64
}

// ScoreImage scores img against the reference ref (both nx×ny, row-major):
// img is registered to ref by the peak of their cross-correlation (integer
// peak within ±maxShift pixels, refined by a parabola through its
// neighbours and refined three times on the shifted image, applied as a
// Fourier shift), then compared over the region
// that leaves edge pixels on every side (see ImageScore). It is the one
// scoring of restored images in pdwave: the tests, compare's report and the
// README figures use it. It errors for sizes that leave no region, or for
// images with a non-positive mean or a flat reference.
func ScoreImage(img, ref []float64, nx, ny, edge, maxShift int) (ImageScore, error) {
	if nx < 4 || ny < 4 || len(img) != nx*ny || len(ref) != nx*ny || edge < 0 || 2*edge >= min(nx, ny)-2 || maxShift < 0 {
		return ImageScore{}, fmt.Errorf("score: %d×%d images of %d and %d pixels with edge %d, shift %d: invalid", nx, ny, len(img), len(ref), edge, maxShift)
	}
	plan := fft.NewPlan(ny, nx)
	dx, dy := registration(plan, img, ref, nx, ny, maxShift)
	shifted := fourierShift(plan, img, nx, ny, -dx, -dy)
	for range 3 { // the parabola is biased away from the peak: refine near zero
		ex, ey := registration(plan, shifted, ref, nx, ny, 1)
		dx, dy = dx+ex, dy+ey
		shifted = fourierShift(plan, img, nx, ny, -dx, -dy)
	}
	r, t := region(shifted, nx, ny, edge), region(ref, nx, ny, edge)
	mr, mt := stat.Mean(r, nil), stat.Mean(t, nil)
	if !(mr > 0) || !(mt > 0) {
		return ImageScore{}, errors.New("score: image or reference has no positive mean")
	}
	var se, sr, st float64
	for i := range r {
		a, b := r[i]/mr, t[i]/mt
		se += (a - b) * (a - b)
		sr += (a - 1) * (a - 1)
		st += (b - 1) * (b - 1)
	}
	if st == 0 {
		return ImageScore{}, errors.New("score: the reference is flat")
	}
	n := float64(len(r))
	return ImageScore{Error: math.Sqrt(se / st), Contrast: math.Sqrt(sr / n), RefContrast: math.Sqrt(st / n), DX: dx, DY: dy}, nil
}

// registration returns the shift (dx, dy) of img relative to ref, pixels:
// the peak of the circular cross-correlation of the mean-removed images
// within ±maxShift, refined by a parabola on each axis.
func registration(plan *fft.Plan, img, ref []float64, nx, ny, maxShift int) (dx, dy float64) {
	a, b := make([]complex128, nx*ny), make([]complex128, nx*ny)
	plan.ForwardReal(a, img)
	plan.ForwardReal(b, ref)
	a[0], b[0] = 0, 0
	for i := range a {
		a[i] *= complex(real(b[i]), -imag(b[i]))
	}
	cc := make([]float64, nx*ny)
	plan.InverseReal(cc, a)
	at := func(x, y int) float64 { return cc[((y%ny+ny)%ny)*nx+(x%nx+nx)%nx] }
	bx, by, best := 0, 0, math.Inf(-1)
	for y := -maxShift; y <= maxShift; y++ {
		for x := -maxShift; x <= maxShift; x++ {
			if v := at(x, y); v > best {
				bx, by, best = x, y, v
			}
		}
	}
	return float64(bx) + parabola(at(bx-1, by), best, at(bx+1, by)), float64(by) + parabola(at(bx, by-1), best, at(bx, by+1))
}

// parabola returns the offset in [−½, ½] of the vertex of the parabola
// through (−1, l), (0, c), (1, r).
func parabola(l, c, r float64) float64 {
	d := l - 2*c + r
	if d >= 0 {
		return 0
	}
	return max(-0.5, min(0.5, 0.5*(l-r)/d))
}

// fourierShift returns img moved by (sx, sy) pixels (periodic), by the
// shift theorem.
func fourierShift(plan *fft.Plan, img []float64, nx, ny int, sx, sy float64) []float64 {
	f := make([]complex128, nx*ny)
	plan.ForwardReal(f, img)
	for v := 0; v < ny; v++ {
		fy := float64(v)
		if v > ny/2 {
			fy -= float64(ny)
		}
		for u := 0; u < nx; u++ {
			fx := float64(u)
			if u > nx/2 {
				fx -= float64(nx)
			}
			ph := -2 * math.Pi * (fx*sx/float64(nx) + fy*sy/float64(ny))
			f[v*nx+u] *= complex(math.Cos(ph), math.Sin(ph))
		}
	}
	out := make([]float64, nx*ny)
	plan.InverseReal(out, f)
	return out
}

// region returns the pixels of img that lie edge or more pixels from every
// side, row by row.
func region(img []float64, nx, ny, edge int) []float64 {
	out := make([]float64, 0, (nx-2*edge)*(ny-2*edge))
	for y := edge; y < ny-edge; y++ {
		out = append(out, img[y*nx+edge:y*nx+nx-edge]...)
	}
	return out
}

// DiffractionLimited returns the image of the object obj (nx×ny) through
// the telescope with a perfect wavefront: obj convolved with the
// diffraction PSF of tel's pupil (obscuration and spiders included;
// optics.NewPupil on a square grid of side max(nx, ny), the object padded
// with its mean), the reference of ScoreImage. Pixels within a PSF core
// of the border see the padding; score with an edge. It errors if tel is
// sampled coarser than Nyquist or the sizes are invalid.
func DiffractionLimited(obj []float64, nx, ny int, tel optics.Telescope) ([]float64, error) {
	if nx < 1 || ny < 1 || len(obj) != nx*ny {
		return nil, fmt.Errorf("diffraction-limited image: %d values for %d×%d", len(obj), nx, ny)
	}
	m := max(nx, ny)
	pup, err := optics.NewPupil(tel, m)
	if err != nil {
		return nil, fmt.Errorf("diffraction-limited image: %w", err)
	}
	otf := make([]complex128, m*m)
	optics.NewImager(pup).OTF(otf, make([]float64, m*m))
	canvas := make([]float64, m*m)
	mean := stat.Mean(obj, nil)
	for i := range canvas {
		canvas[i] = mean
	}
	for y := 0; y < ny; y++ {
		copy(canvas[y*m:y*m+nx], obj[y*nx:y*nx+nx])
	}
	plan := fft.NewPlan(m, m)
	f := make([]complex128, m*m)
	plan.ForwardReal(f, canvas)
	for i := range f {
		f[i] *= otf[i]
	}
	plan.InverseReal(canvas, f)
	out := make([]float64, nx*ny)
	for y := 0; y < ny; y++ {
		copy(out[y*nx:y*nx+nx], canvas[y*m:y*m+nx])
	}
	return out, nil
}
