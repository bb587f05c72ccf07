package net

import (
	"fmt"
	"math"

	"pdwave/model/fft"
)

// FeatureChannels is the number of input channels per frame written by
// Featurizer: the focused and the defocused image, three object-independent
// spectral ratios between the channels and two between the frame and the
// burst mean.
const FeatureChannels = 7

// Featurizer turns the raw images of a burst into the network's input. For
// each frame j with focused image d1 and defocused image d2 (N×N) it writes
// seven Size×Size channels:
//
//  0. (bin(d1) − m1)/s    1. (bin(d2) − m2)/s
//
// with bin the mean over (N/Size)² pixel blocks, m_k the burst mean of
// channel k and s the burst standard deviation of the focused channel
// (per-patch normalisation: the network sees contrast, not brightness); and,
// from D_k = F{w·(d_k − mean d_k)} (w a raised-cosine edge window),
// summed over (N/Size)² blocks of the centred spectrum:
//
//  2. (|D1|² − |D2|²)/Q    3. 2 Re(D1 D2*)/Q    4. 2 Im(D1 D2*)/Q
//
//  5. 2 Re(D1 M*)/R     6. 2 Im(D1 M*)/R
//
// with Q = |D1|² + |D2|² + 2ν, ν the noise power read beyond the cut-off,
// M the burst mean of the focused spectra D1 and R = |D1|² + |M|² + 2ν.
// For d_k = o ⊗ s_k the object spectrum cancels from these ratios: they
// depend on the transfer functions alone (the idea of the phase-diversity
// error metric, Gonsalves 1982), which makes them a strong, scene-independent
// cue. Channels 5 and 6 carry the phase ramp of the frame's image motion
// against the burst mean (phase correlation), i.e. its tip and tilt relative
// to the burst, which the channel ratios cannot see. Blocks outside the
// cut-off are set to zero.
//
// A Featurizer owns an FFT plan and buffers; it is not safe for concurrent
// use.
type Featurizer struct {
	n, size, bin int
	cutoff       float64
	plan         *fft.Plan
	window       []float64
	zs           [][]complex128 // per frame Z spectrum (see transform)
	mean         []complex128   // burst mean of the focused spectra
	meanZ        []complex128   // burst mean of Z
	p1, p2, pm   []float64
	cr, ci       []float64
	tr, ti       []float64
	inside       []bool  // per output block: centre inside the cut-off
	outside      []int   // spectrum indices beyond 1.05 r_c, for the noise floor
	block        []int32 // per spectrum index: output block of the centred spectrum
	mirror       []int32 // per spectrum index: index of −u
	colBlock     []int32 // per image column: output column
}

// NewFeaturizer returns a Featurizer for the model's patch size and optics.
// It returns an error if the patch size is not a positive multiple of the
// network's input size.
func NewFeaturizer(m *Model) (*Featurizer, error) {
	n, size := m.Meta.Patch, m.Arch.Size
	if n < size || n%size != 0 {
		return nil, fmt.Errorf("net: patch size %d is not a multiple of the network input size %d", n, size)
	}
	f := &Featurizer{n: n, size: size, bin: n / size, cutoff: m.Meta.CutoffRadius()}
	f.plan = fft.NewPlan(n, n)
	f.window = EdgeWindow(n, n/8)
	f.mean = make([]complex128, n*n)
	f.meanZ = make([]complex128, n*n)
	f.block = make([]int32, n*n)
	f.mirror = make([]int32, n*n)
	f.colBlock = make([]int32, n)
	for x := range f.colBlock {
		f.colBlock[x] = int32(x / f.bin)
	}
	for ky := 0; ky < n; ky++ {
		cy := (ky + n/2) % n
		for kx := 0; kx < n; kx++ {
			cx := (kx + n/2) % n
			f.block[ky*n+kx] = int32((cy/f.bin)*size + cx/f.bin)
			f.mirror[ky*n+kx] = int32(((n-ky)%n)*n + (n-kx)%n)
		}
	}
	f.pm = make([]float64, size*size)
	f.tr = make([]float64, size*size)
	f.ti = make([]float64, size*size)
	f.p1 = make([]float64, size*size)
	f.p2 = make([]float64, size*size)
	f.cr = make([]float64, size*size)
	f.ci = make([]float64, size*size)
	f.inside = make([]bool, size*size)
	c := float64(n / 2)
	for by := 0; by < size; by++ {
		for bx := 0; bx < size; bx++ {
			// Block centre in centred frequency pixels.
			y := (float64(by)+0.5)*float64(f.bin) - 0.5 - c
			x := (float64(bx)+0.5)*float64(f.bin) - 0.5 - c
			f.inside[by*size+bx] = math.Hypot(x, y) <= f.cutoff
		}
	}
	for ky := 0; ky < n; ky++ {
		for kx := 0; kx < n; kx++ {
			u, v := ky, kx
			if u > n/2 {
				u -= n
			}
			if v > n/2 {
				v -= n
			}
			if math.Hypot(float64(u), float64(v)) > 1.05*f.cutoff {
				f.outside = append(f.outside, ky*n+kx)
			}
		}
	}
	if len(f.outside) < 16 {
		f.outside = nil
	}
	return f, nil
}

