package burst

import (
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"pdwave/model/fits"
	"pdwave/model/instrument"
)

// TestOpticsHeaderVariants reads the optics keywords in the forms a real
// header may give them. Expected values: FITS Standard 4.0 §4.2 (value
// forms), §4.3 Table 3–4 (unit strings and prefixes; "micron" and
// "angstrom" as astropy also reads them). Planted: reading an explicit
// OBSCUR = 0 as unset fails "explicit zeros"; a WAVEUNIT string refused
// fails the unit rows.
func TestOpticsHeaderVariants(t *testing.T) {
	dir := t.TempDir()
	s := instrument.Some[float64]
	var unset instrument.Opt[float64]
	cases := []struct {
		name  string
		cards []fits.Card
		want  Optics
		err   string
	}{
		{"nm exponent", []fits.Card{{Key: "WAVELNTH", Value: 600}, {Key: "WAVEUNIT", Value: -9}}, Optics{Wavelength: s(600e-9)}, ""},
		{"Angstrom exponent", []fits.Card{{Key: "WAVELNTH", Value: 6000.0}, {Key: "WAVEUNIT", Value: -10}}, Optics{Wavelength: s(600e-9)}, ""},
		{"unit nm", []fits.Card{{Key: "WAVELNTH", Value: 630.25}, {Key: "WAVEUNIT", Value: "nm"}}, Optics{Wavelength: s(630.25e-9)}, ""},
		{"unit Angstrom", []fits.Card{{Key: "WAVELNTH", Value: 6302.5}, {Key: "WAVEUNIT", Value: "Angstrom"}}, Optics{Wavelength: s(630.25e-9)}, ""},
		{"unit angstrom", []fits.Card{{Key: "WAVELNTH", Value: 6302.5}, {Key: "WAVEUNIT", Value: "angstrom"}}, Optics{Wavelength: s(630.25e-9)}, ""},
		{"unit um", []fits.Card{{Key: "WAVELNTH", Value: 1.5648}, {Key: "WAVEUNIT", Value: "um"}}, Optics{Wavelength: s(1.5648e-6)}, ""},
		{"unit micron", []fits.Card{{Key: "WAVELNTH", Value: 1.5648}, {Key: "WAVEUNIT", Value: "micron"}}, Optics{Wavelength: s(1.5648e-6)}, ""},
		{"unit m", []fits.Card{{Key: "WAVELNTH", Value: 5.25e-7}, {Key: "WAVEUNIT", Value: "m"}}, Optics{Wavelength: s(5.25e-7)}, ""},
		{"unknown unit", []fits.Card{{Key: "WAVELNTH", Value: 600}, {Key: "WAVEUNIT", Value: "furlong"}}, Optics{}, "WAVEUNIT = 'furlong'"},
		{"explicit zeros", []fits.Card{{Key: "OBSCUR", Value: 0.0}, {Key: "DIVPV", Value: 0}}, Optics{Obscuration: s(0), DiversityPV: s(0)}, ""},
		{"absent", nil, Optics{Obscuration: unset}, ""},
		{"string where a number belongs", []fits.Card{{Key: "TELDIAM", Value: "1.5"}}, Optics{}, "TELDIAM"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			p := filepath.Join(dir, strings.ReplaceAll(c.name, " ", "_")+".fits")
			if err := fits.WriteFile(p, &fits.Image{Dims: []int{2, 2, 1, 2}, Data: make([]float64, 8), Cards: c.cards}); err != nil {
				t.Fatal(err)
			}
			b, err := Read(p)
			if c.err != "" {
				if err == nil || !strings.Contains(err.Error(), c.err) {
					t.Fatalf("error %v, want mention of %q", err, c.err)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			got := b.Optics
			for _, f := range [][2]instrument.Opt[float64]{{got.Wavelength, c.want.Wavelength}, {got.Obscuration, c.want.Obscuration}, {got.DiversityPV, c.want.DiversityPV}} {
				if f[0].Set != f[1].Set || math.Abs(f[0].V-f[1].V) > 1e-15*math.Abs(f[1].V) {
					t.Errorf("optics %+v, want %+v", got, c.want)
				}
			}
		})
	}
}

// TestRawHeaderForms reads optics and keeps notes from header cards in
// forms WriteFile never writes: D and lower-case exponents, signed
// integers, a repeated keyword (the first counts, as astropy's
// Header[key]), an invalid DATE-OBS and WCS cards of the wrong type. The
// invalid cards are dropped with a note and never copied: the burst
// written from the read one passes fitsverify. Planted: carrying the bad
// DATE-OBS fails the fitsverify check and the dropped-card check.
func TestRawHeaderForms(t *testing.T) {
	cards := []string{
		"SIMPLE  =                    T", "BITPIX  =                  -32", "NAXIS   =                    4",
		"NAXIS1  =                    2", "NAXIS2  =                    2", "NAXIS3  =                    1", "NAXIS4  =                    2",
		"WAVELNTH=               6.3D+2 / D exponent",
		"WAVEUNIT=                   -9",
		"TELDIAM =                 1e+0 / lower-case exponent",
		"DIVPV   =                   +1 / signed integer",
		"OBSCUR  =                 0.10",
		"OBSCUR  =                 0.30 / repeated: the first counts",
		"DATE-OBS= '12/05/2024'         / not ISO-8601",
		"CRPIX1  = 'centre'             / WCS value of the wrong type",
		"CTYPE7  = 'WAVE'               / WCS axis beyond the fourth",
		"TELESCOP= 'demo'",
		"END",
	}
	var hdr strings.Builder
	for _, c := range cards {
		hdr.WriteString(c + strings.Repeat(" ", 80-len(c)))
	}
	for hdr.Len()%blockSize != 0 {
		hdr.WriteByte(' ')
	}
	data := append([]byte(hdr.String()), make([]byte, blockSize)...)
	dir := t.TempDir()
	in := filepath.Join(dir, "raw.fits")
	if err := os.WriteFile(in, data, 0o644); err != nil {
		t.Fatal(err)
	}
	b, err := Read(in)
	if err != nil {
		t.Fatal(err)
	}
	o := b.Optics
	if !relClose(o.Wavelength.V, 630e-9, 1e-15) || o.Diameter.V != 1 || o.DiversityPV.V != 1 || o.Obscuration.V != 0.1 {
		t.Errorf("optics %+v", o)
	}
	notes := strings.Join(b.Notes, "\n")
	for _, want := range []string{"TELDIAM", "lower-case", "OBSCUR given more than once", "DATE-OBS", "ISO-8601", "CRPIX1", "CTYPE7"} {
		if !strings.Contains(notes, want) {
			t.Errorf("notes do not mention %q:\n%s", want, notes)
		}
	}
	for _, c := range b.Cards {
		if c.Key == "DATE-OBS" || c.Key == "CRPIX1" || c.Key == "CTYPE7" {
			t.Errorf("invalid card %s = %v carried", c.Key, c.Value)
		}
	}
	if v, _ := cardValue(b.Cards, "TELESCOP"); v != "demo" {
		t.Errorf("TELESCOP = %v, want demo carried", v)
	}
	out := filepath.Join(dir, "out.fits")
	if err := Write(out, b, nil); err != nil {
		t.Fatal(err)
	}
	const tool = "/usr/bin/fitsverify"
	needTool(t, tool)
	res, err := exec.Command(tool, "-q", out).CombinedOutput()
	if err != nil || !strings.Contains(string(res), "verification OK") || strings.Contains(string(res), "warning") {
		full, _ := exec.Command(tool, out).CombinedOutput()
		t.Errorf("fitsverify: %v\n%s", err, full)
	}
}
