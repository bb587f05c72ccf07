package infer

import (
	"fmt"
	"strings"
)

// StudyReference is the reference case of the study grid: D/r0 = 5,
// 64 px, 16 frames, 1 wave of defocus.
var StudyReference = StudyCase{DOverR0: 5, Patch: 64, Frames: 16, DiversityPV: 1}

// StudyScanNames lists the scans of StudyGrid in order: "ref" (the
// reference case alone) and the one-at-a-time scans around it.
var StudyScanNames = []string{"ref", "d-over-r0", "patch", "frames", "diversity"}

// studyScan returns the cases of one scan around StudyReference, without
// the reference itself, or false for an unknown name.
func studyScan(name string) ([]StudyCase, bool) {
	ref := StudyReference
	var cases []StudyCase
	switch name {
	case "ref":
	case "d-over-r0":
		for _, v := range []float64{2, 3, 7, 10} {
			c := ref
			c.DOverR0 = v
			cases = append(cases, c)
		}
	case "patch":
		for _, v := range []int{48, 96, 128} {
			c := ref
			c.Patch = v
			cases = append(cases, c)
		}
	case "frames":
		for _, v := range []int{4, 8, 32} {
			c := ref
			c.Frames = v
			cases = append(cases, c)
		}
	case "diversity":
		for _, v := range []float64{0.5, 1.5, 2} {
			c := ref
			c.DiversityPV = v
			cases = append(cases, c)
		}
	default:
		return nil, false
	}
	return cases, true
}

// StudyGrid returns the default study cases: one-at-a-time scans around
// the reference case (D/r0 = 5, 64 px, 16 frames, 1 wave): D/r0 2…10,
// patch 48…128, frames 4…32, diversity 0.5…2 waves; the reference first,
// 14 cases in all.
func StudyGrid() []StudyCase {
	cases, _ := StudyScans(StudyScanNames)
	return cases
}

// StudyScans returns the reference case followed by the cases of the named
// scans (StudyScanNames; "all" for every scan) in the order given. It
// errors for an unknown or repeated name.
func StudyScans(names []string) ([]StudyCase, error) {
	cases := []StudyCase{StudyReference}
	seen := make(map[string]bool)
	for _, n := range names {
		n = strings.TrimSpace(n)
		if n == "all" {
			if len(names) != 1 {
				return nil, fmt.Errorf("study cases: \"all\" must stand alone, got %q", strings.Join(names, ","))
			}
			return StudyGrid(), nil
		}
		if seen[n] {
			return nil, fmt.Errorf("study cases: scan %q listed twice", n)
		}
		seen[n] = true
		sc, ok := studyScan(n)
		if !ok {
			return nil, fmt.Errorf("study cases: unknown scan %q, want all or a list of %s", n, strings.Join(StudyScanNames, ", "))
		}
		cases = append(cases, sc...)
	}
	return cases, nil
}
