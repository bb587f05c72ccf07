package instrument

import (
	"math"
	"strings"
	"testing"

	"pdwave/model/modes"
)

const arcsec = math.Pi / 180 / 3600

// base is a complete site: every required value, so that a test can vary
// one field over the other sources.
func base() Partial {
	return Partial{
		Site: Some("demo"), Wavelength: Some(600e-9), PixelScale: Some(0.1 * arcsec),
		Diameter: Some(0.5), Diversity: Some([]float64{0, 1}), R0: Some(0.08), R0Wavelength: Some(500e-9),
	}
}

// field is one setting varied over the sources: set gives source k (0 flags,
// 1 header, 2 weights, 3 site) its own value, get reads the resolved one.
type field struct {
	key  string
	vals [4]float64 // per source: flags, header, weights, site; the flags' value is an explicit zero where zero is meaningful
	def  float64    // the default when no source sets it (NaN: required)
	set  func(p *Partial, v float64)
	get  func(in Instrument) float64
}

var fields = []field{
	{"obscuration", [4]float64{0, 0.1, 0.2, 0.3}, 0,
		func(p *Partial, v float64) { p.Obscuration = Some(v) }, func(in Instrument) float64 { return in.Telescope.Obscuration }},
	{"outer_scale", [4]float64{0, 20, 30, 40}, 0,
		func(p *Partial, v float64) { p.OuterScale = Some(v) }, func(in Instrument) float64 { return in.OuterScale }},
	{"wavelength", [4]float64{600e-9, 620e-9, 640e-9, 660e-9}, math.NaN(),
		func(p *Partial, v float64) { p.Wavelength = Some(v) }, func(in Instrument) float64 { return in.Telescope.Wavelength }},
	{"diameter", [4]float64{0.5, 0.45, 0.4, 0.35}, math.NaN(),
		func(p *Partial, v float64) { p.Diameter = Some(v) }, func(in Instrument) float64 { return in.Telescope.Diameter }},
	{"pixel_scale", [4]float64{0.1 * arcsec, 0.09 * arcsec, 0.08 * arcsec, 0.07 * arcsec}, math.NaN(),
		func(p *Partial, v float64) { p.PixelScale = Some(v) }, func(in Instrument) float64 { return in.Telescope.PixelScale }},
	{"diversity", [4]float64{0, 1, 1.5, 2}, math.NaN(),
		func(p *Partial, v float64) { p.Diversity = Some([]float64{0, v}) }, func(in Instrument) float64 { return in.Diversity[1] }},
	{"patch", [4]float64{32, 48, 64, 96}, DefaultPatch,
		func(p *Partial, v float64) { p.Patch = Some(int(v)) }, func(in Instrument) float64 { return float64(in.Patch) }},
	{"modes", [4]float64{10, 20, 30, 44}, DefaultModes,
		func(p *Partial, v float64) { p.Modes = Some(int(v)) }, func(in Instrument) float64 { return float64(in.Modes) }},
	{"d_over_r0", [4]float64{3, 4, 6, 7}, DefaultDOverR0,
		func(p *Partial, v float64) { p.DOverR0 = Some(v) }, func(in Instrument) float64 { return in.DOverR0 }},
}

// TestResolvePrecedence checks, for every field and each of the 16
// combinations of sources that set it (explicit zeros included), that the
// value comes from the highest source setting it — flags, header, weights,
// site — and the default otherwise, and that Notes names that source.
// Planted: swapping header and weights in the order fails 36 cases.
func TestResolvePrecedence(t *testing.T) {
	srcs := [4]Source{FromFlags, FromHeader, FromWeights, FromSite}
	for _, f := range fields {
		for mask := 0; mask < 16; mask++ {
			var s Sources
			ps := [4]*Partial{&s.Flags, &s.Header, &s.Weights, &s.Site}
			s.Site = base()
			clearField(&s.Site, f.key)
			want, wantSrc := f.def, FromDefault
			for k := 3; k >= 0; k-- {
				if mask&(1<<k) != 0 {
					f.set(ps[k], f.vals[k])
					want, wantSrc = f.vals[k], srcs[k]
				}
			}
			in, notes, err := Resolve(s)
			if math.IsNaN(want) {
				if err == nil || !strings.Contains(err.Error(), strings.ReplaceAll(f.key, "_", " ")) {
					t.Errorf("%s unset everywhere: error %v, want one naming it", f.key, err)
				}
				continue
			}
			if err != nil {
				t.Errorf("%s mask %04b: %v", f.key, mask, err)
				continue
			}
			if got := f.get(in); math.Abs(got-want) > 1e-12*math.Abs(want) {
				t.Errorf("%s mask %04b: got %g, want %g", f.key, mask, got, want)
			}
			if notes[f.key] != wantSrc {
				t.Errorf("%s mask %04b: note %v, want %v", f.key, mask, notes[f.key], wantSrc)
			}
		}
	}
}

