package net

import (
	"fmt"
)

// tile32 is the strip width of the float32 tile kernel: one tile is 4
// output channels × 16 positions (two 8-lane vectors per channel).
const tile32 = 16

// Predictor32 is the forward pass of Predictor in float32 arithmetic: the
// weights are converted to float32 once, by NewPredictor32, and every
// activation is float32, twice the lanes of Predictor's vectors; the
// features going in and the coefficients coming out stay float64. Its
// outputs differ from Predictor's by float32 rounding only (TestPredictor32
// bounds the difference). Weights changed in the Model afterwards are not
// seen: make a new Predictor32 (training uses Predictor). It owns its buffers
// and is not safe for concurrent use; make one per goroutine.
//
// The convolutions use Predictor's layout (stride-2 phase planes, the frames
// side by side in strips, tiles of 4 channels) with 16-position tiles. The
// dense layers run on the same kernel with the roles turned: their values
// are kept transposed (unit × frame, the frames padded to a multiple of 16
// as the strip), the weight panels hold 4 output units and the bias is per
// unit. The summary half of the first head layer is the same for every
// frame of a burst, so it is folded into that layer's bias once per burst.
type Predictor32 struct {
	arch   Arch
	scale  []float64
	frames int // frame count of the current layout, 0 before the first call
	fpad   int // frames rounded up to tile32: the strip of the dense layers
	layers []convLayer32
	enc    dense32     // flat → Hidden, ReLU
	head   dense32     // Hidden (frame half) → Head, ReLU, bias from sumBias
	out    dense32     // Head → Modes
	wsum   []float32   // head1 weights of the summary half, Hidden × Head
	bhead  []float32   // head1 bias, Head
	flat   []float32   // flat × fpad: last convolution's output, transposed
	encT   []float32   // 4·panels × fpad
	hidT   []float32   // 4·panels × fpad
	yT     []float32   // 4·panels × fpad
	mean   []float32   // Hidden: the burst summary
	xf     []float64   // one frame's features (Predict), written by xfBy.frame only
	xfBy   *Featurizer // the featurizer that last wrote xf
}

// convLayer32 is convLayer in float32 with weights packed once.
type convLayer32 struct {
	cin, cout, s, o int
	k               int       // terms per output: cin·9
	rs              int       // row stride of the phase planes, elements
	lpad            int       // strip length frames·(o+1) rounded up to tile32
	in              []float32 // cin × 2 × 2 phase planes of (o+1) rows × rs
	off             []int     // per term κ: offset into in
	offB            []int     // off in bytes (vector kernel)
	wp              []float32 // packed weights: panel b, term κ, lane i = w[4b+i][κ]
	bp              []float32 // packed bias, 4 per panel (zero in unused lanes)
	out             []float32 // 4·panels × o rows × lpad strip, ReLU applied
}

// dense32 is a fully connected layer on transposed values (see
// Predictor32): out[u·fpad+f] = b[u] + Σ_κ w[κ][u]·in[κ·fpad+f].
type dense32 struct {
	in, out   int
	panels    int       // ⌈out/4⌉
	wp        []float32 // panel b, term κ, lane i = w[κ][4b+i]
	bp        []float32 // bias, 4 per panel (zero in unused lanes)
	off, offB []int     // κ·fpad, in elements and bytes
	relu      bool
}

// NewPredictor32 returns a float32 forward pass for m's current weights,
// which it copies (rounded to float32); it keeps no reference to m. It
// panics if m's architecture is invalid or its tensors have the wrong sizes.
func NewPredictor32(m *Model) *Predictor32 {
	if err := m.check(); err != nil {
		panic(err)
	}
	a := m.Arch
	ps := m.Params
	p := &Predictor32{arch: a, scale: append([]float64(nil), m.Scale...)}
	s, cin := a.Size, a.Channels
	for l, cout := range a.Conv {
		o := convOut(s)
		L := convLayer32{cin: cin, cout: cout, s: s, o: o, k: 9 * cin}
		L.pack(ps[2*l].Data, ps[2*l+1].Data)
		p.layers = append(p.layers, L)
		s, cin = o, cout
	}
	nl, h := len(a.Conv), a.Hidden
	p.enc = newDense32(ps[2*nl].Data, ps[2*nl+1].Data, a.flat(), h, true)
	w1 := ps[2*nl+2].Data
	p.head = newDense32(w1[:h*a.Head], ps[2*nl+3].Data, h, a.Head, true)
	p.wsum = toFloat32(w1[h*a.Head:])
	p.bhead = toFloat32(ps[2*nl+3].Data)
	p.out = newDense32(ps[2*nl+4].Data, ps[2*nl+5].Data, a.Head, a.Modes, false)
	p.mean = make([]float32, h)
	return p
}

