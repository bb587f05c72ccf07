package train

import (
	"crypto/sha256"
	"encoding/binary"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"

	"pdwave/model/site"
	"pdwave/simulate"
)

// Scene choices of simulated training data (Job.Scenes, SimData.Scenes).
const (
	// ScenesMix draws each burst's object from simulate.SceneMix: synthetic
	// granulation or a window of a real image (random image, flip, quarter
	// turn and position), with probability one half each.
	ScenesMix = "mix"
	// ScenesGranulation draws synthetic granulation only
	// (simulate.GranulationScene with the default parameters).
	ScenesGranulation = "granulation"
	// ScenesReal draws windows of the real images only (simulate.ImageScene).
	ScenesReal = "real"
)

// Defaults of the variety of simulated training bursts (Job). They are
// choices, not measurements:
//
//   - DefaultR0Margin: ln r0 is drawn with 1.25× the site's standard
//     deviation, so that the seeing of the site's tails (about ±2σ) is
//     inside the bulk of the training data rather than at its edge.
//   - DefaultPhotons: the photon level per burst is the camera's times a
//     factor drawn log-uniformly in 0.5–2 (one octave either way: haze,
//     elevation, exposure settings), so the network sees noise levels it
//     was not configured for.
//   - DefaultContrast: the diffraction-limited rms contrast of the scene
//     is drawn uniformly in 0.08–0.16, around the 10–15 % of the
//     photospheric continuum (common practice; the simulator's fixed
//     default is 0.12) with a margin either side.
var (
	DefaultR0Margin = 1.25
	DefaultPhotons  = [2]float64{0.5, 2}
	DefaultContrast = [2]float64{0.08, 0.16}
)

// SimData records how simulated training bursts vary. It is part of the
// run's Config, so a resumed run draws the same data stream, and of the
// weights' training record. The zero value is what runs made before these
// settings drew: granulation, r0 from the site's distribution, the
// camera's photon level, the simulator's default contrast.
type SimData struct {
	Scenes   string     // ScenesMix, ScenesGranulation or ScenesReal; "" = granulation (runs from before the setting)
	Images   []string   // the real images drawn from, "name sha256:<first 12 hex digits of the pixel values' hash>", in folder order; nil for granulation
	R0Margin float64    // ln r0 is drawn with this factor × the site's standard deviation ln(r0_spread); 0 or 1 = the site's distribution
	Photons  [2]float64 // range of factors on the camera's photons per pixel, drawn log-uniformly per burst; zero = the camera's level
	Contrast [2]float64 // range of the scene's diffraction-limited rms contrast, drawn uniformly per burst; zero = the simulator's default (0.12)
}

// validate checks the choice and the ranges.
func (d SimData) validate() error {
	switch d.Scenes {
	case "", ScenesMix, ScenesGranulation, ScenesReal:
	default:
		return fmt.Errorf("train: scenes %q: want %s, %s or %s", d.Scenes, ScenesMix, ScenesGranulation, ScenesReal)
	}
	if !(d.R0Margin >= 0) || math.IsInf(d.R0Margin, 0) || d.R0Margin > 4 {
		return fmt.Errorf("train: r0 margin %g: want a factor in [0, 4] on the site's spread (0 = 1)", d.R0Margin)
	}
	if p := d.Photons; p != [2]float64{} && !(p[0] > 0 && p[1] >= p[0] && p[1] < 1e3) {
		return fmt.Errorf("train: photon level range ×%g–×%g: want 0 < low ≤ high < 1000", p[0], p[1])
	}
	if c := d.Contrast; c != [2]float64{} && !(c[0] > 0 && c[1] >= c[0] && c[1] < 1) {
		return fmt.Errorf("train: contrast range %g–%g: want 0 < low ≤ high < 1", c[0], c[1])
	}
	return nil
}