// EdgeWindow returns an n×n apodisation window: 1 inside, rising as a raised
// cosine over the outer `edge` pixels of every side (a Tukey window per axis).
func EdgeWindow(n, edge int) []float64 {
	w1 := make([]float64, n)
	for i := range w1 {
		w1[i] = 1
		d := i
		if n-1-i < d {
			d = n - 1 - i
		}
		if d < edge {
			w1[i] = 0.5 * (1 - math.Cos(math.Pi*(float64(d)+0.5)/float64(edge)))
		}
	}
	w := make([]float64, n*n)
	for y := 0; y < n; y++ {
		for x := 0; x < n; x++ {
			w[y*n+x] = w1[y] * w1[x]
		}
	}
	return w
}

// Len returns the feature length of a burst of the given frame count.
func (f *Featurizer) Len(frames int) int { return frames * FeatureChannels * f.size * f.size }

// Burst writes the features of one burst into dst (frames × 5 × Size × Size,
// frame-major). data[channel][frame] are the N×N images, channel 0 focused,
// 1 defocused, as in burst.Burst.Data. It returns an error if the sizes do not
// match or the focused images are constant or not finite.
func (f *Featurizer) Burst(dst []float64, data [2][][]float64) error {
	frames := len(data[0])
	if frames < 1 || len(data[1]) != frames {
		return fmt.Errorf("net: burst has %d focused and %d defocused frames", len(data[0]), len(data[1]))
	}
	if len(dst) != f.Len(frames) {
		return fmt.Errorf("net: feature buffer has length %d, want %d", len(dst), f.Len(frames))
	}
	n, s := f.n, f.size
	var mean [2]float64
	for c := 0; c < 2; c++ {
		for j, im := range data[c] {
			if len(im) != n*n {
				return fmt.Errorf("net: channel %d frame %d has %d pixels, want %d×%d", c+1, j+1, len(im), n, n)
			}
			for _, v := range im {
				mean[c] += v
			}
		}
		mean[c] /= float64(frames * n * n)
	}
	ss := 0.0
	for _, im := range data[0] {
		for _, v := range im {
			d := v - mean[0]
			ss += d * d
		}
	}
	sd := math.Sqrt(ss / float64(frames*n*n))
	if !(sd > 0) || math.IsInf(sd, 0) || math.IsNaN(mean[1]) || math.IsInf(mean[1], 0) {
		return fmt.Errorf("net: focused images have standard deviation %g; need finite, varying data", sd)
	}
	plane := s * s
	inv := 1 / (sd * float64(f.bin*f.bin))
	for len(f.zs) < frames {
		f.zs = append(f.zs, make([]complex128, n*n))
	}
	clear(f.meanZ)
	for j := 0; j < frames; j++ {
		z := f.zs[j]
		f.transform(z, data[0][j], data[1][j])
		for i, v := range z {
			f.meanZ[i] += v
		}
	}
	// The split is linear: the mean of D1 is the split of the mean of Z.
	invF := 1 / float64(frames)
	for i, v := range f.meanZ {
		d1, _ := split(v, f.meanZ[f.mirror[i]])
		f.mean[i] = complex(real(d1)*invF, imag(d1)*invF)
	}
	for j := 0; j < frames; j++ {
		out := dst[j*FeatureChannels*plane : (j+1)*FeatureChannels*plane]
		for c := 0; c < 2; c++ {
			f.binImage(out[c*plane:(c+1)*plane], data[c][j], mean[c], inv)
		}
		f.spectral(out[2*plane:7*plane], f.zs[j], f.mean)
	}
	return nil
}

