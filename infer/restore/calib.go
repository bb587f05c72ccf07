package restore

import (
	"bufio"
	"fmt"
	"math"
	"os"

	"github.com/astrogo/fitsio"
	"gonum.org/v1/gonum/floats"

	"pdwave/model/fits"
)

// Calibration is what Calibrate does to each frame: d ← (d − Dark)/Gain.
type Calibration struct {
	Dark []float64 // nx·ny dark frame (counts); nil = none
	Gain []float64 // nx·ny flat field normalised to mean 1; nil = none
	Bad  int       // flat pixels at or below 1 % of the mean flat, given gain 1
}

// NewCalibration checks the dark and flat frames against an nx×ny field and
// normalises the flat: Gain = flat/mean(flat). The flat must already be dark
// corrected (a gain map or a dark-subtracted flat-field exposure). Flat pixels
// at or below 1 % of the mean are counted in Bad and given gain 1. Either
// frame may be nil. Errors on size mismatch, non-finite values or a flat with
// non-positive mean. The inputs are not modified.
func NewCalibration(nx, ny int, dark, flat []float64) (*Calibration, error) {
	c := &Calibration{}
	if dark != nil {
		if len(dark) != nx*ny {
			return nil, fmt.Errorf("restore: dark frame has %d pixels, field has %d×%d", len(dark), nx, ny)
		}
		for _, v := range dark {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, fmt.Errorf("restore: dark frame holds non-finite values")
			}
		}
		c.Dark = dark
	}
	if flat != nil {
		if len(flat) != nx*ny {
			return nil, fmt.Errorf("restore: flat frame has %d pixels, field has %d×%d", len(flat), nx, ny)
		}
		var mean float64
		for _, v := range flat {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, fmt.Errorf("restore: flat frame holds non-finite values")
			}
			mean += v
		}
		mean /= float64(len(flat))
		if !(mean > 0) {
			return nil, fmt.Errorf("restore: flat frame has non-positive mean %g", mean)
		}
		c.Gain = make([]float64, len(flat))
		for i, v := range flat {
			g := v / mean
			if g <= 0.01 {
				g = 1
				c.Bad++
			}
			c.Gain[i] = g
		}
	}
	return c, nil
}

// Apply calibrates frame in place: frame[i] = (frame[i] − Dark[i])/Gain[i].
// It panics if the lengths differ from the calibration's.
func (c *Calibration) Apply(frame []float64) {
	if c.Dark != nil {
		if len(frame) != len(c.Dark) {
			panic("restore: Calibration.Apply: frame length differs from dark")
		}
		for i := range frame {
			frame[i] -= c.Dark[i]
		}
	}
	if c.Gain != nil {
		if len(frame) != len(c.Gain) {
			panic("restore: Calibration.Apply: frame length differs from flat")
		}
		for i := range frame {
			frame[i] /= c.Gain[i]
		}
	}
}

// ReadFrame reads a 2-D calibration frame (dark or flat) from the primary HDU
// of a FITS file, applying BZERO/BSCALE. A 3-D cube is averaged over its third
// axis. It returns the data (row-major, NAXIS1 fastest) and its size.
func ReadFrame(path string) (data []float64, nx, ny int, err error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, 0, 0, fmt.Errorf("reading %s: %w", path, err)
	}
	defer f.Close()
	ff, err := fitsio.Open(bufio.NewReader(f))
	if err != nil {
		return nil, 0, 0, fmt.Errorf("reading %s: %w", path, err)
	}
	defer ff.Close()
	img, ok := ff.HDU(0).(fitsio.Image)
	if !ok {
		return nil, 0, 0, fmt.Errorf("reading %s: primary HDU is not an image", path)
	}
	hdr := img.Header()
	axes := hdr.Axes()
	if len(axes) < 2 || len(axes) > 3 {
		return nil, 0, 0, fmt.Errorf("reading %s: want a 2-D frame (or 3-D stack), NAXIS=%d", path, len(axes))
	}
	nx, ny = axes[0], axes[1]
	nz := 1
	if len(axes) == 3 {
		nz = axes[2]
	}
	if nx < 1 || ny < 1 || nz < 1 {
		return nil, 0, 0, fmt.Errorf("reading %s: empty image %v", path, axes)
	}
	raw, err := fits.ImagePixels(img)
	if err != nil {
		return nil, 0, 0, fmt.Errorf("reading %s: %w", path, err)
	}
	if len(raw) < nx*ny*nz {
		return nil, 0, 0, fmt.Errorf("reading %s: %d pixels for axes %v", path, len(raw), axes)
	}
	data = make([]float64, nx*ny)
	for z := 0; z < nz; z++ {
		plane := raw[z*nx*ny : (z+1)*nx*ny]
		for i, v := range plane {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, 0, 0, fmt.Errorf("reading %s: non-finite pixel (x=%d, y=%d) in frame %d", path, i%nx+1, i/nx+1, z+1)
			}
		}
		floats.AddScaled(data, 1/float64(nz), plane) // the stack's mean
	}
	return data, nx, ny, nil
}
