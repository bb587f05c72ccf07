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
	z            []complex128  // Z spectrum of the current frame (see transform)
	mean         []complex128  // burst mean M of the focused spectra
	sum          []float64     // pixel sum of the focused images, then its windowed deviation
	fsum         [2][]float64  // per channel and frame: pixel sum
	pm           []float64     // per output block: Σ|M|²
	in           []int32       // output blocks whose centre is inside the cut-off
	outside      [][2]int      // runs [first, end) of spectrum indices beyond 1.05 r_c, for the noise floor
	nout         int           // their number
	out          []int32       // output blocks outside the cut-off
	unshift      []int32       // centred index c → spectrum index (c − n/2) mod n
	neg          []int32       // spectrum index k → index of −k, (n − k) mod n
	pair         bool          // bins of 2 pixels and n/2 even (see spectral)
	runs         [][3]int      // (block row, first, end) of runs of inside blocks
	vs           []float64     // scratch of the vector kernel: 6 rows of vstride
	vstride      int           // the longest segment rounded up to 4
	rk           [5][4]float64 // constants of spectralVec: reg, 0.5, 0.25, 1, −0
	zx           []complex128  // z, then the mirrored pairs of the zero-frequency block column
	segs         [][6]int      // segments of inside blocks for spectralVec (setSegments)
	dcRows       [][3]int      // block row and mirror rows of each zero-frequency block
	bmean        [2]float64    // burst means of the two channels (prepare)
	binv         float64       // 1/(s·bin²), s the burst standard deviation (prepare)
	kc           [5][4]float64 // constants of packBin2Vec
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
	f.pair = f.bin == 2 && n%4 == 0
	f.plan = fft.NewPlan(n, n)
	f.window = EdgeWindow(n, n/8)
	f.z = make([]complex128, n*n)
	f.mean = make([]complex128, n*n)
	f.sum = make([]float64, n*n)
	f.pm = make([]float64, size*size)
	f.unshift = make([]int32, n)
	f.neg = make([]int32, n)
	for k := 0; k < n; k++ {
		f.unshift[(k+n/2)%n] = int32(k)
		f.neg[k] = int32((n - k) % n)
	}
	c := float64(n / 2)
	for by := 0; by < size; by++ {
		for bx := 0; bx < size; bx++ {
			// Block centre in centred frequency pixels.
			y := (float64(by)+0.5)*float64(f.bin) - 0.5 - c
			x := (float64(bx)+0.5)*float64(f.bin) - 0.5 - c
			if math.Hypot(x, y) <= f.cutoff {
				f.in = append(f.in, int32(by*size+bx))
				if r := len(f.runs) - 1; r >= 0 && f.runs[r][0] == by && f.runs[r][2] == bx {
					f.runs[r][2]++
				} else {
					f.runs = append(f.runs, [3]int{by, bx, bx + 1})
				}
			}
		}
	}
	if f.pair {
		f.setSegments()
	}
	for i, v := range [5]float64{0, 0.5, 0.25, 1, math.Copysign(0, -1)} {
		f.rk[i] = [4]float64{v, v, v, v}
	}
	f.setOutside()
	for k, j := 0, 0; k < size*size; k++ {
		if j < len(f.in) && int(f.in[j]) == k {
			j++
			continue
		}
		f.out = append(f.out, int32(k))
	}
	return f, nil
}

// setOutside lists the spectrum beyond 1.05 r_c, for the noise floor, as
// runs of indices (in each row the frequencies beyond are one run around
// the Nyquist column); none if fewer than 16.
func (f *Featurizer) setOutside() {
	n := f.n
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
				i := ky*n + kx
				if r := len(f.outside) - 1; r >= 0 && f.outside[r][1] == i {
					f.outside[r][1]++
				} else {
					f.outside = append(f.outside, [2]int{i, i + 1})
				}
				f.nout++
			}
		}
	}
	if f.nout < 16 {
		f.outside, f.nout = nil, 0
	}
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

