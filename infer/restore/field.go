package restore

import (
	"fmt"

	"pdwave/model/burst"
)

// Field is a calibrated, co-registered burst over the whole field of view.
type Field struct {
	Nx, Ny, Frames int // field size, pixels, and frames per channel
	// Data[channel][frame] is an Nx·Ny row-major image; channel 0 focused,
	// channel 1 defocused. Frames are stored as 16-bit scaled integers
	// (burst.Frame16: as much memory as a 16-bit camera file, a quarter of
	// float64), each with its own offset and step; the step is at most
	// about one ADU for camera files of ≤ 16 bits and range/65535 for
	// float files, far below the photon noise (see burst.Frame16).
	// Patches are dequantised from them into float64 buffers. Run only
	// reads it.
	Data [2][]burst.Frame16
	// Mean is the burst-mean focused image (Nx·Ny) of the stored frames:
	// the "raw" reference for previews, quality figures and the fallback
	// of failed patches.
	Mean []float64
}

// NewField quantises calibrated frames data[channel][frame] (each nx·ny;
// see Field.Data) and computes the burst-mean focused image. Errors if the
// frame counts of the channels differ, there are no frames or a frame has
// the wrong length. data is not retained.
func NewField(nx, ny int, data [2][][]float64) (*Field, error) {
	var d [2][]burst.Frame16
	for c := range data {
		d[c] = make([]burst.Frame16, len(data[c]))
		for j, fr := range data[c] {
			d[c][j].Quantise(fr)
		}
	}
	return NewField16(nx, ny, d)
}

// NewField16 is NewField for frames already quantised, which the Field
// keeps (no copy).
func NewField16(nx, ny int, data [2][]burst.Frame16) (*Field, error) {
	if len(data[0]) == 0 || len(data[0]) != len(data[1]) {
		return nil, fmt.Errorf("restore: need the same positive number of focused and defocused frames (have %d and %d)", len(data[0]), len(data[1]))
	}
	for c := range data {
		for j, fr := range data[c] {
			if len(fr.Q) != nx*ny {
				return nil, fmt.Errorf("restore: channel %d frame %d has %d pixels, want %d×%d", c, j, len(fr.Q), nx, ny)
			}
		}
	}
	f := &Field{Nx: nx, Ny: ny, Frames: len(data[0]), Data: data, Mean: make([]float64, nx*ny)}
	for j := range data[0] {
		fr := &data[0][j]
		for i := range f.Mean {
			f.Mean[i] += fr.At(i)
		}
	}
	for i := range f.Mean {
		f.Mean[i] /= float64(f.Frames)
	}
	return f, nil
}

// cut dequantises the n×n cut-out at (x0, y0) of every frame of f into
// buf ([channel][frame], each n×n float64).
func (f *Field) cut(buf [][][]float64, x0, y0, n int) {
	for c := 0; c < 2; c++ {
		for j := range f.Data[c] {
			fr, dst := &f.Data[c][j], buf[c][j]
			for y := 0; y < n; y++ {
				fr.Dequantise(dst[y*n:(y+1)*n], (y0+y)*f.Nx+x0)
			}
		}
	}
}
