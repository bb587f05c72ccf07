// Package site reads the site/telescope YAML file that describes a
// telescope, its seeing, its camera and the working sizes (README "Site
// file").
//
// The file has four sections and an optional fifth (geometry); units are in the names and every field is
// documented on the struct below. Unknown fields are errors (a typo must
// not silently fall back to a default). Missing optional fields take the
// defaults stated on each field. Example (testdata/demo-site.yaml):
//
//	telescope:
//	  name: demo
//	  diameter_m: 0.5
//	  obscuration: 0.15
//	  focal_ratio: 40
//	  wavelength_nm: 600
//	  pixel_scale_arcsec: 0.12
//	  diversity_pv_waves: 1.0     # or focus_shift_mm, not both
//	seeing:
//	  r0_500nm_m: 0.08
//	  r0_spread: 1.3
//	  outer_scale_m: 30
//	  layers:
//	    - {height_m: 0, weight: 1, wind_m_s: 5, wind_dir_deg: 30}
//	camera: {frame_interval_s: 0.005, photons_per_pixel: 10000, read_noise_e: 5, bit_depth: 16}
//	sizes: {patch: 64, frames: 16, modes: 36, basis: kl}
//	geometry:                    # optional: how each camera stores its image
//	  focused: {}                # channel 1 as stored: the reference
//	  defocused: {flip_x: true, rotate_deg: 90, offset_x_px: 0.4, offset_y_px: -1.2, magnification: 1.002}
package site

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"os"

	"gopkg.in/yaml.v3"

	"pdwave/model/burst"
	"pdwave/model/instrument"
	"pdwave/model/modes"
	"pdwave/model/optics"
)

// Site is a parsed and validated site file. Field values are in the units
// of the YAML file; the methods convert to SI.
type Site struct {
	Tel    TelescopeSpec `yaml:"telescope"` // optics
	Seeing Seeing        `yaml:"seeing"`    // r0 distribution, outer scale, layers
	Camera Camera        `yaml:"camera"`    // frame rate, photons, noise
	Sizes  Sizes         `yaml:"sizes"`     // patch, frames, modes, basis
	// Geometry is how the cameras store their images; optional (absent:
	// both channels as stored, registered).
	Geometry GeometrySpec `yaml:"geometry"`
}

// GeometrySpec is the "geometry" section: for each camera, the steps that
// turn its stored image into the common orientation (applied in the order
// transpose, rotate_deg, flip_x, flip_y, as the image appears with pixel
// (1, 1) at the bottom left); for the defocused camera also the known
// registration to the focused one, after its orientation. It is applied
// when a burst is read (burst.Geometry).
type GeometrySpec struct {
	// Focused is channel 1's camera. Default: as stored.
	Focused CameraOrientation `yaml:"focused"`
	// Defocused is channel 2's camera. Default: as stored, registered.
	Defocused DefocusedCamera `yaml:"defocused"`
}

// CameraOrientation turns one camera's image (see GeometrySpec).
type CameraOrientation struct {
	// Transpose exchanges x and y. Default false.
	Transpose bool `yaml:"transpose"`
	// RotateDeg turns the image counter-clockwise, degrees: a multiple of
	// 90 (negative turns clockwise). Default 0.
	RotateDeg float64 `yaml:"rotate_deg"`
	// FlipX mirrors the image left–right. Default false.
	FlipX bool `yaml:"flip_x"`
	// FlipY mirrors the image top–bottom. Default false.
	FlipY bool `yaml:"flip_y"`
}

// DefocusedCamera is the defocused camera: its orientation and its
// registration to the focused camera after orientation (a scene point at
// p in channel 1 lies at c + magnification·(p − c) + offset in channel 2,
// c the frame centre).
type DefocusedCamera struct {
	CameraOrientation `yaml:",inline"`
	// OffsetXPx, OffsetYPx are the displacement of channel 2's image,
	// pixels, finite, within ±256. Default 0.
	OffsetXPx float64 `yaml:"offset_x_px"`
	OffsetYPx float64 `yaml:"offset_y_px"`
	// Magnification is channel 2's image scale relative to channel 1's,
	// 0.9 to 1.1. Default 1.
	Magnification *float64 `yaml:"magnification"`
}

