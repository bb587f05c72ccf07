package fits

import (
	"fmt"

	"github.com/astrogo/fitsio"
)

// ImagePixels reads every pixel of a decoded fitsio image HDU as float64,
// in file order (NAXIS1 fastest), as physical values BZERO + BSCALE·stored
// (FITS Standard 4.0 §5.3, eq. 3; a missing or zero BSCALE is taken as 1, a
// missing BZERO as 0). BITPIX 8, 16, 32, 64, −32 and −64 are accepted.
// BLANK is not applied and values are not checked for NaN or Inf. It errors
// on another BITPIX or when fitsio cannot read the data. It is meant for
// auxiliary images (calibration frames, object maps); bursts are read with
// Read, which checks much more.
func ImagePixels(img fitsio.Image) ([]float64, error) {
	h := img.Header()
	n := 0
	if axes := h.Axes(); len(axes) > 0 {
		n = 1
		for _, a := range axes {
			n *= a
		}
	}
	if n < 0 {
		return nil, fmt.Errorf("negative image size %v", h.Axes())
	}
	var out []float64
	var err error
	switch bp := h.Bitpix(); bp {
	case 8:
		out, err = readAs[byte](img, n)
	case 16:
		out, err = readAs[int16](img, n)
	case 32:
		out, err = readAs[int32](img, n)
	case 64:
		out, err = readAs[int64](img, n)
	case -32:
		out, err = readAs[float32](img, n)
	case -64:
		out = make([]float64, n)
		err = img.Read(&out)
	default:
		return nil, fmt.Errorf("unsupported BITPIX %d", bp)
	}
	if err != nil {
		return nil, err
	}
	zero, scale := 0.0, 1.0
	if c := h.Get("BZERO"); c != nil {
		if v, ok := Number(c.Value); ok {
			zero = v
		}
	}
	if c := h.Get("BSCALE"); c != nil {
		if v, ok := Number(c.Value); ok && v != 0 {
			scale = v
		}
	}
	if zero != 0 || scale != 1 {
		for i, v := range out {
			out[i] = zero + scale*v
		}
	}
	return out, nil
}

// readAs reads img's n values (fitsio needs a slice of that capacity) as T
// and converts them to float64.
func readAs[T byte | int16 | int32 | int64 | float32](img fitsio.Image, n int) ([]float64, error) {
	v := make([]T, n)
	if err := img.Read(&v); err != nil {
		return nil, err
	}
	out := make([]float64, len(v))
	for i, x := range v {
		out[i] = float64(x)
	}
	return out, nil
}