// toFloat32 returns x rounded to float32.
func toFloat32(x []float64) []float32 {
	y := make([]float32, len(x))
	for i, v := range x {
		y[i] = float32(v)
	}
	return y
}

// pack sets the layer's weight panels from w (cout × cin × 3 × 3) and b.
func (L *convLayer32) pack(w, b []float64) {
	panels := (L.cout + 3) / 4
	L.wp = make([]float32, panels*4*L.k)
	L.bp = make([]float32, panels*4)
	for ch := 0; ch < L.cout; ch++ {
		pb, i := ch/4, ch%4
		dst := L.wp[pb*4*L.k:]
		for kk, v := range w[ch*L.k : (ch+1)*L.k] {
			dst[kk*4+i] = float32(v)
		}
		L.bp[ch] = float32(b[ch])
	}
	L.off = make([]int, L.k)
	L.offB = make([]int, L.k)
}

// newDense32 packs the in × out weights w and the bias b.
func newDense32(w, b []float64, in, out int, relu bool) dense32 {
	d := dense32{in: in, out: out, panels: (out + 3) / 4, relu: relu}
	d.wp = make([]float32, d.panels*4*in)
	d.bp = make([]float32, d.panels*4)
	for u := 0; u < out; u++ {
		pb, i := u/4, u%4
		dst := d.wp[pb*4*in:]
		for kk := 0; kk < in; kk++ {
			dst[kk*4+i] = float32(w[kk*out+u])
		}
		d.bp[u] = float32(b[u])
	}
	d.off = make([]int, in)
	d.offB = make([]int, in)
	return d
}

// InputLen returns the length of the input of Forward for the given number of
// frames: frames × Channels × Size × Size.
func (p *Predictor32) InputLen(frames int) int {
	a := p.arch
	return frames * a.Channels * a.Size * a.Size
}

// Forward computes the coefficients of every frame of one burst, as
// Predictor.Forward: x holds the features of the frames (frames × Channels
// × Size × Size, as written by Featurizer.Burst); dst receives frames ×
// Modes coefficients in rad, frame-major. It panics if frames < 1 or the
// lengths are wrong. dst must not alias x. After the first call for a frame
// count it allocates nothing.
func (p *Predictor32) Forward(dst, x []float64, frames int) {
	p.Raw(dst, x, frames)
	nm := p.arch.Modes
	for f := 0; f < frames; f++ {
		row := dst[f*nm : (f+1)*nm]
		for k := range row {
			row[k] *= p.scale[k]
		}
	}
}

// Raw computes the unscaled outputs y (frames × Modes), as Predictor.Raw;
// α = Scale·y. Same contract as Forward otherwise.
func (p *Predictor32) Raw(dst, x []float64, frames int) {
	if len(x) != p.InputLen(frames) {
		panic(fmt.Sprintf("net: input has length %d, want %d", len(x), p.InputLen(frames)))
	}
	p.begin(dst, frames)
	per := p.InputLen(1)
	for f := 0; f < frames; f++ {
		p.putFrame(f, x[f*per:(f+1)*per])
	}
	p.run(frames)
	p.output(dst, frames, false)
}

