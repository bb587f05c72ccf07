package restore

import (
	"fmt"
	"math"
	"path/filepath"
	"slices"
	"strings"

	"gonum.org/v1/gonum/stat"

	"pdwave/model/burst"
	"pdwave/model/fits"
)

// CalibFiles names the calibration files of each camera: index 0 is the
// camera of channel 1 (focused), index 1 that of channel 2; "" = none. The
// frames are in their camera's stored orientation (as the camera wrote
// them): calibration is applied before the camera geometry. Darks and
// flats are 2-D frames or 3-D stacks (averaged); a flat is dark-corrected.
// A bad-pixel map is a 2-D image, nonzero = bad.
type CalibFiles struct {
	Dark, Flat, Bad [2]string
	// NoFind turns off the search for hot and dead pixels in the dark and
	// flat of a camera without a bad-pixel map (FindBad).
	NoFind bool
}

// Empty reports whether no calibration file is named.
func (f CalibFiles) Empty() bool {
	return f.Dark == [2]string{} && f.Flat == [2]string{} && f.Bad == [2]string{}
}

// Paths returns the six file names in a fixed order (dark, flat, bad map
// of camera 1 then 2 each; "" where none), for digests.
func (f CalibFiles) Paths() []string {
	return []string{f.Dark[0], f.Dark[1], f.Flat[0], f.Flat[1], f.Bad[0], f.Bad[1]}
}

// Roles returns the named files with their role for provenance and
// identities: "dark", "flat", "bad" when both cameras share the file,
// else "dark1", "dark2", ... per camera.
func (f CalibFiles) Roles() []struct{ Role, Path string } {
	var out []struct{ Role, Path string }
	for _, k := range []struct {
		role  string
		paths [2]string
	}{{"dark", f.Dark}, {"flat", f.Flat}, {"bad", f.Bad}} {
		if k.paths[0] == k.paths[1] {
			if k.paths[0] != "" {
				out = append(out, struct{ Role, Path string }{k.role, k.paths[0]})
			}
			continue
		}
		for c, p := range k.paths {
			if p != "" {
				out = append(out, struct{ Role, Path string }{fmt.Sprintf("%s%d", k.role, c+1), p})
			}
		}
	}
	return out
}

// Settings returns the provenance entries of the files: "dark", "flat"
// and "bad_map", each "F" when both cameras share F, "F1,F2" per camera
// ("" for a camera without one; "" when neither has one).
func (f CalibFiles) Settings() map[string]string {
	join := func(p [2]string) string {
		if p[0] == p[1] {
			return p[0]
		}
		return p[0] + "," + p[1]
	}
	return map[string]string{"dark": join(f.Dark), "flat": join(f.Flat), "bad_map": join(f.Bad)}
}

// Detection thresholds of FindBad (common practice; the factors are ours):
// a hot pixel's dark lies more than HotSigma robust standard deviations
// above the dark's median, the robust standard deviation being 1.4826
// times the median absolute deviation (the consistency factor for a
// normal distribution; Rousseeuw & Croux 1993, JASA 88, 1273), at least
// MinDarkSigma counts (so that a dark quantised to a few ADU, whose MAD
// may be 0, does not flag every pixel one count above the median); a dead
// pixel's flat lies below DeadFraction of the flat's median.
const (
	HotSigma     = 5.0
	MinDarkSigma = 1.0 // counts
	DeadFraction = 0.5
)

// Camera is one camera's calibration: d ← (d − Dark)/Gain, then the pixels
// of Bad set undefined (the burst reader fills them, burst.FillUndefined).
type Camera struct {
	Nx, Ny int       // size of the calibration frames, px (0 = none)
	Dark   []float64 // Nx·Ny counts; nil = none
	Gain   []float64 // Nx·Ny, the flat over its mean; nil = none
	Bad    []bool    // Nx·Ny; nil = none
	// Hot and Dead count the pixels FindBad found; Mapped those of the
	// given bad-pixel map.
	Hot, Dead, Mapped int
}

// Calibrations are the calibrations of both cameras. It is a
// burst.Calibrator (Calibrate): give it as burst.Options.Calibrate.
type Calibrations struct {
	Cam   [2]Camera
	Files CalibFiles
}

