package net

import (
	"fmt"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
)

// Predictor runs the network forward without gorgonia (Go; the convolutions
// use an AVX2+FMA kernel on amd64, pure Go elsewhere) over a Model's weights. It
// owns its buffers (laid out anew when the frame count changes) and is
// therefore not safe for concurrent use; make one per goroutine. It reads the
// model's weights at every call, so weights changed in place (training) are
// seen at once.
//
// The convolutions run on all frames of a burst together. Each layer's input
// is split into its four stride-2 phases (even/odd rows × even/odd columns),
// each zero-padded by one row and column in front, with the rows of all
// frames side by side in one strip. Every term (channel, ky, kx) of the 3×3
// stride-2 filter is then a fixed offset into these planes, so a tile of
// output positions reads contiguous inputs: the convolution is a matrix
// product with an implicit im2col, computed in 4-channel × 8-position tiles
// (AVX2+FMA on amd64 when available, portable Go otherwise).
type Predictor struct {
	m      *Model
	frames int // frame count of the current layout, 0 before the first call
	layers []convLayer
	flat   []float64 // frames × flat: last convolution's output, per frame (c, y, x)
	enc    []float64 // frames × Hidden
	cat    []float64 // frames × 2·Hidden
	hid    []float64 // frames × Head
	y      []float64 // frames × Modes
	xp     []float64 // dense input packed in 4-row panels (vector path)
	dtmp   []float64 // dense output, rows rounded up to 4 (vector path)
	offEnc []int     // byte offsets κ·Hidden·8 of the encoder weight rows
	offH1  []int     // byte offsets κ·Head·8 of the head1 weight rows
}

// convLayer holds the layout and buffers of one 3×3, stride 2, padding 1
// convolution over the strips of all frames (see Predictor).
type convLayer struct {
	cin, cout, s, o int
	k               int       // terms per output: cin·9
	rs              int       // row stride of the phase planes, elements
	lpad            int       // strip length frames·(o+1) rounded up to 8
	in              []float64 // cin × 2 × 2 phase planes of (o+1) rows × rs
	off             []int     // per term κ = (ci·3+ky)·3+kx: offset into in
	offB            []int     // off in bytes (vector kernel)
	wp              []float64 // packed weights: panel b, term κ, lane i = w[4b+i][κ]
	bp              []float64 // packed bias, 4 per panel (zero in unused lanes)
	out             []float64 // 4·panels × o rows × lpad strip, ReLU applied
}

// NewPredictor returns a forward pass for m. It panics if m's architecture is
// invalid or its tensors have the wrong sizes.
func NewPredictor(m *Model) *Predictor {
	if err := m.check(); err != nil {
		panic(err)
	}
	p := &Predictor{m: m}
	s, cin := m.Arch.Size, m.Arch.Channels
	for _, cout := range m.Arch.Conv {
		o := convOut(s)
		p.layers = append(p.layers, convLayer{cin: cin, cout: cout, s: s, o: o, k: 9 * cin})
		s, cin = o, cout
	}
	a := m.Arch
	p.offEnc = rowOffsets(a.flat(), a.Hidden)
	p.offH1 = rowOffsets(2*a.Hidden, a.Head)
	return p
}

// rowOffsets returns the byte offsets of the rows of an in × out matrix.
func rowOffsets(in, out int) []int {
	off := make([]int, in)
	for k := range off {
		off[k] = 8 * k * out
	}
	return off
}

// check verifies that the tensors match the architecture.
func (m *Model) check() error {
	if err := m.Arch.Validate(); err != nil {
		return err
	}
	want := makeParams(m.Arch)
	if len(m.Params) != len(want) {
		return fmt.Errorf("net: model has %d tensors, architecture needs %d", len(m.Params), len(want))
	}
	for i, w := range want {
		p := m.Params[i]
		if p.Name != w.Name || len(p.Data) != len(w.Data) || !sameShape(p.Shape, w.Shape) {
			return fmt.Errorf("net: tensor %d is %s %v (%d values), architecture needs %s %v", i, p.Name, p.Shape, len(p.Data), w.Name, w.Shape)
		}
	}
	if len(m.Scale) != m.Arch.Modes {
		return fmt.Errorf("net: %d output scales for %d modes", len(m.Scale), m.Arch.Modes)
	}
	return nil
}

func sameShape(a, b []int) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

func grow(b []float64, n int) []float64 {
	if cap(b) < n {
		return make([]float64, n)
	}
	return b[:n]
}