// Predict computes the coefficients of every frame of one burst straight
// from its images, as Featurizer.Burst followed by Forward, but with f's
// features handed to the network frame by frame (no feature array in
// between). data[channel][frame] are the N×N images as in Featurizer.Burst,
// whose errors it returns; dst receives frames × Modes coefficients in
// rad, frame-major. f must be made for a model of the same architecture
// (it panics otherwise, and if len(dst) is wrong). After the first call for
// a frame count it allocates nothing.
func (p *Predictor32) Predict(dst []float64, f *Featurizer, data [2][][]float64) error {
	if f.Len(1) != p.InputLen(1) {
		panic(fmt.Sprintf("net: featurizer writes %d values per frame, the network reads %d", f.Len(1), p.InputLen(1)))
	}
	if err := f.prepare(data); err != nil {
		return err
	}
	frames := len(data[0])
	p.begin(dst, frames)
	// Featurizer.frame leaves the blocks outside its cut-off alone when
	// clean; they are zero as long as only this featurizer wrote xf.
	if p.xf == nil || p.xfBy != f {
		p.xf = zeroed(p.xf, f.Len(1))
		p.xfBy = f
	}
	for j := 0; j < frames; j++ {
		f.frame(p.xf, data, j, true)
		p.putFrame(j, p.xf)
	}
	p.run(frames)
	p.output(dst, frames, true)
	return nil
}

// begin checks the frame count and the output length and lays the buffers
// out for the frame count; it panics as Forward.
func (p *Predictor32) begin(dst []float64, frames int) {
	if frames < 1 {
		panic(fmt.Sprintf("net: %d frames", frames))
	}
	if len(dst) != frames*p.arch.Modes {
		panic(fmt.Sprintf("net: output has length %d, want %d", len(dst), frames*p.arch.Modes))
	}
	p.layout(frames)
}

// putFrame writes the features x (Channels × Size × Size) of frame f < the
// frame count of begin into the first layer's phase planes.
func (p *Predictor32) putFrame(f int, x []float64) {
	s2 := p.arch.Size * p.arch.Size
	for ci := 0; ci < p.arch.Channels; ci++ {
		p.layers[0].putImage(ci, f, x[ci*s2:(ci+1)*s2])
	}
}

// output writes the outputs of the last run into dst (frames × Modes),
// times the output scale if scaled.
func (p *Predictor32) output(dst []float64, frames int, scaled bool) {
	nm := p.arch.Modes
	for f := 0; f < frames; f++ {
		row := dst[f*nm : (f+1)*nm]
		for k := range row {
			v := float64(p.yT[k*p.fpad+f])
			if scaled {
				v *= p.scale[k]
			}
			row[k] = v
		}
	}
}

// run computes p.yT from the phase planes of the first layer.
func (p *Predictor32) run(frames int) {
	for l := range p.layers {
		L := &p.layers[l]
		L.run()
		if l+1 < len(p.layers) {
			L.scatter(&p.layers[l+1], frames)
		} else {
			L.flattenT(p.flat, frames, p.fpad)
		}
	}
	p.enc.run(p.encT, p.flat, p.enc.bp, p.fpad)
	p.sumBias(frames)
	p.head.run(p.hidT, p.encT, p.head.bp, p.fpad)
	p.out.run(p.yT, p.hidT, p.out.bp, p.fpad)
}

// sumBias sets the head layer's bias to head1.b + mean·W_summary, the
// burst summary's part of the head (the same for every frame).
func (p *Predictor32) sumBias(frames int) {
	h, nh, fp := p.arch.Hidden, p.arch.Head, p.fpad
	inv := 1 / float32(frames)
	for j := range p.mean {
		var s float32
		for _, v := range p.encT[j*fp : j*fp+frames] {
			s += v
		}
		p.mean[j] = s * inv
	}
	b := p.head.bp[:nh]
	copy(b, p.bhead)
	for j := 0; j < h; j++ {
		m := p.mean[j]
		for u, w := range p.wsum[j*nh : (j+1)*nh] {
			b[u] += m * w
		}
	}
}