// Burst writes the features of one burst into dst (frames × FeatureChannels
// × Size × Size, frame-major). data[channel][frame] are the N×N images,
// channel 0 focused, 1 defocused, as in burst.Burst.Data. It returns an error
// if the sizes do not match or the focused images are constant or not
// finite. After the first call for a frame count it allocates nothing.
func (f *Featurizer) Burst(dst []float64, data [2][][]float64) error {
	frames := len(data[0])
	if frames < 1 || len(data[1]) != frames {
		return fmt.Errorf("net: burst has %d focused and %d defocused frames", len(data[0]), len(data[1]))
	}
	if len(dst) != f.Len(frames) {
		return fmt.Errorf("net: feature buffer has length %d, want %d", len(dst), f.Len(frames))
	}
	if err := f.prepare(data); err != nil {
		return err
	}
	per := FeatureChannels * f.size * f.size
	for j := 0; j < frames; j++ {
		f.frame(dst[j*per:(j+1)*per], data, j, false)
	}
	return nil
}

// prepare checks the images of a burst and computes what the frames share:
// the frame sums, the burst means and standard deviation, the burst mean
// spectrum M and its block power. It returns an error as Burst.
func (f *Featurizer) prepare(data [2][][]float64) error {
	frames := len(data[0])
	if frames < 1 || len(data[1]) != frames {
		return fmt.Errorf("net: burst has %d focused and %d defocused frames", len(data[0]), len(data[1]))
	}
	n := f.n
	for c := 0; c < 2; c++ {
		for j, im := range data[c] {
			if len(im) != n*n {
				return fmt.Errorf("net: channel %d frame %d has %d pixels, want %d×%d", c+1, j+1, len(im), n, n)
			}
		}
		if cap(f.fsum[c]) < frames {
			f.fsum[c] = make([]float64, frames)
		}
		f.fsum[c] = f.fsum[c][:frames]
	}
	mean, ss := f.burstSums(data)
	npix := float64(n * n)
	sd := math.Sqrt(ss / (float64(frames) * npix))
	if !(sd > 0) || math.IsInf(sd, 0) || math.IsNaN(mean[1]) || math.IsInf(mean[1], 0) {
		return fmt.Errorf("net: focused images have standard deviation %g; need finite, varying data", sd)
	}
	f.bmean, f.binv = mean, 1/(sd*float64(f.bin*f.bin))
	// The transform is linear: M = F{w·Σ_j (d1_j − mean d1_j)}/frames.
	m1 := 0.0
	for _, v := range f.fsum[0] {
		m1 += v
	}
	m1 /= npix
	invF := 1 / float64(frames)
	for i, w := range f.window {
		f.sum[i] = w * (f.sum[i] - m1) * invF
	}
	f.plan.ForwardReal(f.mean, f.sum)
	f.blockPower()
	return nil
}

// burstSums sets the frame sums f.fsum and the pixel sums f.sum of the
// focused images and returns the burst means of both channels and
// Σ (d1 − mean)² over the focused frames.
func (f *Featurizer) burstSums(data [2][][]float64) (mean [2]float64, ss float64) {
	n, frames := f.n, len(data[0])
	clear(f.sum)
	vec := useVec && n*n%8 == 0
	for j := 0; j < frames; j++ {
		if vec {
			var s [2]float64
			sums2Vec(&f.sum[0], &data[0][j][0], &data[1][j][0], n*n, &s)
			f.fsum[0][j], f.fsum[1][j] = s[0], s[1]
		} else {
			f.fsum[0][j] = sumAdd(f.sum, data[0][j])
			f.fsum[1][j] = sum(data[1][j])
		}
		mean[0] += f.fsum[0][j]
		mean[1] += f.fsum[1][j]
	}
	npix := float64(n * n)
	mean[0] /= float64(frames) * npix
	mean[1] /= float64(frames) * npix
	for _, im := range data[0] {
		if vec {
			ss += sumSqVec(&im[0], mean[0], n*n)
		} else {
			ss += sumSq(im, mean[0])
		}
	}
	return mean, ss
}