// clearField unsets the field key of p (so that base() does not set it).
func clearField(p *Partial, key string) {
	switch key {
	case "wavelength":
		p.Wavelength = Opt[float64]{}
		p.R0Wavelength = Opt[float64]{}
	case "diameter":
		p.Diameter = Opt[float64]{}
	case "pixel_scale":
		p.PixelScale = Opt[float64]{}
	case "diversity":
		p.Diversity = Opt[[]float64]{}
	case "d_over_r0":
		p.R0 = Opt[float64]{}
	}
}

// TestResolveR0 checks D/r0 from a site's r0 at 500 nm, rescaled as
// λ^(6/5) (Roddier 1981): r0(600 nm) = 0.08·1.2^1.2 = 0.099 m, D/r0 =
// 0.5/0.099 = 5.05; an explicit D/r0 in a lower source does not beat an r0
// in a higher one.
func TestResolveR0(t *testing.T) {
	in, notes, err := Resolve(Sources{Site: base()})
	if err != nil {
		t.Fatal(err)
	}
	want := 0.5 / (0.08 * math.Pow(1.2, 1.2))
	if math.Abs(in.DOverR0-want) > 1e-12 || notes["d_over_r0"] != FromSite {
		t.Errorf("D/r0 %g from %v, want %g from the site", in.DOverR0, notes["d_over_r0"], want)
	}
	in, notes, _ = Resolve(Sources{Site: base(), Weights: Partial{DOverR0: Some(9.0)}, Header: Partial{R0: Some(0.1)}})
	if math.Abs(in.DOverR0-5) > 1e-12 || notes["d_over_r0"] != FromHeader {
		t.Errorf("D/r0 %g from %v, want 5 from the header's r0 at its own λ", in.DOverR0, notes["d_over_r0"])
	}
}

// TestResolveRefuses checks invalid combinations are refused with the
// reason: sampling coarser than Nyquist, NaN, zero patch, unknown basis.
func TestResolveRefuses(t *testing.T) {
	for _, c := range []struct {
		name string
		flag Partial
		want string
	}{
		{"coarse pixels", Partial{PixelScale: Some(0.2 * arcsec)}, "Nyquist"},
		{"nan diversity", Partial{Diversity: Some([]float64{0, math.NaN()})}, "diversity"},
		{"zero patch", Partial{Patch: Some(0)}, "patch size 0"},
		{"too many modes", Partial{Modes: Some(100000)}, "modes"},
		{"unknown basis", Partial{Basis: Some(modes.Kind("bessel"))}, "bessel"},
		{"negative r0", Partial{R0: Some(-1.0)}, "r0"},
		{"no channels", Partial{Diversity: Some([]float64{})}, "channels"},
	} {
		_, _, err := Resolve(Sources{Flags: c.flag, Site: base()})
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: error %v, want one containing %q", c.name, err, c.want)
		}
	}
}

// TestCompatible checks the one weights check: equal values pass, an
// explicit zero obscuration against 0.15 fails, unset values pass.
func TestCompatible(t *testing.T) {
	in, _, err := Resolve(Sources{Site: base()})
	if err != nil {
		t.Fatal(err)
	}
	if err := Compatible(in.Partial(), in); err != nil {
		t.Errorf("an instrument against itself: %v", err)
	}
	if err := Compatible(Partial{}, in); err != nil {
		t.Errorf("empty weights metadata: %v", err)
	}
	w := in.Partial()
	w.Obscuration = Some(0.15)
	w.Wavelength = Some(500e-9)
	w.Modes = Some(20)
	err = Compatible(w, in)
	for _, s := range []string{"obscuration", "wavelength 500 nm", "20 modes"} {
		if err == nil || !strings.Contains(err.Error(), s) {
			t.Errorf("error %v, want it to name %q", err, s)
		}
	}
}