// binImage writes (block sum of (d − m))·inv.
func (f *Featurizer) binImage(dst, im []float64, m, inv float64) {
	n, s, b := f.n, f.size, f.bin
	for i := range dst {
		dst[i] = 0
	}
	cb := f.colBlock
	for y := 0; y < n; y++ {
		row := dst[(y/b)*s : (y/b+1)*s]
		src := im[y*n : (y+1)*n]
		for x, v := range src {
			row[cb[x]] += v - m
		}
	}
	for i := range dst {
		dst[i] *= inv
	}
}

// transform computes Z = F{w·(d1 − mean d1) + i w·(d2 − mean d2)} into z.
// Both real images go through one complex FFT: D1(u) = (Z(u) + Z*(−u))/2 and
// D2(u) = (Z(u) − Z*(−u))/(2i).
func (f *Featurizer) transform(z []complex128, d1, d2 []float64) {
	n := f.n
	var m1, m2 float64
	for i := range d1 {
		m1 += d1[i]
		m2 += d2[i]
	}
	m1 /= float64(n * n)
	m2 /= float64(n * n)
	for i, w := range f.window {
		z[i] = complex(w*(d1[i]-m1), w*(d2[i]-m2))
	}
	f.plan.Forward(z, z)
}

// split returns D1(u) and D2(u) from Z at index k and its mirror km (−u).
func split(z, zm complex128) (d1, d2 complex128) {
	zr, zi := real(z), imag(z)
	wr, wi := real(zm), -imag(zm) // conj Z(−u)
	d1 = complex(0.5*(zr+wr), 0.5*(zi+wi))
	// (Z − conj Z(−u))/(2i): (p + iq)/(2i) = (q − ip)/2
	d2 = complex(0.5*(zi-wi), -0.5*(zr-wr))
	return d1, d2
}

// spectral writes the five ratio channels of one frame from its Z spectrum
// and the burst mean M of the focused spectra.
func (f *Featurizer) spectral(dst []float64, z, mean []complex128) {
	s, b := f.size, f.bin
	for i := 0; i < s*s; i++ {
		f.p1[i], f.p2[i], f.cr[i], f.ci[i], f.pm[i], f.tr[i], f.ti[i] = 0, 0, 0, 0, 0, 0, 0
	}
	mean = mean[:len(z)]
	mirror, block := f.mirror[:len(z)], f.block[:len(z)]
	for i, zi := range z {
		{
			d1, d2 := split(zi, z[mirror[i]])
			ar, ai := real(d1), imag(d1)
			br, bi := real(d2), imag(d2)
			m := mean[i]
			mr, mi := real(m), imag(m)
			k := block[i]
			f.p1[k] += ar*ar + ai*ai
			f.p2[k] += br*br + bi*bi
			// D1 D2* = (ar + i ai)(br − i bi)
			f.cr[k] += ar*br + ai*bi
			f.ci[k] += ai*br - ar*bi
			f.pm[k] += mr*mr + mi*mi
			f.tr[k] += ar*mr + ai*mi
			f.ti[k] += ai*mr - ar*mi
		}
	}
	noise := 0.0
	if f.outside != nil {
		for _, i := range f.outside {
			v := z[i]
			noise += real(v)*real(v) + imag(v)*imag(v) // Σ |D1|²+|D2|² (the cross terms cancel over ±u)
		}
		noise /= 2 * float64(len(f.outside)) // per channel and frequency
	}
	reg := 2 * noise * float64(b*b)
	plane := s * s
	for k := 0; k < plane; k++ {
		q := f.p1[k] + f.p2[k] + reg
		r := f.p1[k] + f.pm[k] + reg
		if !f.inside[k] || q <= 0 || r <= 0 {
			for c := 0; c < 5; c++ {
				dst[c*plane+k] = 0
			}
			continue
		}
		dst[k] = (f.p1[k] - f.p2[k]) / q
		dst[plane+k] = 2 * f.cr[k] / q
		dst[2*plane+k] = 2 * f.ci[k] / q
		dst[3*plane+k] = 2 * f.tr[k] / r
		dst[4*plane+k] = 2 * f.ti[k] / r
	}
}