// InputLen returns the length of the input of Forward for the given number of
// frames: frames × Channels × Size × Size.
func (p *Predictor) InputLen(frames int) int {
	a := p.m.Arch
	return frames * a.Channels * a.Size * a.Size
}

// Forward computes the coefficients of every frame of one burst. x holds the
// features of the frames (frames × Channels × Size × Size, as written by
// Featurizer.Burst); dst receives frames × Modes coefficients in rad,
// frame-major. It panics if frames < 1 or the lengths are wrong. dst must not
// alias x.
func (p *Predictor) Forward(dst, x []float64, frames int) {
	a := p.m.Arch
	if frames < 1 {
		panic(fmt.Sprintf("net: %d frames", frames))
	}
	if len(x) != p.InputLen(frames) {
		panic(fmt.Sprintf("net: input has length %d, want %d", len(x), p.InputLen(frames)))
	}
	if len(dst) != frames*a.Modes {
		panic(fmt.Sprintf("net: output has length %d, want %d", len(dst), frames*a.Modes))
	}
	p.Raw(p.grownY(frames), x, frames)
	for f := 0; f < frames; f++ {
		for k := 0; k < a.Modes; k++ {
			dst[f*a.Modes+k] = p.m.Scale[k] * p.y[f*a.Modes+k]
		}
	}
}

func (p *Predictor) grownY(frames int) []float64 {
	p.y = grow(p.y, frames*p.m.Arch.Modes)
	return p.y
}

// Raw computes the unscaled outputs y (frames × Modes), the values the
// gorgonia Graph returns; α = Scale·y. Same contract as Forward otherwise.
// dst may be the predictor's own buffer only through Forward.
func (p *Predictor) Raw(dst, x []float64, frames int) {
	a := p.m.Arch
	ps := p.m.Params
	p.layout(frames)
	s, c := a.Size, a.Channels
	l0 := &p.layers[0]
	for f := 0; f < frames; f++ {
		for ci := 0; ci < c; ci++ {
			im := x[(f*c+ci)*s*s : (f*c+ci+1)*s*s]
			for y := 0; y < s; y++ {
				l0.putRow(ci, f, y, im[y*s:(y+1)*s])
			}
		}
	}
	for l := range p.layers {
		L := &p.layers[l]
		L.pack(ps[2*l].Data, ps[2*l+1].Data)
		L.run()
		if l+1 < len(p.layers) {
			L.scatter(&p.layers[l+1], frames)
		} else {
			L.flatten(p.flat, frames)
		}
	}
	nl := len(a.Conv)
	flat := a.flat()
	p.denseVec(p.enc, p.flat, ps[2*nl].Data, ps[2*nl+1].Data, frames, flat, a.Hidden, p.offEnc)
	// Burst summary: mean over frames, appended to every frame's features.
	h := a.Hidden
	for f := 0; f < frames; f++ {
		copy(p.cat[f*2*h:f*2*h+h], p.enc[f*h:(f+1)*h])
	}
	inv := 1 / float64(frames)
	for j := 0; j < h; j++ {
		s := 0.0
		for f := 0; f < frames; f++ {
			s += p.enc[f*h+j]
		}
		s *= inv
		for f := 0; f < frames; f++ {
			p.cat[f*2*h+h+j] = s
		}
	}
	p.denseVec(p.hid, p.cat, ps[2*nl+2].Data, ps[2*nl+3].Data, frames, 2*h, a.Head, p.offH1)
	dense(dst, p.hid, ps[2*nl+4].Data, ps[2*nl+5].Data, frames, a.Head, a.Modes, false)
}

// layout sizes the buffers for the given frame count (reusing their memory
// where large enough) and sets the offset tables. The padding of the phase
// planes is zeroed here once; later calls write only the data positions.
func (p *Predictor) layout(frames int) {
	if frames == p.frames {
		return
	}
	p.frames = frames
	a := p.m.Arch
	for l := range p.layers {
		L := &p.layers[l]
		o1 := L.o + 1
		L.lpad = (frames*o1 + 7) &^ 7
		L.rs = L.lpad + 1
		L.in = zeroed(L.in, L.cin*4*o1*L.rs)
		if L.off == nil {
			L.off = make([]int, L.k)
			L.offB = make([]int, L.k)
		}
		phaseOffsets(L.off, L.offB, L.cin, o1, L.rs, 8)
		panels := (L.cout + 3) / 4
		L.wp = zeroed(L.wp, panels*4*L.k)
		L.bp = zeroed(L.bp, panels*4)
		L.out = zeroed(L.out, panels*4*L.o*L.lpad)
	}
	p.flat = zeroed(p.flat, frames*a.flat())
	p.enc = zeroed(p.enc, frames*a.Hidden)
	p.cat = zeroed(p.cat, frames*2*a.Hidden)
	p.hid = zeroed(p.hid, frames*a.Head)
	panels := (frames + 3) / 4
	p.xp = zeroed(p.xp, panels*4*max(a.flat(), 2*a.Hidden))
	p.dtmp = zeroed(p.dtmp, panels*4*max(a.Hidden, a.Head))
}

