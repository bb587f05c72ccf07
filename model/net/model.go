// Package net is pdwave's learned wavefront estimator: a small convolutional
// network that reads one phase-diversity burst and returns wavefront
// coefficients for every frame, and its weight files.
//
// Layout of the network (all frames of a burst share the encoder weights):
//
//	per frame:  input features, Channels × Size × Size (see Featurizer)
//	            → len(Conv) layers of 3×3 convolution, stride 2, padding 1, ReLU
//	            → flatten → fully connected → Hidden features, ReLU       (encoder)
//	per burst:  summary = mean of the encoder features over the frames
//	per frame:  [features, summary] (2·Hidden) → fully connected → Head, ReLU
//	            → fully connected → Modes outputs y
//	coefficient α_m = Scale_m · y_m (rad), Scale_m the prior standard deviation
//	            of mode m, so the raw outputs are of order one.
//
// The burst summary makes the frames a set: the result for a frame does not
// depend on the order of the other frames, and any frame count works.
//
// Two implementations share one Model: Predictor, a forward pass without
// gorgonia (Go, with AVX2+FMA kernels on amd64 and a pure-Go fallback or
// -tags purego) and with preallocated buffers for fast prediction, and Graph, a gorgonia graph of a
// fixed batch used by training to back-propagate an outside gradient
// ∂L/∂α into the weights.
package net

import (
	"fmt"
	"math"
	"math/rand/v2"

	"pdwave/model/instrument"
	"pdwave/model/modes"
)

// Arch describes the network's shape. The zero value is not valid; use
// DefaultArch and set Modes.
type Arch struct {
	Channels int   // input channels per frame (FeatureChannels)
	Size     int   // input side, pixels, after binning the patch
	Conv     []int // output channels of each 3×3 stride-2 convolution
	Hidden   int   // encoder features per frame
	Head     int   // hidden units of the head
	Modes    int   // outputs per frame (wavefront modes, piston excluded)
}

// DefaultArch returns the architecture used for the shipped weights with the
// given number of modes: 5 input channels of 32×32, convolutions to 8, 16, 32
// channels, 64 encoder features and a 64-unit head.
func DefaultArch(modes int) Arch {
	return Arch{Channels: FeatureChannels, Size: 32, Conv: []int{8, 16, 32}, Hidden: 64, Head: 64, Modes: modes}
}

// Validate reports whether the architecture is usable.
func (a Arch) Validate() error {
	switch {
	case a.Channels < 1 || a.Channels > MaxArchWidth:
		return fmt.Errorf("net: architecture has %d input channels, want 1 to %d", a.Channels, MaxArchWidth)
	case a.Size < 1 || a.Size > MaxArchWidth:
		return fmt.Errorf("net: architecture has input size %d, want 1 to %d", a.Size, MaxArchWidth)
	case len(a.Conv) < 1 || len(a.Conv) > 8:
		return fmt.Errorf("net: architecture has %d convolution layers, want 1 to 8", len(a.Conv))
	case a.Hidden < 1 || a.Head < 1 || a.Hidden > MaxArchWidth || a.Head > MaxArchWidth:
		return fmt.Errorf("net: architecture has hidden=%d head=%d, want 1 to %d", a.Hidden, a.Head, MaxArchWidth)
	case a.Modes < 1 || a.Modes > MaxArchWidth:
		return fmt.Errorf("net: architecture has %d modes, want 1 to %d", a.Modes, MaxArchWidth)
	}
	s := a.Size
	for i, c := range a.Conv {
		if c < 1 || c > MaxArchWidth {
			return fmt.Errorf("net: convolution %d has %d channels, want 1 to %d", i+1, c, MaxArchWidth)
		}
		s = convOut(s)
	}
	if s < 1 {
		return fmt.Errorf("net: input size %d too small for %d convolutions", a.Size, len(a.Conv))
	}
	if n := a.paramCount(); n > MaxParams {
		return fmt.Errorf("net: architecture has %d weights, more than the limit %d", n, MaxParams)
	}
	return nil
}

