package restore

import (
	"errors"
	"math"
	"slices"
	"strings"
	"testing"
)

// TestCoregOrigins: the offset patches are disjoint, inside the field and
// spread from edge to edge, at most three per axis (values worked out by
// hand).
func TestCoregOrigins(t *testing.T) {
	for _, c := range []struct {
		n, patch int
		want     []int
	}{
		{192, 96, []int{0, 96}},
		{192, 64, []int{0, 64, 128}},
		{1024, 96, []int{0, 464, 928}},
		{100, 96, []int{2}},
		{96, 96, []int{0}},
		{64, 96, nil},
	} {
		got := CoregOrigins(c.n, c.patch)
		if !slices.Equal(got, c.want) {
			t.Errorf("CoregOrigins(%d, %d) = %v, want %v", c.n, c.patch, got, c.want)
		}
		for i, o := range got {
			if o < 0 || o+c.patch > c.n || (i > 0 && o < got[i-1]+c.patch) {
				t.Errorf("CoregOrigins(%d, %d) = %v: patch %d outside the field or overlapping", c.n, c.patch, got, i)
			}
		}
	}
	if CoregPatch(64) != 96 {
		t.Errorf("CoregPatch(64) = %d, want 96", CoregPatch(64))
	}
}

// TestCoregSummarise: the median is taken per axis over the patches that
// did not fail (midpoint for an even count), the spread is the median
// absolute deviation, and all patches failing is an error that names them.
func TestCoregSummarise(t *testing.T) {
	offs := []Offset{{0.1, -0.4}, {9, 9}, {0.3, -0.2}, {0.2, -0.5}, {0.6, -0.3}}
	bad := errors.New("patch at (1, 2): no signal")
	errs := []error{nil, bad, nil, nil, nil}
	c, err := coregSummarise(offs, errs, 0)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("%+v", c)
	// x: 0.1 0.2 0.3 0.6 → 0.25; y: −0.5 −0.4 −0.3 −0.2 → −0.35. Deviations
	// x: 0.15 0.05 0.05 0.35 → 0.1; y: 0.15 0.05 0.05 0.15 → 0.1.
	if math.Abs(c.DX-0.25) > 1e-12 || math.Abs(c.DY+0.35) > 1e-12 {
		t.Errorf("median (%g, %g), want (0.25, -0.35)", c.DX, c.DY)
	}
	if math.Abs(c.Spread.DX-0.1) > 1e-12 || math.Abs(c.Spread.DY-0.1) > 1e-12 {
		t.Errorf("spread (%g, %g), want (0.1, 0.1)", c.Spread.DX, c.Spread.DY)
	}
	if len(c.Patches) != 4 || c.Method != "fit median of 4 patches (1 failed)" {
		t.Errorf("%d patches, method %q", len(c.Patches), c.Method)
	}
	_, err = coregSummarise(offs[:2], []error{bad, bad}, 0)
	if err == nil || !strings.Contains(err.Error(), "all 2 patches") || !strings.Contains(err.Error(), "no signal") {
		t.Errorf("all patches failed: error %v", err)
	}
}

// TestPrepareCoreg: a given offset is used and removed as given, and the
// offset fit refuses a configuration for another frame count.
func TestPrepareCoreg(t *testing.T) {
	const nx, frames = 128, 4
	sc := makeScene(t, nx, frames, 3, 0, 0, 3)
	before := append([]float64(nil), sc.burst.Data[1][0]...)
	fixed := Offset{0.5, -0.25}
	f, c, err := Prepare(sc.burst, nil, &Coreg{Fixed: &fixed}, true, 0)
	if err != nil {
		t.Fatal(err)
	}
	if c.Offset != fixed || c.Method != "given" {
		t.Errorf("given offset came back as %+v", c)
	}
	got := meanShift(t, [][]float64{before}, fieldFrames(f.Data[1][:1]), nx)
	t.Logf("given offset (%.2f, %.2f): defocused frame moved by (%.3f, %.3f)", fixed.DX, fixed.DY, got.DX, got.DY)
	// 0.02 px as in TestRestoreField.
	if math.Abs(got.DX+fixed.DX) > 0.02 || math.Abs(got.DY+fixed.DY) > 0.02 {
		t.Errorf("defocused frame moved by (%.3f, %.3f), want (%.2f, %.2f)", got.DX, got.DY, -fixed.DX, -fixed.DY)
	}
	cfg := testPhysics(t, frames+1, Method{Name: "fit"}).Config
	if _, _, err := Prepare(sc.burst, nil, &Coreg{Fit: &cfg}, true, 0); err == nil || !strings.Contains(err.Error(), "configured for 5 frames, the burst has 4") {
		t.Errorf("offset fit with a %d-frame configuration on %d frames: error %v", frames+1, frames, err)
	}
}
