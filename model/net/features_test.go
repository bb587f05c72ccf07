package net

import (
	"math"
	"math/cmplx"
	"math/rand/v2"
	"testing"

	"pdwave/model/fft"
)

func randomBurst(frames, n int, seed uint64) [2][][]float64 {
	rng := rand.New(rand.NewPCG(seed, 3))
	var d [2][][]float64
	for c := 0; c < 2; c++ {
		for j := 0; j < frames; j++ {
			im := make([]float64, n*n)
			for i := range im {
				im[i] = 100 + 10*rng.NormFloat64()
			}
			d[c] = append(d[c], im)
		}
	}
	return d
}

// Swapping the two channels changes the sign of the power difference and of
// Im(D1 D2*) and leaves Re(D1 D2*) alone; identical channels give
// P = 0, Im = 0 and Re = 2|D|²/(2|D|²+2ν) ≤ 1 (definitions in Featurizer).
func TestFeaturesChannelSymmetry(t *testing.T) {
	m, err := New(DefaultArch(4), demoMeta(), []float64{1, 1, 1, 1}, 1)
	if err != nil {
		t.Fatal(err)
	}
	f, err := NewFeaturizer(m)
	if err != nil {
		t.Fatal(err)
	}
	const frames = 3
	d := randomBurst(frames, 64, 9)
	a := make([]float64, f.Len(frames))
	b := make([]float64, f.Len(frames))
	if err := f.Burst(a, d); err != nil {
		t.Fatal(err)
	}
	if err := f.Burst(b, [2][][]float64{d[1], d[0]}); err != nil {
		t.Fatal(err)
	}
	pl := 32 * 32
	nonzero := 0
	for j := 0; j < frames; j++ {
		o := j * FeatureChannels * pl
		for k := 0; k < pl; k++ {
			p, re, im := a[o+2*pl+k], a[o+3*pl+k], a[o+4*pl+k]
			ps, res, ims := b[o+2*pl+k], b[o+3*pl+k], b[o+4*pl+k]
			if math.Abs(p+ps) > 1e-12 || math.Abs(re-res) > 1e-12 || math.Abs(im+ims) > 1e-12 {
				t.Fatalf("frame %d block %d: (%g %g %g) swapped (%g %g %g)", j, k, p, re, im, ps, res, ims)
			}
			if p*p+re*re+im*im > 1+1e-12 {
				t.Fatalf("frame %d block %d: ratio magnitude above 1", j, k)
			}
			if p != 0 {
				nonzero++
			}
		}
	}
	if nonzero < frames*pl/2 {
		t.Fatalf("only %d non-zero spectral blocks", nonzero)
	}
	if err := f.Burst(a, [2][][]float64{d[0], d[0]}); err != nil {
		t.Fatal(err)
	}
	for k := 0; k < pl; k++ {
		if p, re, im := a[2*pl+k], a[3*pl+k], a[4*pl+k]; math.Abs(p) > 1e-12 || math.Abs(im) > 1e-12 || re > 1+1e-12 || re < 0 {
			t.Fatalf("identical channels, block %d: P=%g Re=%g Im=%g", k, p, re, im)
		}
	}
	// Normalisation: the image channels do not depend on brightness.
	for c := 0; c < 2; c++ {
		for _, im := range d[c] {
			for i := range im {
				im[i] *= 7
			}
		}
	}
	c := make([]float64, f.Len(frames))
	if err := f.Burst(c, randomBurst(frames, 64, 9)); err != nil {
		t.Fatal(err)
	}
	if err := f.Burst(a, d); err != nil {
		t.Fatal(err)
	}
	for i := range a {
		if math.Abs(a[i]-c[i]) > 1e-9 {
			t.Fatalf("feature %d changes with brightness: %g vs %g", i, a[i], c[i])
		}
	}
	// Constant data is refused, not divided by zero.
	for _, im := range d[0] {
		for i := range im {
			im[i] = 1
		}
	}
	if err := f.Burst(a, d); err == nil {
		t.Error("constant focused images accepted")
	}
}

