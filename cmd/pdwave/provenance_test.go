package main

import (
	"crypto/sha256"
	"encoding/hex"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"pdwave/internal/provenance"
	"pdwave/model/burst"
	"pdwave/model/fits"
)

// TestOutputProvenance: fit and predict record, in the FITS header
// (HISTORY) and the CSV ("# key: value"), the command line as a shell
// reads it back and the SHA-256 of the burst, the site and the weights
// (computed here with crypto/sha256 from the files; FIPS 180-4); predict
// carries the burst's cards into its primary header as fit does; neither
// keeps the burst's "COMMENT Axes: x, y, frame, channel" on its 2-D or
// table output. Planted: predict without the burst's cards, and fit
// without the provenance settings, each fail.
func TestOutputProvenance(t *testing.T) {
	repo, _ := filepath.Abs(filepath.Join("..", ".."))
	site := filepath.Join(repo, "testdata", "demo-site.yaml")
	dir := t.TempDir()
	p := func(n string) string { return filepath.Join(dir, n) }
	if code, _, stderr := runCLI(t, repo, "simulate", "--site", site, "--out", p("in"), "--bursts", "1", "--frames", "3", "--seed", "4"); code != 0 {
		t.Fatal(stderr)
	}
	in := p("in/burst-0001.fits")
	sum := func(path string) string {
		data, err := os.ReadFile(path)
		if err != nil {
			t.Fatal(err)
		}
		h := sha256.Sum256(data)
		return hex.EncodeToString(h[:])
	}
	fitArgs := []string{"fit", in, "--site", site, "--iterations", "3", "--out", p("fit out.fits")}
	if code, _, stderr := runCLI(t, repo, fitArgs...); code != 0 {
		t.Fatal(stderr)
	}
	predArgs := []string{"predict", in, "--out", p("pred.fits")}
	if code, _, stderr := runCLI(t, repo, predArgs...); code != 0 {
		t.Fatal(stderr)
	}
	b, err := burst.ReadRef(in, burst.Options{})
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []struct {
		out  string
		args []string
		want map[string]string
	}{
		{"fit out.fits", fitArgs, map[string]string{"sha256 burst": sum(in), "sha256 site": sum(site)}},
		{"pred.fits", predArgs, map[string]string{"sha256 burst": sum(in), "sha256 weights": ""}},
	} {
		c.want["command line"] = provenance.CommandLine(append([]string{"pdwave"}, c.args...))
		f, err := fits.Open(p(c.out), fits.Limits{})
		if err != nil {
			t.Fatal(err)
		}
		h := f.HDUs[0].Header
		var hist strings.Builder
		for _, card := range h.Cards {
			if card.Key == "HISTORY" {
				hist.WriteString(card.Comment)
			}
			if card.Key == "COMMENT" && strings.HasPrefix(card.Comment, "Axes:") {
				t.Errorf("%s keeps the burst's %q", c.out, card.Comment)
			}
		}
		csv, err := os.ReadFile(p(strings.TrimSuffix(c.out, ".fits") + ".csv"))
		if err != nil {
			t.Fatal(err)
		}
		for k, v := range c.want {
			if !strings.Contains(hist.String(), "pdwave: "+k+" = "+v) {
				t.Errorf("%s: HISTORY lacks %q = %q:\n%s", c.out, k, v, hist.String())
			}
			if !strings.Contains(string(csv), "# "+k+": "+v) {
				t.Errorf("%s: the CSV lacks %q = %q", c.out, k, v)
			}
		}
		for _, card := range burst.CutoutCards(b.Cards, 0, 0) {
			if _, ok := h.Get(card.Key); !ok && !fits.IsCommentary(card.Key) {
				t.Errorf("%s lacks the burst's card %s", c.out, card.Key)
			}
		}
	}
}