// TelescopeSpec is the "telescope" section.
type TelescopeSpec struct {
	// Name is free text for reports. Optional.
	Name string `yaml:"name"`
	// DiameterM is the aperture diameter D, m. Required, > 0.
	DiameterM float64 `yaml:"diameter_m"`
	// Obscuration is the central obscuration, fraction of D, in [0, 1).
	// Default 0.
	Obscuration float64 `yaml:"obscuration"`
	// Spiders is the number of spider vanes. Default 0 (none).
	Spiders int `yaml:"spiders"`
	// SpiderWidthM is the width of each vane, m; required (> 0) if there
	// are spiders. Default 0.
	SpiderWidthM float64 `yaml:"spider_width_m"`
	// FocalRatio is the focal ratio F# at the camera. Default 0 (unknown);
	// required (> 0) with FocusShiftMM.
	FocalRatio float64 `yaml:"focal_ratio"`
	// WavelengthNM is the observing wavelength λ, nm. Required, > 0.
	WavelengthNM float64 `yaml:"wavelength_nm"`
	// PixelScaleArcsec is the image pixel scale, arcsec per pixel.
	// Required, > 0, and at most λ/(2D) (Nyquist).
	PixelScaleArcsec float64 `yaml:"pixel_scale_arcsec"`
	// DiversityPVWaves is the defocus of the diversity channel,
	// peak-to-valley waves. Give this or FocusShiftMM, not both; non-zero.
	DiversityPVWaves *float64 `yaml:"diversity_pv_waves"`
	// FocusShiftMM is the longitudinal focus shift of the diversity
	// channel, mm (needs FocalRatio); converted with Δz/(8 λ F#²).
	FocusShiftMM *float64 `yaml:"focus_shift_mm"`
}

// Seeing is the "seeing" section.
type Seeing struct {
	// R0MedianM is the median Fried parameter r0 at 500 nm, m (the r0 of
	// all layers together, along the line of sight). Required, > 0.
	R0MedianM float64 `yaml:"r0_500nm_m"`
	// R0Spread is the geometric standard deviation of the log-normal r0
	// distribution: ln r0 has standard deviation ln(R0Spread). >= 1;
	// default 1 (r0 always the median).
	R0Spread float64 `yaml:"r0_spread"`
	// OuterScaleM is the von Kármán outer scale L0, m; 0 means Kolmogorov
	// (infinite L0). Default 0.
	OuterScaleM float64 `yaml:"outer_scale_m"`
	// Layers are the turbulent layers; at least one is required. Weights
	// are fractions of the turbulence (of r0^(−5/3)) and must sum to 1
	// within 2 % (they are then normalised exactly).
	Layers []Layer `yaml:"layers"`
}

// Layer is one turbulent layer.
type Layer struct {
	// HeightM is the height above the telescope along the line of sight,
	// m, >= 0.
	HeightM float64 `yaml:"height_m"`
	// Weight is the layer's fraction of the turbulence, > 0.
	Weight float64 `yaml:"weight"`
	// WindMS is the wind speed, m/s, >= 0. Default 0.
	WindMS float64 `yaml:"wind_m_s"`
	// WindDirDeg is the direction the layer moves towards, degrees from
	// the image +x axis towards +y. Default 0.
	WindDirDeg float64 `yaml:"wind_dir_deg"`
}

// WindDirection returns the wind direction in radians (from +x towards +y).
func (l Layer) WindDirection() float64 { return l.WindDirDeg * math.Pi / 180 }