// Limits on architectures, checked before anything is allocated: no layer
// wider than MaxArchWidth, at most MaxParams weights (80 MB as float64).
const (
	MaxArchWidth = 4096
	MaxParams    = 10_000_000
)

// paramCount returns the number of trainable weights of a (whose widths
// are within MaxArchWidth, so the products cannot overflow).
func (a Arch) paramCount() int {
	n, cin := 0, a.Channels
	for _, c := range a.Conv {
		n += c*cin*9 + c
		cin = c
	}
	return n + a.flat()*a.Hidden + a.Hidden + 2*a.Hidden*a.Head + a.Head + a.Head*a.Modes + a.Modes
}

// convOut is the output side of a 3×3, stride 2, padding 1 convolution.
func convOut(s int) int { return (s+2-3)/2 + 1 }

// flat is the number of values per frame after the last convolution.
func (a Arch) flat() int {
	s := a.Size
	for range a.Conv {
		s = convOut(s)
	}
	return s * s * a.Conv[len(a.Conv)-1]
}

// Tensor is one named array of weights, row-major with the last index fastest.
type Tensor struct {
	Name  string
	Shape []int
	Data  []float64
}

// Meta records what the weights were made for. Zero numbers mean unknown.
type Meta struct {
	Site        string            // site name from the site file
	Basis       string            // "zernike" or "kl"
	Modes       int               // number of modes, piston excluded
	Patch       int               // patch side N, pixels
	Frames      int               // frames per burst used in training (any count works)
	Diameter    float64           // telescope aperture, m
	Obscuration float64           // central obscuration, fraction of the diameter
	Wavelength  float64           // m
	PixelScale  float64           // rad per pixel
	DiversityPV float64           // defocus of channel 2, peak-to-valley waves
	Training    map[string]string // training settings (command, steps, seeds, ...)
	Version     string            // program version that wrote the weights
}

// CutoffRadius is the diffraction cut-off r_c = D·N·p/λ in frequency pixels of
// an N×N patch (incoherent cut-off D/λ at frequency spacing 1/(N p);
// Goodman, Introduction to Fourier Optics), or N/2 when the optics are
// unknown.
func (m Meta) CutoffRadius() float64 {
	if m.Diameter <= 0 || m.PixelScale <= 0 || m.Wavelength <= 0 || m.Patch <= 0 {
		return float64(m.Patch) / 2
	}
	return m.Diameter * float64(m.Patch) * m.PixelScale / m.Wavelength
}

// Model is a network: its architecture, what it was made for, its trainable
// weights (in the fixed order of Arch) and the output scale.
type Model struct {
	Arch   Arch
	Meta   Meta
	Params []*Tensor // trainable, order: conv1.w conv1.b … enc.w enc.b head1.w head1.b head2.w head2.b
	Scale  []float64 // len Modes: α_m = Scale[m]·y_m, rad
}

// New returns a model with freshly initialised weights: He-normal for the
// ReLU layers (He et al. 2015, eq. 10), the last layer scaled by 0.1 so the
// first predictions are near zero (the prior mean), biases zero. scale gives
// the per-mode output scale in rad (len arch.Modes, typically the prior
// standard deviation); it is copied. The same seed gives the same weights.
func New(arch Arch, meta Meta, scale []float64, seed uint64) (*Model, error) {
	if err := arch.Validate(); err != nil {
		return nil, err
	}
	if len(scale) != arch.Modes {
		return nil, fmt.Errorf("net: %d output scales for %d modes", len(scale), arch.Modes)
	}
	for i, s := range scale {
		if !(s > 0) || math.IsInf(s, 0) {
			return nil, fmt.Errorf("net: output scale %d is %g, want positive", i, s)
		}
	}
	meta.Modes = arch.Modes
	m := &Model{Arch: arch, Meta: meta, Scale: append([]float64(nil), scale...)}
	m.Params = makeParams(arch)
	rng := rand.New(rand.NewPCG(seed, 0x9e3779b97f4a7c15))
	for i := 0; i < len(m.Params); i += 2 {
		w := m.Params[i]
		fanIn := 1
		if len(w.Shape) == 4 {
			fanIn = w.Shape[1] * w.Shape[2] * w.Shape[3]
		} else {
			fanIn = w.Shape[0]
		}
		sd := math.Sqrt(2 / float64(fanIn))
		if i == len(m.Params)-2 {
			sd *= 0.1
		}
		for k := range w.Data {
			w.Data[k] = sd * rng.NormFloat64()
		}
	}
	return m, nil
}