// layout sizes the buffers for the given frame count (reusing their memory
// where large enough) and sets the offset tables. The padding of the phase
// planes is zeroed here once; later calls write only the data positions.
// The rows of the phase planes are a multiple of 16 values long (64 bytes),
// so they start on cache lines when the buffer does (the larger ones are
// whole pages from the allocator).
func (p *Predictor32) layout(frames int) {
	if frames == p.frames {
		return
	}
	p.frames = frames
	p.fpad = (frames + tile32 - 1) / tile32 * tile32
	for l := range p.layers {
		L := &p.layers[l]
		o1 := L.o + 1
		L.lpad = (frames*o1 + tile32 - 1) / tile32 * tile32
		L.rs = L.lpad + tile32
		L.in = zeroed(L.in, L.cin*4*o1*L.rs)
		phaseOffsets(L.off, L.offB, L.cin, o1, L.rs, 4)
		// The kernel's reach: the last term's offset plus the strip.
		if reach := L.off[L.k-1] + (L.o-1)*L.rs + L.lpad; reach > len(L.in) {
			panic(fmt.Sprintf("net: internal error: layer %d reads %d of %d values", l+1, reach, len(L.in)))
		}
		L.out = zeroed(L.out, len(L.bp)*L.o*L.lpad)
	}
	a := p.arch
	p.flat = zeroed(p.flat, a.flat()*p.fpad)
	p.encT = zeroed(p.encT, 4*p.enc.panels*p.fpad)
	p.hidT = zeroed(p.hidT, 4*p.head.panels*p.fpad)
	p.yT = zeroed(p.yT, 4*p.out.panels*p.fpad)
	for _, d := range []*dense32{&p.enc, &p.head, &p.out} {
		for k := range d.off {
			d.off[k] = k * p.fpad
			d.offB[k] = 4 * k * p.fpad
		}
	}
}

// putImage writes input channel ci of frame f (s × s values) into the phase
// planes: row by row through putRow, or in one call of the vector kernel
// when s is a multiple of 8.
func (L *convLayer32) putImage(ci, f int, im []float64) {
	s := L.s
	if !useVec || s%8 != 0 {
		for y := 0; y < s; y++ {
			L.putRow(ci, f, y, im[y*s:(y+1)*s])
		}
		return
	}
	o1 := L.o + 1
	base := (ci*4*o1+1)*L.rs + f*o1 + 1
	// The kernel's last write: odd-odd plane, last row, last column.
	_ = L.in[base+3*o1*L.rs+(s/2-1)*L.rs+s/2-1]
	_ = im[s*s-1]
	splitImage64Vec(&L.in[base], &im[0], s/2, s/8, 4*L.rs, 4*o1*L.rs)
}

// putRow writes row y (s values) of input channel ci of frame f into the
// phase planes, as convLayer.putRow, rounding to float32.
func (L *convLayer32) putRow(ci, f, y int, row []float64) {
	o1 := L.o + 1
	base := ((ci*4+(y&1)*2)*o1+(y>>1)+1)*L.rs + f*o1 + 1
	n := len(row) / 2
	split64to32(L.in[base:base+n+len(row)&1], L.in[base+o1*L.rs:base+o1*L.rs+n], row)
}

// split64to32 sets ev[i] = row[2i] and od[i] = row[2i+1] rounded to
// float32; len(od) = len(row)/2 and len(ev) = len(row) − len(od).
func split64to32(ev, od []float32, row []float64) {
	n := len(od)
	ev2 := ev[:n]
	i := 0
	if q := n / 4; useVec && q > 0 {
		split64to32Vec(&ev2[0], &od[0], &row[0], q)
		i = 4 * q
	}
	for ; i < n; i++ {
		ev2[i] = float32(row[2*i])
		od[i] = float32(row[2*i+1])
	}
	if len(ev) > n {
		ev[n] = float32(row[2*n])
	}
}

// split32 is split64to32 for a float32 row.
func split32(ev, od, row []float32) {
	n := len(od)
	ev2 := ev[:n]
	i := 0
	if q := n / 4; useVec && q > 0 {
		split32Vec(&ev2[0], &od[0], &row[0], q)
		i = 4 * q
	}
	for ; i < n; i++ {
		ev2[i] = row[2*i]
		od[i] = row[2*i+1]
	}
	if len(ev) > n {
		ev[n] = row[2*n]
	}
}