// Camera is the "camera" section.
type Camera struct {
	// FrameIntervalS is the time between frames of a burst, s. Required, > 0.
	FrameIntervalS float64 `yaml:"frame_interval_s"`
	// PhotonsPerPixel is the mean number of photo-electrons per pixel and
	// frame in each channel; 0 means noiseless. Default 0.
	PhotonsPerPixel float64 `yaml:"photons_per_pixel"`
	// ReadNoiseE is the read noise, electrons rms, >= 0. Default 0.
	ReadNoiseE float64 `yaml:"read_noise_e"`
	// BitDepth is the ADC bit depth, 0 (no quantisation) to 32. Default 0.
	BitDepth int `yaml:"bit_depth"`
	// GainEPerADU is the gain, electrons per ADU, >= 0; 0 means automatic
	// (chosen by the simulator). Default 0.
	GainEPerADU float64 `yaml:"gain_e_per_adu"`
}

// Sizes is the "sizes" section.
type Sizes struct {
	// Patch is the patch (and pupil grid) side N, pixels, 8..4096.
	// Default 64.
	Patch int `yaml:"patch"`
	// Frames is the number of frames per burst, 1..10000. Default 16.
	Frames int `yaml:"frames"`
	// Modes is the number of wavefront modes, piston excluded, 1..1000.
	// Default 36.
	Modes int `yaml:"modes"`
	// Basis is "zernike" or "kl". Default "kl".
	Basis modes.Kind `yaml:"basis"`
}

// defaults returns a Site holding the defaults of the optional fields;
// decoding the YAML over it keeps them where fields are missing.
func defaults() *Site {
	return &Site{
		Seeing: Seeing{R0Spread: 1},
		Sizes:  Sizes{Patch: 64, Frames: 16, Modes: 36, Basis: modes.KindKL},
	}
}

// Load reads and validates a site file.
func Load(path string) (*Site, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("reading site file: %w", err)
	}
	s, err := Parse(data)
	if err != nil {
		return nil, fmt.Errorf("reading site file %s: %w", path, err)
	}
	return s, nil
}

// Parse decodes and validates a site file held in memory. Unknown fields,
// wrong types, a second YAML document and every failed check of Validate
// are errors; Parse never panics.
func Parse(data []byte) (s *Site, err error) {
	defer func() {
		if r := recover(); r != nil {
			s, err = nil, fmt.Errorf("malformed YAML: %v", r)
		}
	}()
	if err := checkIntegers(data); err != nil {
		return nil, err
	}
	s = defaults()
	dec := yaml.NewDecoder(bytes.NewReader(data))
	dec.KnownFields(true)
	if err := dec.Decode(s); err != nil {
		if errors.Is(err, io.EOF) {
			return nil, errors.New("the site file is empty")
		}
		return nil, err
	}
	var extra any
	if err := dec.Decode(&extra); !errors.Is(err, io.EOF) {
		return nil, errors.New("the site file holds more than one YAML document")
	}
	if err := s.Validate(); err != nil {
		return nil, err
	}
	return s, nil
}

// intFields are the integer fields, by section.
var intFields = map[string]map[string]bool{
	"telescope": {"spiders": true},
	"camera":    {"bit_depth": true},
	"sizes":     {"patch": true, "frames": true, "modes": true},
}

// checkIntegers rejects non-integral values of integer fields: yaml.v3
// silently truncates "patch: 64.5" to 64 when decoding into an int.
func checkIntegers(data []byte) error {
	var doc yaml.Node
	if err := yaml.Unmarshal(data, &doc); err != nil {
		return err
	}
	if doc.Kind != yaml.DocumentNode || len(doc.Content) == 0 || doc.Content[0].Kind != yaml.MappingNode {
		return nil // Decode reports the structural error
	}
	root := doc.Content[0]
	for i := 0; i+1 < len(root.Content); i += 2 {
		fields, sec := intFields[root.Content[i].Value], root.Content[i+1]
		if fields == nil || sec.Kind != yaml.MappingNode {
			continue
		}
		for j := 0; j+1 < len(sec.Content); j += 2 {
			k, v := sec.Content[j], sec.Content[j+1]
			if fields[k.Value] && v.Kind == yaml.ScalarNode && v.ShortTag() != "!!int" {
				return fmt.Errorf("line %d: %s.%s must be an integer, got %q", v.Line, root.Content[i].Value, k.Value, v.Value)
			}
		}
	}
	return nil
}

