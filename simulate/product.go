package simulate

import (
	"fmt"
	"math"

	"pdwave/model/fits"
)

// ScreenHDUs lays out the phase-screen file of one burst for
// fits.WriteFile: one image LAYERi per layer (N×N, rad at the observing
// wavelength; cards BUNIT, SCRPIX = pixel size in m, LAYERH = height in m,
// LAYERW = share of r0^(−5/3), LAYERR0 = the layer's r0 in m, WINDV in m/s,
// WINDDIR in degrees from +x towards +y; the first image also carries
// prov), then, for a patch simulated with KeepPhases, the image PHASE
// (N×N×frames wavefront on the pupil grid, rad; cards BUNIT, SCRPIX = pupil
// grid pixel in m, PUPRAD = pupil radius in pixels). sim must be the
// simulator that made r. The images share r's slices except PHASE, which is
// a new N·N·frames slice.
func (r *Result) ScreenHDUs(sim *Simulator, prov []fits.Card) []fits.HDU {
	atm := r.Atmosphere
	var hdus []fits.HDU
	for i, s := range atm.Screens {
		l := atm.Layers[i]
		cards := []fits.Card{
			{Key: "BUNIT", Value: "rad", Comment: "phase at the observing wavelength"},
			{Key: "SCRPIX", Value: s.Dx, Comment: "screen pixel size, m"},
			{Key: "LAYERH", Value: l.Height, Comment: "layer height, m"},
			{Key: "LAYERW", Value: l.Weight, Comment: "share of r0^(-5/3)"},
			{Key: "LAYERR0", Value: LayerR0(r.R0, l.Weight), Comment: "layer r0, m"},
			{Key: "WINDV", Value: l.Speed, Comment: "wind speed, m/s"},
			{Key: "WINDDIR", Value: l.Direction * 180 / math.Pi, Comment: "wind direction, deg from +x towards +y"},
		}
		if i == 0 {
			cards = append(cards, prov...)
		}
		hdus = append(hdus, &fits.Image{Name: fmt.Sprintf("LAYER%d", i+1), Dims: []int{s.N, s.N}, Data: s.Data, Cards: cards})
	}
	if r.Phases != nil {
		n := sim.Config().Patch
		data := make([]float64, 0, n*n*len(r.Phases))
		for _, p := range r.Phases {
			data = append(data, p...)
		}
		hdus = append(hdus, &fits.Image{Name: "PHASE", Dims: []int{n, n, len(r.Phases)}, Data: data, Cards: []fits.Card{
			{Key: "BUNIT", Value: "rad", Comment: "wavefront on the pupil grid per frame"},
			{Key: "SCRPIX", Value: sim.PupilPixel(), Comment: "pupil grid pixel size, m"},
			{Key: "PUPRAD", Value: sim.Pupil().Radius, Comment: "pupil radius, pixels; centre (N/2, N/2)"},
		}})
	}
	return hdus
}

// ScreenParamsFor returns the parameters of a single n×n phase screen for
// the simulation cfg: pixel size dx in m (0 = the pupil-grid pixel of cfg,
// which needs a valid cfg), r0 in m at the observing wavelength (0 = cfg's
// median), cfg's outer scale, and with subharmonics the levels LevelsFor
// chooses. It errors if cfg is needed and invalid.
func ScreenParamsFor(cfg Config, n int, dx, r0 float64, subharmonics bool) (ScreenParams, error) {
	p := ScreenParams{N: n, Dx: dx, R0: r0, L0: cfg.Turbulence.L0, Subharmonics: subharmonics}
	if p.R0 == 0 {
		p.R0 = cfg.Turbulence.R0
	}
	if p.Dx == 0 {
		sim, err := New(cfg)
		if err != nil {
			return p, err
		}
		p.Dx = sim.PupilPixel()
	}
	if p.Subharmonics {
		p.Levels = LevelsFor(p.N, p.Dx, p.L0)
	}
	return p, nil
}

// OuterScale returns the outer scale L0 in m as written to files: 0 for
// Kolmogorov turbulence (L0 ≤ 0 or +Inf).
func (p ScreenParams) OuterScale() float64 {
	if math.IsInf(p.L0, 0) || p.L0 < 0 {
		return 0
	}
	return p.L0
}

// ScreenImage returns the primary image of a single-screen file: s.Data
// (N×N, rad at the observing wavelength, shared) with the cards BUNIT,
// SCRPIX = pixel size in m, SCRR0 = r0 in m, SCRL0 = outer scale in m (0 =
// Kolmogorov), SCRLEV = subharmonic levels (0 = none), then prov.
func ScreenImage(s *Screen, p ScreenParams, prov []fits.Card) *fits.Image {
	cards := []fits.Card{
		{Key: "BUNIT", Value: "rad", Comment: "phase at the observing wavelength"},
		{Key: "SCRPIX", Value: p.Dx, Comment: "screen pixel size, m"},
		{Key: "SCRR0", Value: p.R0, Comment: "Fried parameter r0, m"},
		{Key: "SCRL0", Value: p.OuterScale(), Comment: "outer scale L0, m (0 = Kolmogorov)"},
		{Key: "SCRLEV", Value: p.Levels, Comment: "subharmonic levels (0 = none)"},
	}
	return &fits.Image{Dims: []int{p.N, p.N}, Data: s.Data, Cards: append(cards, prov...)}
}