// makeParams allocates the zeroed trainable tensors of arch in their order.
func makeParams(a Arch) []*Tensor {
	var ps []*Tensor
	add := func(name string, shape ...int) {
		n := 1
		for _, s := range shape {
			n *= s
		}
		ps = append(ps, &Tensor{Name: name, Shape: shape, Data: make([]float64, n)})
	}
	cin := a.Channels
	for i, c := range a.Conv {
		add(fmt.Sprintf("conv%d.w", i+1), c, cin, 3, 3)
		add(fmt.Sprintf("conv%d.b", i+1), c)
		cin = c
	}
	add("enc.w", a.flat(), a.Hidden)
	add("enc.b", a.Hidden)
	add("head1.w", 2*a.Hidden, a.Head)
	add("head1.b", a.Head)
	add("head2.w", a.Head, a.Modes)
	add("head2.b", a.Modes)
	return ps
}

// NumParams returns the number of trainable weights.
func (m *Model) NumParams() int {
	n := 0
	for _, p := range m.Params {
		n += len(p.Data)
	}
	return n
}

// Clone returns a deep copy of m.
func (m *Model) Clone() *Model {
	c := &Model{Arch: m.Arch, Meta: m.Meta, Scale: append([]float64(nil), m.Scale...)}
	c.Arch.Conv = append([]int(nil), m.Arch.Conv...)
	if m.Meta.Training != nil {
		c.Meta.Training = make(map[string]string, len(m.Meta.Training))
		for k, v := range m.Meta.Training {
			c.Meta.Training[k] = v
		}
	}
	for _, p := range m.Params {
		c.Params = append(c.Params, &Tensor{Name: p.Name, Shape: append([]int(nil), p.Shape...), Data: append([]float64(nil), p.Data...)})
	}
	return c
}

// Instrument returns what the metadata say about the instrument the weights
// were made for, as a source for instrument.Resolve and the one
// compatibility check (instrument.Compatible). Zero numbers are unknown
// (weights of earlier versions); the obscuration is known once the
// diameter is.
func (m Meta) Instrument() instrument.Partial {
	var p instrument.Partial
	setF := func(dst *instrument.Opt[float64], v float64) {
		if v > 0 && !math.IsInf(v, 0) {
			*dst = instrument.Some(v)
		}
	}
	setF(&p.Diameter, m.Diameter)
	setF(&p.Wavelength, m.Wavelength)
	setF(&p.PixelScale, m.PixelScale)
	if p.Diameter.Set {
		p.Obscuration = instrument.Some(m.Obscuration)
	}
	if m.DiversityPV != 0 && !math.IsNaN(m.DiversityPV) && !math.IsInf(m.DiversityPV, 0) {
		p.Diversity = instrument.Some([]float64{0, m.DiversityPV})
	}
	if m.Site != "" {
		p.Site = instrument.Some(m.Site)
	}
	if m.Patch > 0 {
		p.Patch = instrument.Some(m.Patch)
	}
	if m.Modes > 0 {
		p.Modes = instrument.Some(m.Modes)
	}
	if m.Basis != "" {
		p.Basis = instrument.Some(modes.Kind(m.Basis))
	}
	return p
}

// MetaFor returns the metadata of weights made for in with bursts of the
// given frame count (Training and Version left for the caller).
func MetaFor(in instrument.Instrument, frames int) Meta {
	t := in.Telescope
	return Meta{
		Site: in.Site, Basis: string(in.Basis), Modes: in.Modes, Patch: in.Patch, Frames: frames,
		Diameter: t.Diameter, Obscuration: t.Obscuration, Wavelength: t.Wavelength,
		PixelScale: t.PixelScale, DiversityPV: in.SecondDiversity(),
	}
}