// finite reports whether v is neither NaN nor infinite.
func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// Validate checks every field (ranges above), normalises the layer
// weights, and checks the sampling of the patch (pixel scale at most
// λ/(2D)). Errors name the field as written in the YAML file.
func (s *Site) Validate() error {
	if err := s.Tel.validateOptics(); err != nil {
		return err
	}
	if err := s.Tel.validateDiversity(); err != nil {
		return err
	}
	if err := s.Seeing.validate(); err != nil {
		return err
	}
	if err := s.Camera.validate(); err != nil {
		return err
	}
	if err := s.Sizes.validate(); err != nil {
		return err
	}
	if err := s.Geometry.validate(); err != nil {
		return err
	}
	tel := s.Telescope()
	if err := tel.Validate(); err != nil {
		return err
	}
	if err := tel.CheckSampling(s.Sizes.Patch); err != nil {
		return fmt.Errorf("telescope.pixel_scale_arcsec: %w", err)
	}
	return nil
}

// positive returns an error naming the field unless v is a finite
// number > 0.
func positive(name string, v float64) error {
	if !(v > 0) || !finite(v) {
		return fmt.Errorf("%s: must be a positive number, got %g", name, v)
	}
	return nil
}

// nonNegative returns an error naming the field unless v is a finite
// number ≥ 0.
func nonNegative(name string, v float64) error {
	if !(v >= 0) || !finite(v) {
		return fmt.Errorf("%s: must be a number >= 0, got %g", name, v)
	}
	return nil
}

// validateOptics checks the telescope's sizes: positive diameter,
// wavelength (10 nm – 1 mm) and pixel scale, an obscuration in [0, 1),
// spiders narrower than the aperture, a focal ratio ≥ 0.
func (t *TelescopeSpec) validateOptics() error {
	for _, e := range []error{
		positive("telescope.diameter_m", t.DiameterM),
		positive("telescope.wavelength_nm", t.WavelengthNM),
		positive("telescope.pixel_scale_arcsec", t.PixelScaleArcsec),
		nonNegative("telescope.spider_width_m", t.SpiderWidthM),
		nonNegative("telescope.focal_ratio", t.FocalRatio),
	} {
		if e != nil {
			return e
		}
	}
	if !(t.Obscuration >= 0 && t.Obscuration < 1) {
		return fmt.Errorf("telescope.obscuration: must be a fraction of the diameter in [0, 1), got %g", t.Obscuration)
	}
	if t.Spiders < 0 {
		return fmt.Errorf("telescope.spiders: must be >= 0, got %d", t.Spiders)
	}
	if t.Spiders > 0 && !(t.SpiderWidthM > 0 && t.SpiderWidthM < t.DiameterM) {
		return fmt.Errorf("telescope.spider_width_m: with %d spiders it must be in (0, diameter_m = %g), got %g", t.Spiders, t.DiameterM, t.SpiderWidthM)
	}
	if t.WavelengthNM < 10 || t.WavelengthNM > 1e6 {
		return fmt.Errorf("telescope.wavelength_nm: %g nm is not an optical wavelength (10 nm – 1 mm)", t.WavelengthNM)
	}
	return nil
}

