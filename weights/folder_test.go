package weights_test

import (
	"fmt"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"pdwave/infer"
	"pdwave/model/burst"
	"pdwave/model/net"
	"pdwave/weights"
)

// TestFolderAccuracy scores a weights file on a folder of simulated bursts
// that carry their truth (pdwave simulate writes it as the TRUTH
// extension), run only with PDWAVE_EVAL_DIR=DIR; PDWAVE_EVAL_WEIGHTS=FILE
// chooses the weights (default: the built-in ones). It prints the median
// error (infer.ResidualFraction, Noll 2–10 and 2–21) per scene image (from
// each burst's SIMSCENE card) and over all bursts. This is how the model
// card's before/after figures for training on observations are measured.
func TestFolderAccuracy(t *testing.T) {
	dir := os.Getenv("PDWAVE_EVAL_DIR")
	if dir == "" {
		t.Skip("set PDWAVE_EVAL_DIR to score weights on a folder of simulated bursts")
	}
	m, err := weights.Default()
	if p := os.Getenv("PDWAVE_EVAL_WEIGHTS"); p != "" {
		m, err = net.Load(p)
	}
	if err != nil {
		t.Fatal(err)
	}
	est, err := net.NewEstimator(m)
	if err != nil {
		t.Fatal(err)
	}
	files, err := filepath.Glob(filepath.Join(dir, "*.fits"))
	if err != nil || len(files) == 0 {
		t.Fatalf("no bursts in %s (%v)", dir, err)
	}
	per := map[string][2][]float64{}
	for _, f := range files {
		b, err := burst.Read(f)
		if err != nil {
			t.Fatal(err)
		}
		if b.Truth == nil {
			t.Fatalf("%s: no TRUTH extension", f)
		}
		_, noll, err := est.Burst([2][][]float64{b.Data[0], b.Data[1]})
		if err != nil {
			t.Fatalf("%s: %v", f, err)
		}
		scene := sceneOf(b)
		for _, g := range []string{scene, "all"} {
			e := per[g]
			for k, jmax := range []int{10, 21} {
				v, err := infer.ResidualFraction(noll, b.Truth.Noll, jmax)
				if err != nil {
					t.Fatal(err)
				}
				e[k] = append(e[k], v)
			}
			per[g] = e
		}
	}
	keys := make([]string, 0, len(per))
	for k := range per {
		keys = append(keys, k)
	}
	slices.Sort(keys)
	for _, g := range keys {
		e := per[g]
		fmt.Printf("EVAL %-12s bursts %3d  median error Noll 2–10 %.3f  2–21 %.3f\n", g, len(e[0]), median(e[0]), median(e[1]))
	}
}

// sceneOf returns the scene image of a simulated burst from its SIMSCENE
// card ("real:camera.fits @…" → "camera"), else "granulation" or "?".
func sceneOf(b *burst.Burst) string {
	for _, c := range b.Cards {
		if c.Key != "SIMSCENE" {
			continue
		}
		s, _ := c.Value.(string)
		if name, ok := strings.CutPrefix(s, "real:"); ok {
			name, _, _ = strings.Cut(name, " ")
			return strings.TrimSuffix(name, ".fits")
		}
		name, _, _ := strings.Cut(s, " ")
		return name
	}
	return "?"
}