// LoadCalibrations reads the files of f (ReadFrame), normalises the flats
// to mean 1, reads the bad-pixel maps or, without one, finds hot and dead
// pixels from the camera's dark and flat (FindBad, unless f.NoFind). It
// returns nil for no files. Errors, each one line naming the file: a
// file that does not read, a camera whose frames differ in size, a flat
// with non-positive mean, a bad-pixel map marking more than
// burst.MaxBadFraction of the pixels.
func LoadCalibrations(f CalibFiles) (*Calibrations, error) {
	if f.Empty() {
		return nil, nil
	}
	cal := &Calibrations{Files: f}
	for c := range cal.Cam {
		if err := cal.Cam[c].load(c, f); err != nil {
			return nil, err
		}
	}
	return cal, nil
}

// load reads camera c's files of f into k.
func (k *Camera) load(c int, f CalibFiles) error {
	var flat, bad []float64
	for _, s := range []struct {
		kind, path string
		dst        *[]float64
	}{{"dark", f.Dark[c], &k.Dark}, {"flat", f.Flat[c], &flat}, {"bad-pixel map", f.Bad[c], &bad}} {
		if s.path == "" {
			continue
		}
		d, nx, ny, err := ReadFrame(s.path)
		if err != nil {
			return fmt.Errorf("restore: camera %d %s: %w", c+1, s.kind, err)
		}
		if k.Nx != 0 && (nx != k.Nx || ny != k.Ny) {
			return fmt.Errorf("restore: camera %d: the %s %s is %d×%d but its other calibration frames %d×%d", c+1, s.kind, s.path, nx, ny, k.Nx, k.Ny)
		}
		k.Nx, k.Ny, *s.dst = nx, ny, d
	}
	if flat != nil {
		mean := stat.Mean(flat, nil)
		if !(mean > 0) {
			return fmt.Errorf("restore: camera %d flat %s has non-positive mean %g", c+1, f.Flat[c], mean)
		}
		k.Gain = make([]float64, len(flat))
		for i, v := range flat {
			k.Gain[i] = v / mean
		}
	}
	switch {
	case bad != nil:
		k.Bad = make([]bool, len(bad))
		for i, v := range bad {
			if v != 0 {
				k.Bad[i], k.Mapped = true, k.Mapped+1
			}
		}
	case !f.NoFind && (k.Dark != nil || flat != nil):
		k.Bad, k.Hot, k.Dead = FindBad(k.Dark, flat)
	}
	if n := k.Mapped + k.Hot + k.Dead; n > 0 && float64(n) > burst.MaxBadFraction*float64(k.Nx*k.Ny) {
		return fmt.Errorf("restore: camera %d: %d of its %d×%d pixels (%.1f %%) are bad (%d hot, %d dead, %d in the map), more than %g %%; check the dark, flat and bad-pixel map (%s)",
			c+1, n, k.Nx, k.Ny, 100*float64(n)/float64(k.Nx*k.Ny), k.Hot, k.Dead, k.Mapped, 100*burst.MaxBadFraction, strings.Join(nonEmpty(f.Dark[c], f.Flat[c], f.Bad[c]), ", "))
	}
	return nil
}

func nonEmpty(s ...string) []string {
	return slices.DeleteFunc(s, func(x string) bool { return x == "" })
}

// FindBad returns the bad-pixel mask of a camera from its dark and its
// dark-corrected flat (either may be nil, not both; equal lengths): hot
// pixels (dark > median + HotSigma·max(1.4826·MAD, MinDarkSigma)) and dead
// pixels (flat < DeadFraction·median(flat)), with their counts (a pixel
// both hot and dead counts as hot). The inputs are not modified.
func FindBad(dark, flat []float64) (bad []bool, hot, dead int) {
	n := max(len(dark), len(flat))
	bad = make([]bool, n)
	if dark != nil {
		med, mad := medianMAD(dark)
		lim := med + HotSigma*math.Max(1.4826*mad, MinDarkSigma)
		for i, v := range dark {
			if v > lim {
				bad[i], hot = true, hot+1
			}
		}
	}
	if flat != nil {
		med, _ := medianMAD(flat)
		for i, v := range flat {
			if v < DeadFraction*med && !bad[i] {
				bad[i], dead = true, dead+1
			}
		}
	}
	return bad, hot, dead
}