// frame writes the FeatureChannels planes of frame j into out (after
// prepare for the same data). If clean, the blocks outside the cut-off are
// zero in out already (as frame leaves them) and are not written.
func (f *Featurizer) frame(out []float64, data [2][][]float64, j int, clean bool) {
	n, plane := f.n, f.size*f.size
	npix := float64(n * n)
	d1, d2 := data[0][j], data[1][j]
	m1, m2 := f.fsum[0][j]/npix, f.fsum[1][j]/npix
	if useVec && f.bin == 2 && n%8 == 0 {
		// Both passes over the images in one: the complex pair and the bins.
		for i, v := range [5]float64{m1, m2, f.bmean[0], f.bmean[1], f.binv} {
			f.kc[i] = [4]float64{v, v, v, v}
		}
		_ = d1[n*n-1] + d2[n*n-1] + real(f.z[n*n-1]) + f.window[n*n-1] + out[2*plane-1]
		packBin2Vec(&f.z[0], &d1[0], &d2[0], &f.window[0], n, n/2, &f.kc, &out[0], &out[plane])
		f.plan.Forward(f.z, f.z)
	} else {
		for c := 0; c < 2; c++ {
			f.binImage(out[c*plane:(c+1)*plane], data[c][j], f.bmean[c], f.binv)
		}
		f.transform(d1, d2, m1, m2)
	}
	f.spectral(out[2*plane:7*plane], clean)
}

// sum returns Σ x (four partial sums).
func sum(x []float64) float64 {
	var s0, s1, s2, s3 float64
	i := 0
	for ; i+4 <= len(x); i += 4 {
		v := (*[4]float64)(x[i : i+4])
		s0 += v[0]
		s1 += v[1]
		s2 += v[2]
		s3 += v[3]
	}
	for ; i < len(x); i++ {
		s0 += x[i]
	}
	return (s0 + s1) + (s2 + s3)
}

// sumAdd returns Σ x and adds x to acc (len(acc) == len(x)).
func sumAdd(acc, x []float64) float64 {
	acc = acc[:len(x)]
	var s0, s1, s2, s3 float64
	i := 0
	for ; i+4 <= len(x); i += 4 {
		v := (*[4]float64)(x[i : i+4])
		a := (*[4]float64)(acc[i : i+4])
		s0 += v[0]
		s1 += v[1]
		s2 += v[2]
		s3 += v[3]
		a[0] += v[0]
		a[1] += v[1]
		a[2] += v[2]
		a[3] += v[3]
	}
	for ; i < len(x); i++ {
		s0 += x[i]
		acc[i] += x[i]
	}
	return (s0 + s1) + (s2 + s3)
}

// sumSq returns Σ (x − m)² (four partial sums).
func sumSq(x []float64, m float64) float64 {
	var s0, s1, s2, s3 float64
	i := 0
	for ; i+4 <= len(x); i += 4 {
		v := (*[4]float64)(x[i : i+4])
		d0, d1, d2, d3 := v[0]-m, v[1]-m, v[2]-m, v[3]-m
		s0 += d0 * d0
		s1 += d1 * d1
		s2 += d2 * d2
		s3 += d3 * d3
	}
	for ; i < len(x); i++ {
		d := x[i] - m
		s0 += d * d
	}
	return (s0 + s1) + (s2 + s3)
}

// binImage writes (block sum of (d − m))·inv.
func (f *Featurizer) binImage(dst, im []float64, m, inv float64) {
	n, s, b := f.n, f.size, f.bin
	if b == 2 {
		for by := 0; by < s; by++ {
			r0 := im[2*by*n : 2*by*n+n]
			r1 := im[(2*by+1)*n : (2*by+1)*n+n]
			row := dst[by*s : by*s+s]
			for bx := range row {
				v0 := (*[2]float64)(r0[2*bx : 2*bx+2])
				v1 := (*[2]float64)(r1[2*bx : 2*bx+2])
				row[bx] = ((v0[0] - m) + (v0[1] - m) + (v1[0] - m) + (v1[1] - m)) * inv
			}
		}
		return
	}
	clear(dst)
	for y := 0; y < n; y++ {
		row := dst[(y/b)*s : (y/b+1)*s]
		src := im[y*n : (y+1)*n]
		for x, v := range src {
			row[x/b] += v - m
		}
	}
	for i := range dst {
		dst[i] *= inv
	}
}

// transform computes Z = F{w·(d1 − m1) + i w·(d2 − m2)} into f.z, m1 and m2
// the frame means. Both real images go through one complex FFT:
// D1(u) = (Z(u) + Z*(−u))/2 and D2(u) = (Z(u) − Z*(−u))/(2i).
func (f *Featurizer) transform(d1, d2 []float64, m1, m2 float64) {
	z := f.z
	d1, d2 = d1[:len(z)], d2[:len(z)]
	for i, w := range f.window[:len(z)] {
		z[i] = complex(w*(d1[i]-m1), w*(d2[i]-m2))
	}
	f.plan.Forward(z, z)
}

