package burst

import (
	"fmt"

	"pdwave/model/fits"
)

// load reads the frames of b.src a frame at a time into b.Data (or
// b.Data16 with opt.Quantise16): each frame is read as float64, calibrated
// (opt.Calibrate), its undefined pixels filled (refused beyond
// MaxBadFraction) and turned and resampled by opt.Geometry, then stored.
// The counts of filled pixels and the geometry are recorded in b.Cards and
// b.Notes (PDMASK1/2, PDGEOM, HISTORY).
func (b *Burst) load(opt Options) error {
	g := opt.Geometry
	turn, err := b.geometryToApply(g)
	if err != nil {
		return err
	}
	nx, ny := b.Nx, b.Ny
	var dims [2][2]int
	for c := range dims {
		dims[c] = [2]int{nx, ny}
		if turn && g.Channel[c].swaps() {
			dims[c] = [2]int{ny, nx}
		}
	}
	if dims[0] != dims[1] {
		return fmt.Errorf("camera geometry %s: the channels are %d×%d px as stored, and %d×%d and %d×%d after orientation; one channel's geometry must turn a non-square frame the same way as the other's",
			g, nx, ny, dims[0][0], dims[0][1], dims[1][0], dims[1][1])
	}
	var rs *resampler
	if turn && g.resamples() {
		rs = newResampler(dims[0][0], dims[0][1], g)
	}
	for c := range b.src {
		if opt.Quantise16 {
			b.Data16[c] = make([]Frame16, len(b.src[c]))
		} else {
			b.Data[c] = make([][]float64, len(b.src[c]))
		}
	}
	scratch := make([]float64, nx*ny)
	for c := range b.src {
		for f, p := range b.src[c] {
			if err := p.u.ReadPlane(p.k, scratch); err != nil {
				return fmt.Errorf("%s frame %d: %w", channelName(c), f+1, err)
			}
			if opt.Calibrate != nil {
				if err := opt.Calibrate.Calibrate(c, nx, ny, [][]float64{scratch}); err != nil {
					return err
				}
			}
			k, err := fillFrame(scratch, c, f, nx, ny)
			if err != nil {
				return err
			}
			b.Masked[c] += k
			im := scratch
			if turn {
				im, _, _ = orient(scratch, nx, ny, g.Channel[c])
				if c == 1 && rs != nil {
					rs.apply(im)
				}
			}
			b.store(c, f, im, opt.Quantise16)
		}
	}
	b.noteMasked()
	if turn {
		b.geometryApplied(g, dims[0])
	}
	return nil
}

// store keeps frame f of channel c, copied from im (quantised if q16).
func (b *Burst) store(c, f int, im []float64, q16 bool) {
	if q16 {
		b.Data16[c][f].Quantise(im)
		return
	}
	b.Data[c][f] = append([]float64(nil), im...)
}

// fillFrame fills the undefined pixels of frame f of channel c
// (FillUndefined) and returns how many it filled; it refuses a frame with
// more than MaxBadFraction of them.
func fillFrame(im []float64, c, f, nx, ny int) (int, error) {
	limit := int(MaxBadFraction * float64(nx*ny))
	// Count first: filling a frame that is mostly undefined would take a
	// pass per pixel of its largest hole.
	k, i := 0, -1
	for j, v := range im {
		if undefined(v) {
			if k++; i < 0 {
				i = j
			}
		}
	}
	if k > limit {
		return 0, fmt.Errorf("%s frame %d: %d of the %d×%d pixels (%.1f %%) are undefined (NaN, Inf, BLANK) or marked bad, the first at (x=%d, y=%d); at most %g %% are filled",
			channelName(c), f+1, k, nx, ny, 100*float64(k)/float64(nx*ny), i%nx+1, i/nx+1, 100*MaxBadFraction)
	}
	if k > 0 {
		FillUndefined(im, nx, ny)
	}
	return k, nil
}

// noteMasked records the counts of b.Masked in b.Cards (PDMASK1, PDMASK2
// and a HISTORY line) and b.Notes when any pixel was filled.
func (b *Burst) noteMasked() {
	if b.Masked == [2]int{} {
		return
	}
	text := fmt.Sprintf("masked = %d px in channel 1, %d px in channel 2 (over %d frames), filled with the median of good neighbours", b.Masked[0], b.Masked[1], b.Frames)
	b.Cards = append(b.Cards,
		fits.Card{Key: "PDMASK1", Value: b.Masked[0], Comment: "bad/undefined pixels filled, channel 1, all frames"},
		fits.Card{Key: "PDMASK2", Value: b.Masked[1], Comment: "bad/undefined pixels filled, channel 2, all frames"},
		fits.Card{Key: "HISTORY", Comment: "pdwave: " + text})
	b.Notes = append(b.Notes, text)
}