// run computes the layer's output strips with bias and ReLU.
func (L *convLayer32) run() {
	o, lp, k := L.o, L.lpad, L.k
	cs := o * lp
	if useVec {
		// Row by row, all panels per tile (see convTiles32Vec).
		for oy := 0; oy < o; oy++ {
			convTiles32Vec(&L.out[oy*lp], cs, &L.in[oy*L.rs], &L.offB[0], &L.wp[0], k, &L.bp[0], true, lp/tile32, len(L.bp)/4)
		}
		return
	}
	for pb := 0; pb < len(L.bp)/4; pb++ {
		w := L.wp[pb*4*k : (pb+1)*4*k]
		bias := (*[4]float32)(L.bp[4*pb : 4*pb+4])
		for oy := 0; oy < o; oy++ {
			cb := (pb*4*o + oy) * lp
			pbase := oy * L.rs
			for t := 0; t < lp; t += tile32 {
				convTile(L.out[cb+t:], cs, L.in[pbase+t:], L.off, w, bias, true, tile32)
			}
		}
	}
}

// scatter writes the layer's output (the valid strip positions) into the
// phase planes of the next layer.
func (L *convLayer32) scatter(next *convLayer32, frames int) {
	o, o1, lp := L.o, L.o+1, L.lpad
	n1, ne, no := next.o+1, (o+1)/2, o/2
	for ch := 0; ch < L.cout; ch++ {
		for oy := 0; oy < o; oy++ {
			row := L.out[(ch*o+oy)*lp:]
			// Row oy goes to phase row oy mod 2, padded row oy/2+1 (see
			// convLayer.putRow).
			base := ((ch*4+(oy&1)*2)*n1+(oy>>1)+1)*next.rs + 1
			ev := next.in[base:]
			od := next.in[base+n1*next.rs:]
			if useVec && o%8 == 0 {
				_ = ev[(frames-1)*n1+ne-1] + od[(frames-1)*n1+no-1] + row[(frames-1)*o1+o-1]
				splitStrip32Vec(&ev[0], &od[0], &row[0], frames, o/8, o1, n1)
				continue
			}
			for f := 0; f < frames; f++ {
				split32(ev[f*n1:f*n1+ne], od[f*n1:f*n1+no], row[f*o1:f*o1+o])
			}
		}
	}
}

// flattenT writes the layer's output transposed: value (channel, y, x) of
// frame f at dst[((c·o+y)·o+x)·fpad + f].
func (L *convLayer32) flattenT(dst []float32, frames, fpad int) {
	o, o1, lp := L.o, L.o+1, L.lpad
	for r := 0; r < L.cout*o; r++ {
		row := L.out[r*lp : r*lp+frames*o1]
		d := dst[r*o*fpad : (r+1)*o*fpad]
		for f := 0; f < frames; f++ {
			src := row[f*o1 : f*o1+o]
			for ox, v := range src {
				d[ox*fpad+f] = v
			}
		}
	}
}

// run computes dst (4·panels × fpad) from x (in × fpad) with the bias b
// (4 per panel).
func (d *dense32) run(dst, x, b []float32, fpad int) {
	k := d.in
	if useVec {
		_ = dst[4*d.panels*fpad-1] + x[k*fpad-1] + b[4*d.panels-1]
		convTiles32Vec(&dst[0], fpad, &x[0], &d.offB[0], &d.wp[0], k, &b[0], d.relu, fpad/tile32, d.panels)
		return
	}
	for pb := 0; pb < d.panels; pb++ {
		w := d.wp[pb*4*k : (pb+1)*4*k]
		bias := (*[4]float32)(b[4*pb : 4*pb+4])
		c := dst[4*pb*fpad:]
		for t := 0; t < fpad; t += tile32 {
			convTile(c[t:], fpad, x[t:], d.off, w, bias, d.relu, tile32)
		}
	}
}
