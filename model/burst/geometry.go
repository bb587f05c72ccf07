package burst

import (
	"fmt"
	"math"
	"strconv"
	"strings"

	"pdwave/model/fits"
)

// Orientation turns one camera's stored image into the common orientation.
// The steps are applied in this order: Transpose (x ↔ y), then the rotation
// by RotateDeg, then FlipX, then FlipY. Directions are those of the image
// as FITS viewers show it (pixel (1, 1) at the bottom left, x to the right,
// y up): RotateDeg = 90 turns the image a quarter turn counter-clockwise
// (the right edge becomes the top edge); FlipX mirrors left–right, FlipY
// top–bottom. The zero Orientation keeps the image as stored.
type Orientation struct {
	Transpose bool
	RotateDeg int // counter-clockwise, a multiple of 90 (any sign)
	FlipX     bool
	FlipY     bool
}

// Identity reports whether o keeps the image as stored.
func (o Orientation) Identity() bool {
	return !o.Transpose && o.quarters() == 0 && !o.FlipX && !o.FlipY
}

// quarters returns the rotation in quarter turns, 0 to 3.
func (o Orientation) quarters() int { return ((o.RotateDeg/90)%4 + 4) % 4 }

// swaps reports whether o exchanges the image's width and height.
func (o Orientation) swaps() bool { return o.Transpose != (o.quarters()%2 == 1) }

// Limits of Geometry, checked by Validate.
const (
	// MaxGeomOffset bounds the offsets of channel 2, pixels.
	MaxGeomOffset = 256.0
	// MinMagnification and MaxMagnification bound the magnification of
	// channel 2 relative to channel 1 (a ±10 % difference of image scale
	// between two cameras behind one telescope is far beyond any
	// adjustment error; our bound).
	MinMagnification = 0.9
	MaxMagnification = 1.1
)

// Geometry is the camera geometry of a two-channel instrument: each
// camera's Orientation and, for channel 2 after its orientation, the
// known registration to channel 1. The channel-2 image is displaced by
// (OffsetX, OffsetY) pixels and magnified by Magnification about the
// frame centre c = ((nx−1)/2, (ny−1)/2) (0-based pixel centres): a scene
// point at p in channel 1 lies at c + Magnification·(p − c) + offset in
// channel 2 (the offset convention of restore's measured channel offset).
// Magnification 0 means 1. The zero Geometry changes nothing.
type Geometry struct {
	Channel          [2]Orientation
	OffsetX, OffsetY float64 // channel 2, pixels
	Magnification    float64 // channel 2 relative to channel 1; 0 = 1
}

// Identity reports whether g changes nothing.
func (g Geometry) Identity() bool {
	return g.Channel[0].Identity() && g.Channel[1].Identity() && !g.resamples()
}

// resamples reports whether channel 2 needs sub-pixel resampling.
func (g Geometry) resamples() bool {
	return g.OffsetX != 0 || g.OffsetY != 0 || (g.Magnification != 0 && g.Magnification != 1)
}

// Validate checks the rotations (multiples of 90°), the offsets (finite,
// within ±MaxGeomOffset px) and the magnification (0, or finite within
// [MinMagnification, MaxMagnification]). Errors name the channel and the
// value.
func (g Geometry) Validate() error {
	for c, o := range g.Channel {
		if o.RotateDeg%90 != 0 {
			return fmt.Errorf("%s: rotation %d° is not a multiple of 90°", channelName(c), o.RotateDeg)
		}
	}
	for _, v := range []struct {
		name string
		v    float64
	}{{"x offset", g.OffsetX}, {"y offset", g.OffsetY}} {
		if math.IsNaN(v.v) || math.Abs(v.v) > MaxGeomOffset {
			return fmt.Errorf("channel 2 (defocused): %s %g px, want a finite number within ±%g px", v.name, v.v, MaxGeomOffset)
		}
	}
	if m := g.Magnification; m != 0 && !(m >= MinMagnification && m <= MaxMagnification) {
		return fmt.Errorf("channel 2 (defocused): magnification %g, want %g to %g (1 = the scale of channel 1)", m, MinMagnification, MaxMagnification)
	}
	return nil
}

// String describes g compactly, as the PDGEOM card holds it: per channel
// "1:" or "2:" then "T" (transpose), "R90"/"R180"/"R270", "FX", "FY"
// joined with ",", or "id"; then, for channel 2, "dx=", "dy=" (px) and
// "m=" (magnification) when set. The zero Geometry is "1:id 2:id".
func (g Geometry) String() string {
	parts := make([]string, 0, 5)
	for c, o := range g.Channel {
		var steps []string
		if o.Transpose {
			steps = append(steps, "T")
		}
		if q := o.quarters(); q != 0 {
			steps = append(steps, "R"+strconv.Itoa(90*q))
		}
		if o.FlipX {
			steps = append(steps, "FX")
		}
		if o.FlipY {
			steps = append(steps, "FY")
		}
		if len(steps) == 0 {
			steps = []string{"id"}
		}
		parts = append(parts, strconv.Itoa(c+1)+":"+strings.Join(steps, ","))
	}
	if g.OffsetX != 0 || g.OffsetY != 0 {
		parts = append(parts, "dx="+g6(g.OffsetX), "dy="+g6(g.OffsetY))
	}
	if m := g.Magnification; m != 0 && m != 1 {
		parts = append(parts, "m="+g6(m))
	}
	return strings.Join(parts, " ")
}

func g6(v float64) string { return strconv.FormatFloat(v, 'g', 6, 64) }

// GeometryKey is the header keyword recording the geometry the reader
// applied (Geometry.String). A burst whose header already holds it is in
// the common orientation: the reader does not apply a geometry again.
const GeometryKey = "PDGEOM"

