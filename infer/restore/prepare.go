package restore

import (
	"fmt"
	"runtime"
	"sync"

	"pdwave/model/burst"
)

// Offset is the measured translation of the defocused channel relative to
// the focused one, in pixels: defocused(x, y) ≈ focused(x−DX, y−DY).
type Offset struct{ DX, DY float64 }

// Prepare turns a burst into a restorable Field: it calibrates every frame
// of b in place with cal (nil = none), measures the offset of the
// defocused channel against the focused one from the cross-spectra of the
// simultaneous frame pairs summed over the burst (MeasureShiftFrames; the
// same as cross-correlating the burst means, but without the frame-to-frame
// image motion, which is common to both channels) and, if align is true, moves every defocused frame back by
// it with a Shifter (band-limited interpolation, mirror-extended edges). It
// uses up to workers goroutines (0 = all cores). The frames of b become the
// field's frames (no copy).
func Prepare(b *burst.Burst, cal *Calibration, align bool, workers int) (*Field, Offset, error) {
	if b.Frames < 1 || len(b.Data[0]) != b.Frames || len(b.Data[1]) != b.Frames {
		return nil, Offset{}, fmt.Errorf("restore: burst has %d/%d frames per channel", len(b.Data[0]), len(b.Data[1]))
	}
	if workers <= 0 {
		workers = runtime.NumCPU()
	}
	nx, ny := b.Nx, b.Ny
	if cal != nil {
		for c := range b.Data {
			for _, fr := range b.Data[c] {
				if len(fr) != nx*ny {
					return nil, Offset{}, fmt.Errorf("restore: frame has %d pixels, want %d×%d", len(fr), nx, ny)
				}
				cal.Apply(fr)
			}
		}
	}
	f, err := NewField(nx, ny, b.Data)
	if err != nil {
		return nil, Offset{}, err
	}
	dx, dy, err := MeasureShiftFrames(b.Data[0], b.Data[1], nx, ny)
	if err != nil {
		return nil, Offset{}, fmt.Errorf("co-registering the channels: %w", err)
	}
	off := Offset{dx, dy}
	if !align || (dx == 0 && dy == 0) {
		return f, off, nil
	}
	var wg sync.WaitGroup
	frames := make(chan []float64)
	for w := 0; w < min(workers, b.Frames); w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			s := NewShifter(nx, ny)
			for fr := range frames {
				s.Shift(fr, fr, -dx, -dy)
			}
		}()
	}
	for _, fr := range b.Data[1] {
		frames <- fr
	}
	close(frames)
	wg.Wait()
	return f, off, nil
}
