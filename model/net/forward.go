package net

import (
	"fmt"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/floats"
)

// Predictor runs the network forward in plain Go over a Model's weights. It
// owns its buffers (grown on demand for more frames) and is therefore not safe
// for concurrent use; make one per goroutine. It reads the model's weights at
// every call, so weights changed in place (training) are seen at once.
type Predictor struct {
	m    *Model
	side []int // input side of each conv layer, then the last output side
	col  []float64
	act  [][]float64 // act[l]: input of conv layer l (act[0] unused), then the flattened output
	enc  []float64   // frames × Hidden
	cat  []float64   // frames × 2·Hidden
	hid  []float64   // frames × Head
	y    []float64   // frames × Modes
}

// NewPredictor returns a forward pass for m. It panics if m's architecture is
// invalid or its tensors have the wrong sizes.
func NewPredictor(m *Model) *Predictor {
	if err := m.check(); err != nil {
		panic(err)
	}
	p := &Predictor{m: m}
	s := m.Arch.Size
	for range m.Arch.Conv {
		p.side = append(p.side, s)
		s = convOut(s)
	}
	p.side = append(p.side, s)
	return p
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
	if len(p.act) == 0 {
		p.act = make([][]float64, len(a.Conv)+1)
	}
	in := x
	cin := a.Channels
	for l, cout := range a.Conv {
		s, o := p.side[l], p.side[l+1]
		k := cin * 9
		p.col = grow(p.col, o*o*k)
		out := grow(p.act[l+1], frames*cout*o*o)
		p.act[l+1] = out
		w := ps[2*l].Data
		bias := ps[2*l+1].Data
		for f := 0; f < frames; f++ {
			im2col(p.col, in[f*cin*s*s:(f+1)*cin*s*s], cin, s, o)
			dstf := out[f*cout*o*o : (f+1)*cout*o*o]
			// Small products: dot products on one goroutine beat a
			// general matrix multiply that spawns workers.
			for ch := 0; ch < cout; ch++ {
				wc := w[ch*k : (ch+1)*k]
				row := dstf[ch*o*o : (ch+1)*o*o]
				b := bias[ch]
				for q := range row {
					v := floats.Dot(wc, p.col[q*k:(q+1)*k]) + b
					if v < 0 {
						v = 0
					}
					row[q] = v
				}
			}
		}
		in = out
		cin = cout
	}
	nl := len(a.Conv)
	flat := a.flat()
	p.enc = grow(p.enc, frames*a.Hidden)
	dense(p.enc, in, ps[2*nl].Data, ps[2*nl+1].Data, frames, flat, a.Hidden, true)
	// Burst summary: mean over frames, appended to every frame's features.
	p.cat = grow(p.cat, frames*2*a.Hidden)
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
	p.hid = grow(p.hid, frames*a.Head)
	dense(p.hid, p.cat, ps[2*nl+2].Data, ps[2*nl+3].Data, frames, 2*h, a.Head, true)
	dense(dst, p.hid, ps[2*nl+4].Data, ps[2*nl+5].Data, frames, a.Head, a.Modes, false)
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

// im2col writes the 3×3, stride 2, padding 1 patches of one c×s×s image into
// col, (o·o) × (c·9), patch element order (channel, ky, kx) — the order of
// gorgonia's Im2Col, so the filters of both implementations agree.
func im2col(col, im []float64, c, s, o int) {
	k := c * 9
	for oy := 0; oy < o; oy++ {
		for ox := 0; ox < o; ox++ {
			row := col[(oy*o+ox)*k : (oy*o+ox+1)*k]
			i := 0
			for ch := 0; ch < c; ch++ {
				base := im[ch*s*s:]
				for ky := 0; ky < 3; ky++ {
					y := 2*oy + ky - 1
					for kx := 0; kx < 3; kx++ {
						x := 2*ox + kx - 1
						if y < 0 || y >= s || x < 0 || x >= s {
							row[i] = 0
						} else {
							row[i] = base[y*s+x]
						}
						i++
					}
				}
			}
		}
	}
}