// phaseOffsets sets off[κ], κ = (ci·3+ky)·3+kx, to the offset of term κ
// of a 3×3 stride-2 filter into phase planes of o1 rows of stride rs (see
// Predictor), and offB[κ] to the same in bytes for elements of esz bytes.
func phaseOffsets(off, offB []int, cin, o1, rs, esz int) {
	for ci := 0; ci < cin; ci++ {
		for ky := 0; ky < 3; ky++ {
			// Input row 2·oy+ky−1: ky = 0 is odd-phase row oy−1 (padded
			// row oy), ky = 1 and 2 are even- and odd-phase row oy
			// (padded row oy+1). Columns likewise.
			py, dr := 1-ky&1, min(ky, 1)
			for kx := 0; kx < 3; kx++ {
				px, dc := 1-kx&1, min(kx, 1)
				kk := (ci*3+ky)*3 + kx
				off[kk] = (((ci*2+py)*2+px)*o1+dr)*rs + dc
				offB[kk] = esz * off[kk]
			}
		}
	}
}

// zeroed returns b resliced to n zeros, reallocated if too small.
func zeroed[T float32 | float64](b []T, n int) []T {
	if cap(b) < n {
		return make([]T, n)
	}
	b = b[:n]
	clear(b)
	return b
}

// putRow writes row y (s values) of input channel ci of frame f into the
// phase planes: pixel (y, x) goes to plane (ci, y mod 2, x mod 2), padded
// row y/2+1, strip position f·(o+1) + x/2 + 1.
func (L *convLayer) putRow(ci, f, y int, row []float64) {
	o1 := L.o + 1
	base := ((ci*4+(y&1)*2)*o1+(y>>1)+1)*L.rs + f*o1 + 1
	n := len(row) / 2
	ev := L.in[base : base+n+len(row)&1]
	od := L.in[base+o1*L.rs : base+o1*L.rs+n]
	ev2 := ev[:len(od)]
	i := 0
	for ; i+4 <= len(od); i += 4 {
		v := (*[8]float64)(row[2*i : 2*i+8])
		e := (*[4]float64)(ev2[i : i+4])
		d := (*[4]float64)(od[i : i+4])
		e[0], d[0] = v[0], v[1]
		e[1], d[1] = v[2], v[3]
		e[2], d[2] = v[4], v[5]
		e[3], d[3] = v[6], v[7]
	}
	for ; i < len(od); i++ {
		ev2[i] = row[2*i]
		od[i] = row[2*i+1]
	}
	if len(row)&1 == 1 {
		ev[n] = row[2*n]
	}
}

// pack copies the weights (cout × cin × 3 × 3) and biases into 4-channel
// panels.
func (L *convLayer) pack(w, b []float64) {
	k := L.k
	clear(L.bp)
	for ch := 0; ch < L.cout; ch++ {
		pb, i := ch/4, ch%4
		wc := w[ch*k : (ch+1)*k]
		dst := L.wp[pb*4*k:]
		for kk, v := range wc {
			dst[kk*4+i] = v
		}
		L.bp[ch] = b[ch]
	}
}

// run computes the layer's output strips with bias and ReLU.
func (L *convLayer) run() {
	o, lp, k := L.o, L.lpad, L.k
	cs := o * lp
	for pb := 0; pb < len(L.bp)/4; pb++ {
		w := L.wp[pb*4*k : (pb+1)*4*k]
		bias := (*[4]float64)(L.bp[4*pb : 4*pb+4])
		for oy := 0; oy < o; oy++ {
			cb := (pb*4*o + oy) * lp
			pbase := oy * L.rs
			for t := 0; t < lp; t += 8 {
				if useVec {
					convTileVec(&L.out[cb+t], cs, &L.in[pbase+t], &L.offB[0], &w[0], k, bias, true)
				} else {
					convTile(L.out[cb+t:], cs, L.in[pbase+t:], L.off, w, bias, true, 8)
				}
			}
		}
	}
}