// validateDiversity checks that exactly one of diversity_pv_waves and
// focus_shift_mm is given, non-zero and finite, and that a focus shift
// comes with the focal ratio needed to convert it to waves.
func (t *TelescopeSpec) validateDiversity() error {
	switch {
	case t.DiversityPVWaves != nil && t.FocusShiftMM != nil:
		return errors.New("telescope: give diversity_pv_waves or focus_shift_mm, not both")
	case t.DiversityPVWaves == nil && t.FocusShiftMM == nil:
		return errors.New("telescope: the diversity is missing; give diversity_pv_waves or focus_shift_mm")
	case t.DiversityPVWaves != nil:
		if v := *t.DiversityPVWaves; v == 0 || !finite(v) {
			return fmt.Errorf("telescope.diversity_pv_waves: must be a non-zero number, got %g", v)
		}
	default:
		if v := *t.FocusShiftMM; v == 0 || !finite(v) {
			return fmt.Errorf("telescope.focus_shift_mm: must be a non-zero number, got %g", v)
		}
		if !(t.FocalRatio > 0) {
			return errors.New("telescope.focal_ratio: required (> 0) to convert focus_shift_mm to waves")
		}
	}
	return nil
}

// validate checks the seeing (positive median r0, spread factor ≥ 1,
// outer scale ≥ 0, at least one layer with finite height, weight, wind
// speed and direction, weights summing to 1 within 0.02) and rescales the
// layer weights to sum to exactly 1.
func (se *Seeing) validate() error {
	if err := positive("seeing.r0_500nm_m", se.R0MedianM); err != nil {
		return err
	}
	if !(se.R0Spread >= 1) || !finite(se.R0Spread) {
		return fmt.Errorf("seeing.r0_spread: the log-normal spread factor must be >= 1 (1 = fixed r0), got %g", se.R0Spread)
	}
	if err := nonNegative("seeing.outer_scale_m", se.OuterScaleM); err != nil {
		return fmt.Errorf("%w (0 = Kolmogorov)", err)
	}
	if len(se.Layers) == 0 {
		return errors.New("seeing.layers: at least one layer is required")
	}
	sum := 0.0
	for i, l := range se.Layers {
		if err := l.validate(fmt.Sprintf("seeing.layers[%d]", i)); err != nil {
			return err
		}
		sum += l.Weight
	}
	if math.Abs(sum-1) > 0.02 {
		return fmt.Errorf("seeing.layers: the weights are fractions of the turbulence and must sum to 1, they sum to %g", sum)
	}
	for i := range se.Layers {
		se.Layers[i].Weight /= sum
	}
	return nil
}

// validate checks one layer, named name in messages: height and wind
// speed ≥ 0, weight > 0, a finite wind direction.
func (l Layer) validate(name string) error {
	if err := nonNegative(name+".height_m", l.HeightM); err != nil {
		return err
	}
	if err := positive(name+".weight", l.Weight); err != nil {
		return err
	}
	if err := nonNegative(name+".wind_m_s", l.WindMS); err != nil {
		return err
	}
	if !finite(l.WindDirDeg) {
		return fmt.Errorf("%s.wind_dir_deg: must be a finite number, got %g", name, l.WindDirDeg)
	}
	return nil
}

// validate checks the camera: positive frame interval, photons, read
// noise and gain ≥ 0, bit depth 0 to 32.
func (c *Camera) validate() error {
	if err := positive("camera.frame_interval_s", c.FrameIntervalS); err != nil {
		return err
	}
	if err := nonNegative("camera.photons_per_pixel", c.PhotonsPerPixel); err != nil {
		return fmt.Errorf("%w (0 = noiseless)", err)
	}
	if err := nonNegative("camera.read_noise_e", c.ReadNoiseE); err != nil {
		return err
	}
	if c.BitDepth < 0 || c.BitDepth > 32 {
		return fmt.Errorf("camera.bit_depth: must be 0 (no quantisation) to 32, got %d", c.BitDepth)
	}
	if err := nonNegative("camera.gain_e_per_adu", c.GainEPerADU); err != nil {
		return fmt.Errorf("%w (0 = automatic)", err)
	}
	return nil
}