// blockPower sets f.pm to the block sums of |M|² over the inside blocks.
func (f *Featurizer) blockPower() {
	n, s, b := f.n, f.size, f.bin
	for _, k := range f.in {
		by, bx := int(k)/s, int(k)%s
		p := 0.0
		for dy := 0; dy < b; dy++ {
			row := f.mean[int(f.unshift[by*b+dy])*n:][:n]
			for dx := 0; dx < b; dx++ {
				m := row[f.unshift[bx*b+dx]]
				p += real(m)*real(m) + imag(m)*imag(m)
			}
		}
		f.pm[k] = p
	}
}

// spectral writes the five ratio channels of one frame from its Z spectrum
// (f.z) and the burst mean M of the focused spectra. With Z₋ = Z(−u),
// S = Z + Z₋* = 2 D1 and the relations of transform,
//
//	|D1|² − |D2|² = Re(Z Z₋),  2 D1 D2* = Im(Z Z₋) + i(|Z|² − |Z₋|²)/2,
//	|D1|² + |D2|² = (|Z|² + |Z₋|²)/2,  2 D1 M* = S M*,
//
// so the block sums need no per-frequency split. Only blocks inside the
// cut-off are summed; the others are zero (written unless clean, see frame).
func (f *Featurizer) spectral(dst []float64, clean bool) {
	s, b := f.size, f.bin
	z := f.z
	noise := 0.0
	if f.nout > 0 {
		// Σ |D1|²+|D2|² (the cross terms cancel over ±u), four partial sums.
		var s0, s1, s2, s3 float64
		for _, r := range f.outside {
			run := z[r[0]:r[1]]
			i := 0
			for ; i+2 <= len(run); i += 2 {
				v := (*[2]complex128)(run[i : i+2])
				s0 += real(v[0]) * real(v[0])
				s1 += imag(v[0]) * imag(v[0])
				s2 += real(v[1]) * real(v[1])
				s3 += imag(v[1]) * imag(v[1])
			}
			if i < len(run) {
				s0 += real(run[i]) * real(run[i])
				s1 += imag(run[i]) * imag(run[i])
			}
		}
		noise = ((s0 + s1) + (s2 + s3)) / (2 * float64(f.nout)) // per channel and frequency
	}
	reg := 2 * noise * float64(b*b)
	plane := s * s
	if f.pair && useVec {
		// The kernel writes every inside block.
		for c := 0; c < 5 && !clean; c++ {
			d := dst[c*plane : (c+1)*plane]
			for _, k := range f.out {
				d[k] = 0
			}
		}
		f.spectralPairs(dst, reg)
		return
	}
	clear(dst[:5*plane])
	for _, kb := range f.in {
		k := int(kb)
		f.finish(dst, k, f.blockScalar(k/s, k%s), reg)
	}
}

// blockScalar returns the sums of block (by, bx).
func (f *Featurizer) blockScalar(by, bx int) blockSums {
	n, b := f.n, f.bin
	z, mean := f.z, f.mean[:len(f.z)]
	var a blockSums
	for dy := 0; dy < b; dy++ {
		ky := int(f.unshift[by*b+dy])
		zr := z[ky*n:][:n]
		zn := z[int(f.neg[ky])*n:][:n]
		mr := mean[ky*n:][:n]
		for dx := 0; dx < b; dx++ {
			kx := f.unshift[bx*b+dx]
			a.add(zr[kx], zn[f.neg[kx]], mr[kx])
		}
	}
	return a
}

// finish writes the five ratios of block k from its sums.
func (f *Featurizer) finish(dst []float64, k int, a blockSums, reg float64) {
	plane := f.size * f.size
	q := 0.5*(a.a1+a.a2) + reg
	r := 0.25*a.p1 + f.pm[k] + reg
	if q <= 0 || r <= 0 {
		return
	}
	iq, ir := 1/q, 1/r
	dst[k] = a.re * iq
	dst[plane+k] = a.im * iq
	dst[2*plane+k] = 0.5 * (a.a1 - a.a2) * iq
	dst[3*plane+k] = a.tr * ir
	dst[4*plane+k] = a.ti * ir
}

