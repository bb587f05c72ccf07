package net

import (
	"bytes"
	"encoding/binary"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"pdwave/internal/atomicfile"
	"pdwave/model/instrument"
	"pdwave/model/modes"
	"pdwave/model/optics"
)

// demoMeta is the invented demo telescope of the contract (0.5 m, 600 nm,
// 0.120 arcsec pixels, 1 wave PV diversity).
func demoMeta() Meta {
	return Meta{
		Site: "demo", Basis: "kl", Patch: 64, Frames: 16,
		Diameter: 0.5, Obscuration: 0.15, Wavelength: 600e-9,
		PixelScale: 0.120 * math.Pi / 180 / 3600, DiversityPV: 1,
		Training: map[string]string{"steps": "10", "seed": "1"}, Version: "test",
	}
}

func TestWeightsRoundTrip(t *testing.T) {
	scale := make([]float64, 21)
	for i := range scale {
		scale[i] = 1 / float64(i+1)
	}
	m, err := New(DefaultArch(21), demoMeta(), scale, 5)
	if err != nil {
		t.Fatal(err)
	}
	path := filepath.Join(t.TempDir(), "w.safetensors")
	if err := m.Save(path); err != nil {
		t.Fatal(err)
	}
	got, err := Load(path)
	if err != nil {
		t.Fatal(err)
	}
	if got.NumParams() != m.NumParams() || len(got.Params) != len(m.Params) {
		t.Fatalf("read %d tensors (%d weights), wrote %d (%d)", len(got.Params), got.NumParams(), len(m.Params), m.NumParams())
	}
	for i, p := range m.Params {
		for k, v := range p.Data {
			if got.Params[i].Data[k] != v {
				t.Fatalf("%s[%d]: read %v, wrote %v", p.Name, k, got.Params[i].Data[k], v)
			}
		}
	}
	for k, v := range m.Scale {
		if got.Scale[k] != v {
			t.Fatalf("scale[%d]: read %v, wrote %v", k, got.Scale[k], v)
		}
	}
	gm, wm := got.Meta, m.Meta
	if gm.Site != wm.Site || gm.Basis != wm.Basis || gm.Modes != 21 || gm.Patch != 64 || gm.Frames != 16 ||
		gm.Diameter != wm.Diameter || gm.Obscuration != wm.Obscuration || gm.Wavelength != wm.Wavelength ||
		gm.PixelScale != wm.PixelScale || gm.DiversityPV != wm.DiversityPV || gm.Version != "test" ||
		gm.Training["steps"] != "10" {
		t.Fatalf("metadata read back as %+v, wrote %+v", gm, wm)
	}
	if err := instrument.Compatible(got.Meta.Instrument(), metaInstrument(wm)); err != nil {
		t.Fatalf("weights refuse their own optics: %v", err)
	}
	// The layout: 8-byte little-endian header length, JSON header with
	// __metadata__, data 8-byte aligned, file length = header + data.
	var b bytes.Buffer
	if err := m.Write(&b); err != nil {
		t.Fatal(err)
	}
	raw := b.Bytes()
	hl := binary.LittleEndian.Uint64(raw)
	if (8+hl)%8 != 0 || !bytes.Contains(raw[8:8+hl], []byte(`"__metadata__"`)) {
		t.Fatalf("header of length %d is not an aligned safetensors header", hl)
	}
	if want := 8 + int(hl) + 8*(m.NumParams()+len(m.Scale)); len(raw) != want {
		t.Fatalf("file has %d bytes, want %d", len(raw), want)
	}
	// Truncated or damaged files are errors, not panics.
	for _, n := range []int{0, 7, 8, 100, len(raw) - 1} {
		if _, err := Decode(raw[:n]); err == nil {
			t.Errorf("truncated to %d bytes: no error", n)
		}
	}
}

// metaInstrument is the instrument the metadata describe (every field
// taken as given; unknown ones zero).
func metaInstrument(md Meta) instrument.Instrument {
	return instrument.Instrument{
		Telescope: optics.Telescope{Diameter: md.Diameter, Obscuration: md.Obscuration, Wavelength: md.Wavelength, PixelScale: md.PixelScale},
		Diversity: []float64{0, md.DiversityPV}, Patch: md.Patch, Modes: md.Modes, Basis: modes.Kind(md.Basis),
	}
}

// TestWeightsRefuseForeignOptics checks the metadata reach the one
// compatibility check (instrument.Compatible) with every value they know.
func TestWeightsRefuseForeignOptics(t *testing.T) {
	m := demoMeta()
	other := demoMeta()
	other.Wavelength = 500e-9
	other.Diameter = 1.0
	err := instrument.Compatible(m.Instrument(), metaInstrument(other))
	if err == nil {
		t.Fatal("weights for 600 nm, 0.5 m accepted for 500 nm, 1 m")
	}
	for _, s := range []string{"wavelength 600 nm", "500 nm", "aperture diameter 0.5 m", "1 m", "demo"} {
		if !strings.Contains(err.Error(), s) {
			t.Errorf("message %q does not say %q", err, s)
		}
	}
	other = demoMeta()
	other.Patch = 128
	other.Basis = "zernike"
	if err := instrument.Compatible(m.Instrument(), metaInstrument(other)); err == nil || !strings.Contains(err.Error(), "patch size 64 px, the data has 128 px") || !strings.Contains(err.Error(), "zernike") {
		t.Errorf("foreign patch/basis: %v", err)
	}
	// Header values rounded to 4 digits still match.
	other = demoMeta()
	other.Wavelength, other.PixelScale = 600.0001e-9, m.PixelScale*(1+1e-5)
	if err := instrument.Compatible(m.Instrument(), metaInstrument(other)); err != nil {
		t.Errorf("rounded optics refused: %v", err)
	}
}

// TestSaveModeAndNoLeftovers checks a saved weight file is readable by
// others (mode 0644 under the umask, internal/atomicfile.Mode) and that
// saving leaves no temporary beside it. Planted: the former writer
// (os.CreateTemp, no chmod) left 0600 files and failed.
func TestSaveModeAndNoLeftovers(t *testing.T) {
	scale := make([]float64, 21)
	for i := range scale {
		scale[i] = 1
	}
	m, err := New(DefaultArch(21), demoMeta(), scale, 5)
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	path := filepath.Join(dir, "w.safetensors")
	for range 2 { // a new file, then a replacement
		if err := m.Save(path); err != nil {
			t.Fatal(err)
		}
	}
	st, err := os.Stat(path)
	if err != nil {
		t.Fatal(err)
	}
	if st.Mode().Perm() != atomicfile.Mode() {
		t.Errorf("mode %v, want %v", st.Mode().Perm(), atomicfile.Mode())
	}
	if ents, _ := os.ReadDir(dir); len(ents) != 1 {
		t.Errorf("%d files in the folder, want the weights alone", len(ents))
	}
}