// validate checks the working sizes (patch 8 to 4096 px, 1 to 10000
// frames, 1 to 1000 modes) and replaces the basis name by its canonical
// kind.
func (z *Sizes) validate() error {
	if z.Patch < 8 || z.Patch > 4096 {
		return fmt.Errorf("sizes.patch: must be 8 to 4096 pixels, got %d", z.Patch)
	}
	if z.Frames < 1 || z.Frames > 10000 {
		return fmt.Errorf("sizes.frames: must be 1 to 10000, got %d", z.Frames)
	}
	if z.Modes < 1 || z.Modes > 1000 {
		return fmt.Errorf("sizes.modes: must be 1 to 1000, got %d", z.Modes)
	}
	k, err := modes.ParseKind(string(z.Basis))
	if err != nil {
		return fmt.Errorf("sizes.basis: %q is not a basis; use zernike or kl", string(z.Basis))
	}
	z.Basis = k
	return nil
}

// validate checks the geometry: rotations finite multiples of 90°
// (within ±3600°), offsets finite within ±burst.MaxGeomOffset px, a
// magnification in [burst.MinMagnification, burst.MaxMagnification].
func (g *GeometrySpec) validate() error {
	for _, c := range []struct {
		name string
		o    CameraOrientation
	}{{"geometry.focused", g.Focused}, {"geometry.defocused", g.Defocused.CameraOrientation}} {
		if r := c.o.RotateDeg; !finite(r) || math.Abs(r) > 3600 || math.Mod(r, 90) != 0 {
			return fmt.Errorf("%s.rotate_deg: must be a multiple of 90 (counter-clockwise, degrees), got %g", c.name, r)
		}
	}
	for _, c := range []struct {
		name string
		v    float64
	}{{"offset_x_px", g.Defocused.OffsetXPx}, {"offset_y_px", g.Defocused.OffsetYPx}} {
		if !finite(c.v) || math.Abs(c.v) > burst.MaxGeomOffset {
			return fmt.Errorf("geometry.defocused.%s: must be a finite number of pixels within ±%g, got %g", c.name, burst.MaxGeomOffset, c.v)
		}
	}
	if m := g.Defocused.Magnification; m != nil && !(*m >= burst.MinMagnification && *m <= burst.MaxMagnification) {
		return fmt.Errorf("geometry.defocused.magnification: must be %g to %g (channel 2's image scale relative to channel 1's), got %g", burst.MinMagnification, burst.MaxMagnification, *m)
	}
	return nil
}

// CameraGeometry returns the geometry section as the burst reader applies
// it (burst.Options.Geometry); the zero Geometry when the section is
// absent.
func (s *Site) CameraGeometry() burst.Geometry {
	o := func(c CameraOrientation) burst.Orientation {
		return burst.Orientation{Transpose: c.Transpose, RotateDeg: int(c.RotateDeg), FlipX: c.FlipX, FlipY: c.FlipY}
	}
	d := s.Geometry.Defocused
	g := burst.Geometry{Channel: [2]burst.Orientation{o(s.Geometry.Focused), o(d.CameraOrientation)},
		OffsetX: d.OffsetXPx, OffsetY: d.OffsetYPx}
	if d.Magnification != nil {
		g.Magnification = *d.Magnification
	}
	return g
}

// arcsec is one arcsecond in radians.
const arcsec = math.Pi / (180 * 3600)

// Telescope returns the telescope in SI units (wavelength m, pixel scale
// rad per pixel).
func (s *Site) Telescope() optics.Telescope {
	t := s.Tel
	return optics.Telescope{
		Diameter:    t.DiameterM,
		Obscuration: t.Obscuration,
		Spiders:     t.Spiders,
		SpiderWidth: t.SpiderWidthM,
		FocalRatio:  t.FocalRatio,
		Wavelength:  t.WavelengthNM * 1e-9,
		PixelScale:  t.PixelScaleArcsec * arcsec,
	}
}