// medianMAD returns the median of v and the median absolute deviation
// from it (gonum stat.Quantile, empirical: for an even count the lower of
// the two middle values).
func medianMAD(v []float64) (med, mad float64) {
	s := slices.Clone(v)
	slices.Sort(s)
	med = stat.Quantile(0.5, stat.Empirical, s, nil)
	for i, x := range v {
		s[i] = math.Abs(x - med)
	}
	slices.Sort(s)
	return med, stat.Quantile(0.5, stat.Empirical, s, nil)
}

// Calibrate calibrates the frames of channel c (each nx×ny as stored) with
// camera c's calibration: (d − Dark)/Gain, and bad pixels set to NaN for
// the reader to fill (burst.Calibrator). It errors when the camera's
// frames are not nx×ny.
func (cal *Calibrations) Calibrate(c, nx, ny int, frames [][]float64) error {
	k := &cal.Cam[c]
	if k.Nx == 0 {
		return nil
	}
	if k.Nx != nx || k.Ny != ny {
		return fmt.Errorf("camera %d's calibration frames (%s) are %d×%d, the burst's frames %d×%d as stored",
			c+1, strings.Join(nonEmpty(cal.Files.Dark[c], cal.Files.Flat[c], cal.Files.Bad[c]), ", "), k.Nx, k.Ny, nx, ny)
	}
	for _, fr := range frames {
		for i := range fr {
			if k.Dark != nil {
				fr[i] -= k.Dark[i]
			}
			if k.Gain != nil && k.Gain[i] > 0 {
				fr[i] /= k.Gain[i]
			}
			if k.Bad != nil && k.Bad[i] {
				fr[i] = math.NaN()
			}
		}
	}
	return nil
}

// Note describes the calibration for the PDCALIB card: per camera the
// kinds of frames applied and the bad-pixel counts, e.g. "cam1 dark d1
// flat f1 bad 3; cam2 dark d2 flat f2 bad 0".
func (cal *Calibrations) Note() string {
	var parts []string
	f := cal.Files
	for c, k := range cal.Cam {
		if k.Nx == 0 {
			continue
		}
		s := fmt.Sprintf("cam%d", c+1)
		for _, p := range []struct{ kind, path string }{{"dark", f.Dark[c]}, {"flat", f.Flat[c]}, {"map", f.Bad[c]}} {
			if p.path != "" {
				s += " " + p.kind + " " + filepath.Base(p.path)
			}
		}
		parts = append(parts, fmt.Sprintf("%s bad %d", s, k.Hot+k.Dead+k.Mapped))
	}
	return strings.Join(parts, "; ")
}

// Cards returns the header cards of the bad-pixel counts: PDHOTk, PDDEADk
// and PDBMAPk for camera k = 1, 2.
func (cal *Calibrations) Cards() []fits.Card {
	var cards []fits.Card
	for c, k := range cal.Cam {
		n := fmt.Sprint(c + 1)
		cards = append(cards,
			fits.Card{Key: "PDHOT" + n, Value: k.Hot, Comment: "hot pixels found in camera " + n + "'s dark"},
			fits.Card{Key: "PDDEAD" + n, Value: k.Dead, Comment: "dead pixels found in camera " + n + "'s flat"},
			fits.Card{Key: "PDBMAP" + n, Value: k.Mapped, Comment: "bad pixels in camera " + n + "'s map"})
	}
	return cards
}

// BadSetting is the provenance entry of the bad-pixel counts.
func (cal *Calibrations) BadSetting() string {
	var parts []string
	for c, k := range cal.Cam {
		parts = append(parts, fmt.Sprintf("camera %d: %d hot, %d dead, %d mapped", c+1, k.Hot, k.Dead, k.Mapped))
	}
	return strings.Join(parts, "; ") + fmt.Sprintf(" (hot: dark > median + %g·max(1.4826·MAD, %g); dead: flat < %g·median)", HotSigma, MinDarkSigma, DeadFraction)
}