// convTile computes one 4-channel × width-position tile (width even): for
// i < 4, j < width, c[i·cs+j] = bias[i] + Σ_κ w[4κ+i]·p[off[κ]+j], then
// max(0, ·) if relu. It runs in 4 × 2 sub-tiles whose eight sums stay in
// registers. The float64 pass uses width 8, the float32 pass tile32.
func convTile[T float32 | float64](c []T, cs int, p []T, off []int, w []T, bias *[4]T, relu bool, width int) {
	w = w[:4*len(off)]
	for j := 0; j < width; j += 2 {
		var a0, a1, b0, b1, c0, c1, d0, d1 T
		for kk, o := range off {
			in := (*[2]T)(p[o+j : o+j+2])
			wk := (*[4]T)(w[4*kk : 4*kk+4])
			x0, x1 := in[0], in[1]
			a0 += wk[0] * x0
			a1 += wk[0] * x1
			b0 += wk[1] * x0
			b1 += wk[1] * x1
			c0 += wk[2] * x0
			c1 += wk[2] * x1
			d0 += wk[3] * x0
			d1 += wk[3] * x1
		}
		for i, v := range [4][2]T{{a0, a1}, {b0, b1}, {c0, c1}, {d0, d1}} {
			row := (*[2]T)(c[i*cs+j : i*cs+j+2])
			for q, x := range v {
				x += bias[i]
				if relu && x < 0 {
					x = 0
				}
				row[q] = x
			}
		}
	}
}

// scatter writes the layer's output (the valid strip positions) into the
// phase planes of the next layer.
func (L *convLayer) scatter(next *convLayer, frames int) {
	o, o1, lp := L.o, L.o+1, L.lpad
	for ch := 0; ch < L.cout; ch++ {
		for oy := 0; oy < o; oy++ {
			row := L.out[(ch*o+oy)*lp:]
			for f := 0; f < frames; f++ {
				next.putRow(ch, f, oy, row[f*o1:f*o1+o])
			}
		}
	}
}

// flatten writes the layer's output per frame in (channel, y, x) order.
func (L *convLayer) flatten(dst []float64, frames int) {
	o, o1, lp := L.o, L.o+1, L.lpad
	per := L.cout * o * o
	for ch := 0; ch < L.cout; ch++ {
		for oy := 0; oy < o; oy++ {
			row := L.out[(ch*o+oy)*lp:]
			for f := 0; f < frames; f++ {
				d := dst[f*per+(ch*o+oy)*o:]
				copy(d[:o], row[f*o1:f*o1+o])
			}
		}
	}
}

// denseVec is dense with ReLU through the tile kernel when it applies (vector
// path, out a multiple of 8): x is packed into panels of 4 rows, which take
// the place of the filter panels, and the weight rows (offsets off) the place
// of the input strips; the bias is added afterwards.
func (p *Predictor) denseVec(dst, x, w, b []float64, rows, in, out int, off []int) {
	if !useVec || out%8 != 0 {
		dense(dst, x, w, b, rows, in, out, true)
		return
	}
	for r := 0; r < rows; r++ {
		xp := p.xp[(r/4)*4*in:]
		i := r % 4
		for k, v := range x[r*in : (r+1)*in] {
			xp[4*k+i] = v
		}
	}
	var zero [4]float64
	for pb := 0; pb < (rows+3)/4; pb++ {
		for j := 0; j < out; j += 8 {
			convTileVec(&p.dtmp[pb*4*out+j], out, &w[j], &off[0], &p.xp[pb*4*in], in, &zero, false)
		}
	}
	for r := 0; r < rows; r++ {
		row := dst[r*out : (r+1)*out]
		t := p.dtmp[r*out : (r+1)*out]
		for j := range row {
			v := t[j] + b[j]
			if v < 0 {
				v = 0
			}
			row[j] = v
		}
	}
}

// dense computes dst = x·w + b (rows × out), with ReLU if relu.
func dense(dst, x, w, b []float64, rows, in, out int, relu bool) {
	blas64.Gemm(blas.NoTrans, blas.NoTrans, 1,
		blas64.General{Rows: rows, Cols: in, Stride: in, Data: x},
		blas64.General{Rows: in, Cols: out, Stride: out, Data: w},
		0, blas64.General{Rows: rows, Cols: out, Stride: out, Data: dst})
	for r := 0; r < rows; r++ {
		row := dst[r*out : (r+1)*out]
		for i := range row {
			v := row[i] + b[i]
			if relu && v < 0 {
				v = 0
			}
			row[i] = v
		}
	}
}