// spectralPairs is the inside-block loop of spectral for bins of 2 with n/2
// even, through the vector kernel: one call for the segments of f.segs
// (see setSegments), after copying the mirrored pairs of the zero-frequency
// block column next to each other.
func (f *Featurizer) spectralPairs(dst []float64, reg float64) {
	n, s := f.n, f.size
	z, zx := f.z, f.zx[len(f.z):]
	for i, r := range f.dcRows {
		kn0, kn1 := r[1], r[2]
		v := zx[4*i : 4*i+4]
		v[0], v[1] = z[kn0*n+n-1], z[kn0*n]
		v[2], v[3] = z[kn1*n+n-1], z[kn1*n]
	}
	f.rk[0] = [4]float64{reg, reg, reg, reg}
	_ = dst[5*s*s-1]
	spectralVec(&dst[0], 8*s*s, &f.zx[0], &f.mean[0], &f.pm[0], &f.vs[0], 8*f.vstride, &f.rk, &f.segs[0], len(f.segs))
}

// setSegments lays out the inside blocks for spectralVec (bins of 2, n/2
// even): in a block row the blocks left and right of the zero-frequency
// column (bx = Size/2) have adjacent spectrum columns kx, kx+1 whose
// mirrors n−kx, n−kx−1 are adjacent too, so each run of inside blocks is
// one segment on either side. The zero-frequency block has the mirrors 0
// and n−1; spectralPairs copies them, reversed as the kernel reads mirrored
// pairs, into zx beyond the spectrum (four values per such block), where
// its segment of one block points. It panics if a segment would reach
// beyond a buffer (an internal error).
func (f *Featurizer) setSegments() {
	n, s := f.n, f.size
	dc := s / 2
	longest := 0
	for _, run := range f.runs {
		by := run[0]
		ky0 := int(f.unshift[2*by])
		ky1 := ky0 + 1
		kn0, kn1 := int(f.neg[ky0]), int(f.neg[ky1])
		for _, seg := range [2][2]int{{run[1], min(run[2], dc)}, {max(run[1], dc+1), run[2]}} {
			lo, hi := seg[0], seg[1]
			if lo >= hi {
				continue
			}
			kx, nb := int(f.unshift[2*lo]), hi-lo
			if ky1*n+kx+2*nb > n*n || kn0*n+n-kx-2*nb < 0 || kn1*n+n-kx > n*n {
				panic(fmt.Sprintf("net: internal error: segment of block row %d reaches beyond the spectrum", by))
			}
			f.segs = append(f.segs, [6]int{16 * (ky0*n + kx), 16 * (ky1*n + kx),
				16 * (kn0*n + n - kx - 1), 16 * (kn1*n + n - kx - 1), 8 * (by*s + lo), nb})
			longest = max(longest, nb)
		}
		if run[1] <= dc && dc < run[2] {
			i := len(f.dcRows)
			f.dcRows = append(f.dcRows, [3]int{by, kn0, kn1})
			f.segs = append(f.segs, [6]int{16 * ky0 * n, 16 * ky1 * n,
				16 * (n*n + 4*i), 16 * (n*n + 4*i + 2), 8 * (by*s + dc), 1})
			longest = max(longest, 1)
		}
	}
	f.zx = make([]complex128, n*n+4*len(f.dcRows))
	f.z = f.zx[:n*n]
	f.vstride = (longest + 3) &^ 3
	f.vs = make([]float64, 6*f.vstride)
	if len(f.segs) == 0 {
		f.pair = false
	}
}

// blockSums accumulates, over the frequencies u of a block, |Z|², |Z₋|²,
// Re and Im of Z Z₋, |S|² and Re, Im of S M* (see spectral).
type blockSums struct{ a1, a2, re, im, p1, tr, ti float64 }

func (a *blockSums) add(u, v, m complex128) {
	ur, ui, vr, vi := real(u), imag(u), real(v), imag(v)
	a.a1 += ur*ur + ui*ui
	a.a2 += vr*vr + vi*vi
	a.re += ur*vr - ui*vi
	a.im += ur*vi + ui*vr
	sr, si := ur+vr, ui-vi
	a.p1 += sr*sr + si*si
	a.tr += sr*real(m) + si*imag(m)
	a.ti += si*real(m) - sr*imag(m)
}