// scene returns the scene source of d (nil for granulation: the
// simulator's default). For real or mixed scenes it reads
// the FITS images of dir ("" = simulate.FindSceneDir()) and returns their
// identities (name and hash) to record; when d.Images is already set (a
// resumed run), the folder must hold exactly those images.
func (d SimData) scene(dir string) (simulate.Scene, []string, error) {
	if d.Scenes == "" || d.Scenes == ScenesGranulation {
		return nil, nil, nil // the simulator's default granulation
	}
	if dir == "" {
		var err error
		if dir, err = simulate.FindSceneDir(); err != nil {
			return nil, nil, fmt.Errorf("train: %s scenes need the real scene images: %w; or train on granulation only (scenes %q)", d.Scenes, err, ScenesGranulation)
		}
	}
	images, err := simulate.LoadSceneDir(dir)
	if err != nil {
		return nil, nil, fmt.Errorf("train: %s scenes: %w", d.Scenes, err)
	}
	ids := imageIDs(images)
	if d.Images != nil && !slices.Equal(ids, d.Images) {
		return nil, nil, fmt.Errorf("train: the scene folder %s holds %s; the run was trained on %s", dir, strings.Join(ids, ", "), strings.Join(d.Images, ", "))
	}
	if d.Scenes == ScenesReal {
		return images, ids, nil
	}
	return simulate.SceneMix(simulate.GranulationParams{}, images), ids, nil
}

// imageIDs names each image of s with a hash of its size and pixel values.
func imageIDs(s *simulate.ImageScene) []string {
	ids := make([]string, len(s.Images))
	var b [8]byte
	for i, im := range s.Images {
		h := sha256.New()
		binary.LittleEndian.PutUint64(b[:], uint64(im.Nx)<<32|uint64(im.Ny))
		h.Write(b[:])
		for _, v := range im.Data {
			binary.LittleEndian.PutUint64(b[:], math.Float64bits(v))
			h.Write(b[:])
		}
		ids[i] = fmt.Sprintf("%s sha256:%x", im.Name, h.Sum(nil)[:6])
	}
	return ids
}

// r0Draw returns the r0 distribution of training bursts for the site: the
// site's own (site.Site.DrawR0) for a margin of 0 or 1, else log-normal
// with the site's median and ln r0 of standard deviation margin·ln(r0_spread).
func (d SimData) r0Draw(st *site.Site) func(*rand.Rand) float64 {
	if d.R0Margin == 0 || d.R0Margin == 1 {
		return st.DrawR0
	}
	return LogNormalR0(st.R0Median(), math.Pow(st.Seeing.R0Spread, d.R0Margin))
}

// describe returns the training-record entries of d for the site and
// camera photons (e⁻ per pixel).
func (d SimData) describe(st *site.Site, photons float64) map[string]string {
	out := map[string]string{}
	switch d.Scenes {
	case "", ScenesGranulation:
		out["scenes"] = "granulation (simulate.GranulationScene, default parameters)"
	case ScenesReal:
		out["scenes"] = "real: windows of " + strings.Join(d.Images, ", ") + " (random image, position, flip and quarter turn)"
	case ScenesMix:
		out["scenes"] = "mix: granulation 0.5, real 0.5: windows of " + strings.Join(d.Images, ", ") + " (random image, position, flip and quarter turn)"
	}
	m := d.R0Margin
	if m == 0 {
		m = 1
	}
	out["r0_draw"] = fmt.Sprintf("log-normal, median %.4g m at the observing wavelength, sd of ln r0 = %.3g × ln(%g) = %.4g",
		st.R0Median(), m, st.Seeing.R0Spread, m*math.Log(st.Seeing.R0Spread))
	if p := d.Photons; p != [2]float64{} {
		out["photons"] = fmt.Sprintf("log-uniform ×%g–×%g of %g e-/px (%.0f–%.0f e-/px)", p[0], p[1], photons, p[0]*photons, p[1]*photons)
	} else {
		out["photons"] = fmt.Sprintf("the camera's %g e-/px", photons)
	}
	if c := d.Contrast; c != [2]float64{} {
		out["contrast"] = fmt.Sprintf("uniform %g–%g rms at the diffraction limit", c[0], c[1])
	} else {
		out["contrast"] = "0.12 rms at the diffraction limit (the simulator's default)"
	}
	return out
}

// SceneGroup returns the group of a scene description (simulate.Result.Scene):
// "granulation", "real" for windows of real images ("real:…"), the text
// before the first colon otherwise, "" for none.
func SceneGroup(scene string) string {
	g, _, _ := strings.Cut(scene, ":")
	return g
}