// refFeatures computes the features of one burst straight from the
// definitions in the Featurizer doc comment: block means of the images,
// each windowed channel through its own complex FFT, spectrum centred
// explicitly, block sums of the products, the noise power ν from the mean of
// (|D1|²+|D2|²)/2 beyond 1.05 r_c.
func refFeatures(n, size int, cutoff float64, data [2][][]float64) []float64 {
	frames := len(data[0])
	b := n / size
	plane := size * size
	out := make([]float64, frames*FeatureChannels*plane)
	var mean [2]float64
	for c := 0; c < 2; c++ {
		for _, im := range data[c] {
			for _, v := range im {
				mean[c] += v
			}
		}
		mean[c] /= float64(frames * n * n)
	}
	ss := 0.0
	for _, im := range data[0] {
		for _, v := range im {
			ss += (v - mean[0]) * (v - mean[0])
		}
	}
	sd := math.Sqrt(ss / float64(frames*n*n))
	w := EdgeWindow(n, n/8)
	plan := fft.NewPlan(n, n)
	// D[c][j], centred: index (cy, cx) holds frequency (cy − n/2, cx − n/2).
	var spec [2][][]complex128
	for c := 0; c < 2; c++ {
		for j := 0; j < frames; j++ {
			im := data[c][j]
			m := 0.0
			for _, v := range im {
				m += v
			}
			m /= float64(n * n)
			z := make([]complex128, n*n)
			for i, v := range im {
				z[i] = complex(w[i]*(v-m), 0)
			}
			plan.Forward(z, z)
			cz := make([]complex128, n*n)
			for ky := 0; ky < n; ky++ {
				for kx := 0; kx < n; kx++ {
					cz[((ky+n/2)%n)*n+(kx+n/2)%n] = z[ky*n+kx]
				}
			}
			spec[c] = append(spec[c], cz)
			// Image channel: block means minus the burst mean, over sd.
			for by := 0; by < size; by++ {
				for bx := 0; bx < size; bx++ {
					s := 0.0
					for y := by * b; y < (by+1)*b; y++ {
						for x := bx * b; x < (bx+1)*b; x++ {
							s += im[y*n+x]
						}
					}
					out[(j*FeatureChannels+c)*plane+by*size+bx] = (s/float64(b*b) - mean[c]) / sd
				}
			}
		}
	}
	M := make([]complex128, n*n)
	for _, d := range spec[0] {
		for i, v := range d {
			M[i] += v / complex(float64(frames), 0)
		}
	}
	for j := 0; j < frames; j++ {
		d1, d2 := spec[0][j], spec[1][j]
		nu, cnt := 0.0, 0
		for cy := 0; cy < n; cy++ {
			for cx := 0; cx < n; cx++ {
				if math.Hypot(float64(cy-n/2), float64(cx-n/2)) > 1.05*cutoff {
					i := cy*n + cx
					nu += (real(d1[i]*cmplx.Conj(d1[i])) + real(d2[i]*cmplx.Conj(d2[i]))) / 2
					cnt++
				}
			}
		}
		if cnt >= 16 {
			nu /= float64(cnt)
		} else {
			nu = 0
		}
		for by := 0; by < size; by++ {
			for bx := 0; bx < size; bx++ {
				var p1, p2, pm float64
				var x12, x1m complex128
				for cy := by * b; cy < (by+1)*b; cy++ {
					for cx := bx * b; cx < (bx+1)*b; cx++ {
						i := cy*n + cx
						p1 += real(d1[i] * cmplx.Conj(d1[i]))
						p2 += real(d2[i] * cmplx.Conj(d2[i]))
						pm += real(M[i] * cmplx.Conj(M[i]))
						x12 += d1[i] * cmplx.Conj(d2[i])
						x1m += d1[i] * cmplx.Conj(M[i])
					}
				}
				reg := 2 * nu * float64(b*b) // ν per frequency, summed over the block
				q, r := p1+p2+reg, p1+pm+reg
				yc := (float64(by)+0.5)*float64(b) - 0.5 - float64(n/2)
				xc := (float64(bx)+0.5)*float64(b) - 0.5 - float64(n/2)
				if math.Hypot(xc, yc) > cutoff || q <= 0 || r <= 0 {
					continue
				}
				o := (j*FeatureChannels+2)*plane + by*size + bx
				out[o] = (p1 - p2) / q
				out[o+plane] = 2 * real(x12) / q
				out[o+2*plane] = 2 * imag(x12) / q
				out[o+3*plane] = 2 * real(x1m) / r
				out[o+4*plane] = 2 * imag(x1m) / r
			}
		}
	}
	return out
}

// The Featurizer equals the reference from the definitions to 1e-9 for the
// demo optics (cut-off 31 px of 32), a tighter cut-off (blocks outside set
// to zero, a noise floor), bins of 1, 2 and 4 pixels, an odd half-patch, and
// changing frame counts, on the vector and the portable path.
func TestFeaturesMatchReference(t *testing.T) {
	cases := []struct {
		patch, size int
		pixScale    float64 // fraction of the demo pixel scale
	}{
		{64, 32, 1}, {64, 32, 0.6}, {32, 32, 0.5}, {64, 16, 0.8}, {48, 24, 0.7}, {30, 15, 0.7},
	}
	vecAvail := useVec
	defer func() { useVec = vecAvail }()
	for ci, c := range cases {
		md := demoMeta()
		md.Patch = c.patch
		md.PixelScale *= c.pixScale
		a := DefaultArch(4)
		a.Size = c.size
		m, err := New(a, md, []float64{1, 1, 1, 1}, 1)
		if err != nil {
			t.Fatal(err)
		}
		f, err := NewFeaturizer(m)
		if err != nil {
			t.Fatal(err)
		}
		for _, frames := range []int{5, 1, 16} {
			useVec = vecAvail && frames != 5 // the portable path too
			d := randomBurst(frames, c.patch, uint64(31*ci+frames))
			// A common object makes the spectra correlated, as in real data.
			for j := 0; j < frames; j++ {
				for i := range d[0][j] {
					o := 40 * math.Sin(float64(i%c.patch)/3) * math.Cos(float64(i/c.patch)/5)
					d[0][j][i] += o
					d[1][j][i] += 0.8 * o
				}
			}
			want := refFeatures(c.patch, c.size, md.CutoffRadius(), d)
			got := make([]float64, f.Len(frames))
			if err := f.Burst(got, d); err != nil {
				t.Fatal(err)
			}
			nonzero := 0
			for i, w := range want {
				if math.Abs(got[i]-w) > 1e-9 {
					pl := c.size * c.size
					t.Fatalf("case %d frames %d: feature %d (frame %d channel %d block %d) %.15g, reference %.15g",
						ci, frames, i, i/(FeatureChannels*pl), i/pl%FeatureChannels, i%pl, got[i], w)
				}
				if w != 0 {
					nonzero++
				}
			}
			if nonzero < len(want)/3 {
				t.Fatalf("case %d: only %d of %d reference features non-zero", ci, nonzero, len(want))
			}
		}
	}
}
