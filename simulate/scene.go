package simulate

import (
	"bytes"
	"fmt"
	"math"
	"os"

	"github.com/astrogo/fitsio"

	"pdwave/model/fits"
)

// Contrast returns the rms contrast std/mean of im (0 for a constant or
// empty image).
func Contrast(im []float64) float64 {
	if len(im) == 0 {
		return 0
	}
	var s, s2 float64
	for _, v := range im {
		s += v
	}
	m := s / float64(len(im))
	for _, v := range im {
		s2 += (v - m) * (v - m)
	}
	if m == 0 {
		return 0
	}
	return math.Sqrt(s2/float64(len(im))) / math.Abs(m)
}

// SetContrast rescales im in place to mean 1 and rms contrast c by the
// linear map v → 1 + (v/mean − 1)·c/Contrast(im), then clips values below
// 0.05 (so the final contrast can be slightly lower for very high c). A
// constant image becomes all ones.
func SetContrast(im []float64, c float64) {
	if len(im) == 0 {
		return
	}
	var s float64
	for _, v := range im {
		s += v
	}
	m := s / float64(len(im))
	c0 := Contrast(im)
	k := 0.0
	if c0 > 0 {
		k = c / c0
	}
	for i, v := range im {
		im[i] = math.Max(0.05, 1+(v/m-1)*k)
	}
}

// ReadObject reads a user object map from the first image HDU of a FITS
// file that has at least two axes (a 3-D or 4-D cube contributes its first
// plane). BITPIX 8, 16, 32, 64, −32 and −64 are accepted, with BZERO and
// BSCALE applied. It returns the map (row-major, NAXIS1 = nx fastest) and
// errors with the path for unreadable files, missing images, non-finite
// values, or a map that is not positive on average.
func ReadObject(path string) (data []float64, nx, ny int, err error) {
	raw, err := os.ReadFile(path)
	if err != nil {
		return nil, 0, 0, fmt.Errorf("reading object map: %w", err)
	}
	defer func() {
		if r := recover(); r != nil { // fitsio panics on some malformed input
			data, nx, ny, err = nil, 0, 0, fmt.Errorf("reading object map %s: malformed FITS (%v)", path, r)
		}
	}()
	f, err := fitsio.Open(bytes.NewReader(raw))
	if err != nil {
		return nil, 0, 0, fmt.Errorf("reading object map %s: %w", path, err)
	}
	defer f.Close()
	for _, h := range f.HDUs() {
		img, ok := h.(fitsio.Image)
		if !ok {
			continue
		}
		axes := img.Header().Axes()
		if len(axes) < 2 || axes[0] < 1 || axes[1] < 1 {
			continue
		}
		nx, ny = axes[0], axes[1]
		data, err = imagePlane(img, nx*ny)
		if err != nil {
			return nil, 0, 0, fmt.Errorf("reading object map %s: %w", path, err)
		}
		var s float64
		for i, v := range data {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, 0, 0, fmt.Errorf("reading object map %s: pixel (%d, %d) is %g", path, i%nx, i/nx, v)
			}
			s += v
		}
		if !(s > 0) {
			return nil, 0, 0, fmt.Errorf("reading object map %s: mean %g is not positive", path, s/float64(len(data)))
		}
		return data, nx, ny, nil
	}
	return nil, 0, 0, fmt.Errorf("reading object map %s: no image with two or more axes", path)
}

// imagePlane returns the first n values of img as float64, with BZERO and
// BSCALE applied.
func imagePlane(img fitsio.Image, n int) ([]float64, error) {
	v, err := fits.ImagePixels(img)
	if err != nil {
		return nil, err
	}
	return v[:n], nil
}