// DiversityPV returns the defocus of the diversity channel, peak-to-valley
// waves: diversity_pv_waves, or focus_shift_mm converted with
// Δz/(8 λ F#²) (the peak-to-valley defocus of a longitudinal focus shift
// Δz is Δz·NA²/2 = Δz/(8 F#²) with NA = 1/(2 F#); from memory). It
// returns 0 if neither is set (only possible for a Site that was not
// validated).
func (s *Site) DiversityPV() float64 {
	t := s.Tel
	switch {
	case t.DiversityPVWaves != nil:
		return *t.DiversityPVWaves
	case t.FocusShiftMM != nil:
		return optics.FocusShiftPV(*t.FocusShiftMM*1e-3, t.WavelengthNM*1e-9, t.FocalRatio)
	}
	return 0
}

// Optics returns the optics a burst file would carry, in SI units, as
// defaults for burst.Optics.Fill.
func (s *Site) Optics() burst.Optics {
	t := s.Telescope()
	return burst.Optics{
		Wavelength:  instrument.Some(t.Wavelength),
		PixelScale:  instrument.Some(t.PixelScale),
		Diameter:    instrument.Some(t.Diameter),
		Obscuration: instrument.Some(t.Obscuration),
		DiversityPV: instrument.Some(s.DiversityPV()),
	}
}

// R0Median returns the median Fried parameter at the observing wavelength,
// m: r0(λ) = r0(500 nm)·(λ/500 nm)^(6/5), from r0 = (0.423 k² ∫Cn² dh)^(−3/5)
// with k = 2π/λ (Fried 1966, JOSA 56, 1372; Roddier 1981, Progress in
// Optics 19, 281).
func (s *Site) R0Median() float64 {
	return s.Seeing.R0MedianM * math.Pow(s.Tel.WavelengthNM/500, 6.0/5)
}

// MedianR0 is R0Median (the name in the package contract).
func (s *Site) MedianR0() float64 { return s.R0Median() }

// DrawR0 draws r0 at the observing wavelength, m, from the log-normal
// distribution of the seeing section: ln r0 ~ N(ln R0Median(),
// ln(r0_spread)²). With r0_spread = 1 it returns R0Median() and does not
// use rng. Deterministic for a given rng state.
func (s *Site) DrawR0(rng *rand.Rand) float64 {
	m := s.R0Median()
	if s.Seeing.R0Spread <= 1 {
		return m
	}
	return m * math.Exp(math.Log(s.Seeing.R0Spread)*rng.NormFloat64())
}

// OuterScale returns the outer scale L0, m, with +Inf for Kolmogorov
// turbulence (outer_scale_m = 0).
func (s *Site) OuterScale() float64 {
	if s.Seeing.OuterScaleM == 0 {
		return math.Inf(1)
	}
	return s.Seeing.OuterScaleM
}

// Instrument returns what the site file says about the instrument, in SI
// units, for instrument.Resolve: the telescope, the two channels (0 and the
// diversity), the sizes, the median r0 at the site's wavelength (R0Median,
// so that D/r0 resolved at that wavelength is D/R0Median exactly) and the
// outer scale (an explicit 0 for Kolmogorov). Sizes the file omits carry
// the documented defaults of Sizes.
func (s *Site) Instrument() instrument.Partial {
	p := instrument.TelescopeOf(s.Telescope())
	p.Site = instrument.Some(s.Tel.Name)
	p.Diversity = instrument.Some([]float64{0, s.DiversityPV()})
	p.Patch = instrument.Some(s.Sizes.Patch)
	p.Modes = instrument.Some(s.Sizes.Modes)
	p.Basis = instrument.Some(s.Sizes.Basis)
	p.R0 = instrument.Some(s.R0Median())
	p.R0Wavelength = p.Wavelength
	p.OuterScale = instrument.Some(s.Seeing.OuterScaleM)
	return p
}