// applyGeometry turns both channels of the burst b held in memory (and
// the OBJECT image, with channel 1's orientation) into the common
// orientation and resamples channel 2 by its offset and magnification (see
// resample), recording it as geometryApplied does. The reader does the
// same a frame at a time (Burst.load).
func (b *Burst) applyGeometry(g Geometry) error {
	turn, err := b.geometryToApply(g)
	if err != nil || !turn {
		return err
	}
	var dims [2][2]int
	for c, o := range g.Channel {
		nx, ny := b.Nx, b.Ny
		for f, im := range b.Data[c] {
			b.Data[c][f], nx, ny = orient(im, b.Nx, b.Ny, o)
		}
		dims[c] = [2]int{nx, ny}
	}
	if dims[0] != dims[1] {
		return fmt.Errorf("camera geometry %s: the channels are %d×%d px as stored, and %d×%d and %d×%d after orientation; one channel's geometry must turn a non-square frame the same way as the other's",
			g, b.Nx, b.Ny, dims[0][0], dims[0][1], dims[1][0], dims[1][1])
	}
	if g.resamples() {
		r := newResampler(dims[0][0], dims[0][1], g)
		for _, im := range b.Data[1] {
			r.apply(im)
		}
	}
	b.geometryApplied(g, dims[0])
	return nil
}

// geometryToApply reports whether g is to be applied to b: not the
// identity, and b's header holds no PDGEOM (then a note says it is not
// applied again). It errors if g is invalid.
func (b *Burst) geometryToApply(g Geometry) (bool, error) {
	if g.Identity() {
		return false, nil
	}
	if err := g.Validate(); err != nil {
		return false, fmt.Errorf("camera geometry: %w", err)
	}
	for _, c := range b.Cards {
		if c.Key == GeometryKey {
			b.Notes = append(b.Notes, fmt.Sprintf("the header holds %s = '%v': the channels are already oriented; the site's geometry (%s) is not applied again", GeometryKey, c.Value, g))
			return false, nil
		}
	}
	return true, nil
}

// geometryApplied completes b after its frames were turned by g into
// frames of size dims: the OBJECT image is turned with channel 1's
// orientation, b.Nx and b.Ny set, the geometry recorded in b.Geometry,
// b.Cards (PDGEOM and a HISTORY line) and b.Notes. When channel 1 is
// reoriented, the WCS cards of axes 1 and 2 (which describe the stored
// image) are dropped with a note.
func (b *Burst) geometryApplied(g Geometry, dims [2]int) {
	if b.Object != nil {
		b.Object, _, _ = orient(b.Object, b.Nx, b.Ny, g.Channel[0])
	}
	b.Nx, b.Ny = dims[0], dims[1]
	if !g.Channel[0].Identity() {
		b.dropPlaneWCS()
	}
	b.Geometry = g.String()
	b.Cards = append(b.Cards,
		fits.Card{Key: GeometryKey, Value: b.Geometry, Comment: "camera geometry applied on reading"},
		fits.Card{Key: "HISTORY", Comment: "pdwave: geometry = " + b.Geometry})
	b.Notes = append(b.Notes, "camera geometry applied: "+b.Geometry)
}

// dropPlaneWCS drops the WCS cards of axes 1 and 2 with a note.
func (b *Burst) dropPlaneWCS() {
	out := b.Cards[:0:0]
	var dropped []string
	for _, c := range b.Cards {
		if m := wcsRE.FindStringSubmatch(c.Key); m != nil && (m[2] == "1" || m[2] == "2" || m[4] == "1" || m[4] == "2" || m[5] == "1" || m[5] == "2") {
			dropped = append(dropped, c.Key)
			continue
		}
		out = append(out, c)
	}
	b.Cards = out
	if len(dropped) > 0 {
		b.Notes = append(b.Notes, fmt.Sprintf("channel 1 reoriented: its WCS keywords (%s) describe the stored image and are not carried into outputs", strings.Join(dropped, ", ")))
	}
}

// orient returns a new image holding im (nx×ny, row-major) turned by o,
// and its size.
func orient(im []float64, nx, ny int, o Orientation) ([]float64, int, int) {
	cur := append([]float64(nil), im...)
	w, h := nx, ny
	if o.Transpose {
		cur, w, h = remap(cur, w, h, true, func(x, y int) (int, int) { return y, x })
	}
	for q := o.quarters(); q > 0; q-- {
		// A quarter turn counter-clockwise with y up: the output pixel
		// (x', y') of the h×w result shows the input pixel (y', h−1−x').
		hh := h
		cur, w, h = remap(cur, w, h, true, func(x, y int) (int, int) { return y, hh - 1 - x })
	}
	if o.FlipX {
		ww := w
		cur, w, h = remap(cur, w, h, false, func(x, y int) (int, int) { return ww - 1 - x, y })
	}
	if o.FlipY {
		hh := h
		cur, w, h = remap(cur, w, h, false, func(x, y int) (int, int) { return x, hh - 1 - y })
	}
	return cur, w, h
}

// remap returns the image out (h×w if swap, else w×h) with out(x, y) =
// in(src(x, y)), and its size.
func remap(in []float64, w, h int, swap bool, src func(x, y int) (int, int)) ([]float64, int, int) {
	ow, oh := w, h
	if swap {
		ow, oh = h, w
	}
	out := make([]float64, len(in))
	for y := 0; y < oh; y++ {
		for x := 0; x < ow; x++ {
			sx, sy := src(x, y)
			out[y*ow+x] = in[sy*w+sx]
		}
	}
	return out, ow, oh
}
