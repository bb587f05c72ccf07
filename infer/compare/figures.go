package compare

import (
	"bytes"
	"fmt"
	"image"
	"image/color"
	"math"
	"slices"
	"sort"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/palette"
	"gonum.org/v1/plot/palette/moreland"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
)

// Figure is one rendered PNG figure of a report.
type Figure struct {
	Name    string // file name, e.g. "coefficients.png"
	Title   string // heading shown above it
	Caption string // how to read it
	PNG     []byte // encoded image
}

// seriesColor gives every series a fixed colour across figures, from the
// colour-blind-safe palette of Okabe & Ito (2008, "Color Universal
// Design"): black, orange, sky blue, bluish green, grey.
func seriesColor(s string) color.Color {
	switch s {
	case Truth:
		return color.RGBA{A: 255}
	case Learned:
		return color.RGBA{R: 0xE6, G: 0x9F, B: 0x00, A: 255}
	case Polished:
		return color.RGBA{R: 0x56, G: 0xB4, B: 0xE9, A: 255}
	case Fitted:
		return color.RGBA{R: 0x00, G: 0x9E, B: 0x73, A: 255}
	case "raw":
		return color.RGBA{R: 140, G: 140, B: 140, A: 255}
	}
	return color.RGBA{R: 0xCC, G: 0x79, B: 0xA7, A: 255} // reddish purple
}

// seriesDashes gives every series its own line style, so that curves
// stay distinguishable without colour and where they overlap: fitted
// solid, learned long dashes, polished dots, truth dash-dot, raw solid.
func seriesDashes(s string) []vg.Length {
	p := vg.Points
	switch s {
	case Learned:
		return []vg.Length{p(6), p(3)}
	case Polished:
		return []vg.Length{p(1.5), p(2)}
	case Truth:
		return []vg.Length{p(6), p(2), p(1.5), p(2)}
	}
	return nil
}

// seriesGlyph gives every series its own marker shape.
func seriesGlyph(s string) draw.GlyphDrawer {
	switch s {
	case Learned:
		return draw.TriangleGlyph{}
	case Polished:
		return draw.SquareGlyph{}
	case Truth:
		return draw.CrossGlyph{}
	}
	return draw.CircleGlyph{}
}

func renderPlot(p *plot.Plot, w, h vg.Length) ([]byte, error) {
	wt, err := p.WriterTo(w, h, "png")
	if err != nil {
		return nil, err
	}
	var buf bytes.Buffer
	if _, err := wt.WriteTo(&buf); err != nil {
		return nil, err
	}
	return buf.Bytes(), nil
}

// Figures renders every figure the report has data for, in page order. The
// report must be summarised (Summarise).
func Figures(r *Report) ([]Figure, error) {
	var figs []Figure
	type maker struct {
		name, title, caption string
		fn                   func(*Report) ([]byte, error)
		ok                   bool
	}
	ms := []maker{
		{FigCoeffs, "Coefficient amplitude per mode",
			"For every mode, the rms coefficient over all patches and frames for each method (points); the bars span ± one standard deviation of the per-patch rms over patches. Methods that agree overlap; a learned amplitude below the fitted one means the network under-estimates that mode.",
			coeffFigure, len(r.Patches) > 0},
		{FigScatter, "Learned and polished against fitted",
			"Every coefficient (all patches, frames, modes) of the learned and polished estimates against the fitted one; the line is equality. With the truth known, the truth is plotted against the fit as well.",
			scatterFigure, len(r.Patches) > 0 && len(r.Summary.Pairs) > 0},
		{FigRMSDiff, "RMS difference per mode",
			"The rms over patches and frames of the difference between two methods, per mode (rad). Differences to the fit measure how far the fast estimates are from the classical answer; differences to the truth (simulations) measure the error of each.",
			rmsDiffFigure, len(r.Patches) > 0 && len(r.Summary.Pairs) > 0},
		{FigWavefront, "Wavefronts and PSFs of one patch and frame",
			"One row per method: the wavefront over the pupil (common colour scale, rad), the focused PSF and the defocused PSF (square root of the fraction of the light per pixel, common scale per channel, central part); colour bars below.",
			wavefrontFigure, r.Example != nil},
		{FigSpectra, "Power spectra of the restorations",
			"Azimuthally averaged power spectra of the frame-averaged raw data and of each method's restoration, averaged over patches and normalised by the squared mean. A restoration that recovers more fine structure lies higher at high frequencies; noise amplification shows up as a rise towards and beyond the diffraction cut-off (dashed).",
			spectraFigure, r.Spectra != nil},
		{FigRatioMap, "Metric ratio learned / fitted over the field",
			"Each cell is one patch placed at its position in the field; the colour is the learned metric divided by the fitted metric (1 means the network is as good as the fit).",
			ratioFigure, r.has(Learned) && r.has(Fitted) && len(r.Patches) > 1},
		{FigFlagMap, "Quality flags over the field",
			"Each cell is one patch placed at its position in the field; the colour is the number of quality flags raised on it (0: none; the flags by name are in the patch table and patches.csv).",
			flagFigure, len(r.Patches) > 1},
		{FigRestored, "Restored images of one patch",
			"The patch of the wavefront figure: the frame-averaged focused data (raw), each method's restoration and, for simulations, the true object seen by the perfect telescope, all on one grey scale (data units, colour bar below). The restorations are apodised towards the patch edges as the fit's data are.",
			restoredFigure, r.Example != nil && len(r.Example.Images) > 0},
	}
	for _, m := range ms {
		if !m.ok {
			continue
		}
		png, err := m.fn(r)
		if err != nil {
			return nil, fmt.Errorf("figure %s: %w", m.name, err)
		}
		figs = append(figs, Figure{Name: m.name, Title: m.title, Caption: m.caption, PNG: png})
	}
	return figs, nil
}

func coeffFigure(r *Report) ([]byte, error) {
	p := plot.New()
	p.Title.Text = "Coefficient rms per mode (bars: spread over patches)"
	p.X.Label.Text = "mode (" + r.Basis.Kind + ")"
	p.Y.Label.Text = "rms coefficient (rad)"
	ns := len(r.Summary.Series)
	for k, s := range r.Summary.Series {
		pts := make(plotter.XYs, r.Modes)
		errs := make(plotter.YErrors, r.Modes)
		off := 0.6 * (float64(k) - float64(ns-1)/2) / float64(ns)
		for m, st := range r.Summary.Modes {
			pts[m] = plotter.XY{X: float64(st.Mode) + off, Y: st.RMS[k]}
			errs[m].Low, errs[m].High = st.Spread[k], st.Spread[k]
		}
		sc, err := plotter.NewScatter(pts)
		if err != nil {
			return nil, err
		}
		sc.Color = seriesColor(s)
		sc.Shape = seriesGlyph(s)
		sc.Radius = vg.Points(2)
		eb, err := plotter.NewYErrorBars(struct {
			plotter.XYer
			plotter.YErrorer
		}{pts, errs})
		if err != nil {
			return nil, err
		}
		eb.Color = seriesColor(s)
		eb.CapWidth = vg.Points(2)
		p.Add(eb, sc)
		p.Legend.Add(s, sc)
	}
	p.Legend.Top = true
	p.Add(plotter.NewGrid())
	return renderPlot(p, figureWidthInch*vg.Inch, figureHeightInch*vg.Inch)
}

func scatterFigure(r *Report) ([]byte, error) {
	ref := Fitted
	if !r.has(Fitted) {
		ref = Truth
	}
	p := plot.New()
	p.Title.Text = "Coefficients against " + ref
	p.X.Label.Text = ref + " coefficient (rad)"
	p.Y.Label.Text = "coefficient (rad)"
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, s := range r.Summary.Series {
		if s == ref {
			continue
		}
		var pts plotter.XYs
		for i := range r.Patches {
			a, b := r.Patches[i].Find(s), r.Patches[i].Find(ref)
			for f := range a.Coeffs {
				for m := range a.Coeffs[f] {
					x, y := b.Coeffs[f][m], a.Coeffs[f][m]
					pts = append(pts, plotter.XY{X: x, Y: y})
					lo, hi = math.Min(lo, math.Min(x, y)), math.Max(hi, math.Max(x, y))
				}
			}
		}
		sc, err := plotter.NewScatter(pts)
		if err != nil {
			return nil, err
		}
		sc.Color = seriesColor(s)
		sc.Shape = draw.CircleGlyph{}
		sc.Radius = vg.Points(1)
		p.Add(sc)
		p.Legend.Add(s, sc)
	}
	if lo >= hi {
		lo, hi = lo-1, hi+1
	}
	ln, err := plotter.NewLine(plotter.XYs{{X: lo, Y: lo}, {X: hi, Y: hi}})
	if err != nil {
		return nil, err
	}
	ln.Color = color.Gray{Y: 100}
	ln.Dashes = []vg.Length{vg.Points(3), vg.Points(3)}
	p.Add(ln)
	p.Legend.Top = true
	p.Legend.Left = true
	return renderPlot(p, 5.5*vg.Inch, 5.5*vg.Inch)
}

func rmsDiffFigure(r *Report) ([]byte, error) {
	p := plot.New()
	p.Title.Text = "RMS difference per mode"
	p.X.Label.Text = "mode (" + r.Basis.Kind + ")"
	p.Y.Label.Text = "rms difference (rad)"
	for k, pr := range r.Summary.Pairs {
		pts := make(plotter.XYs, r.Modes)
		for m, st := range r.Summary.Modes {
			pts[m] = plotter.XY{X: float64(st.Mode), Y: st.DiffRMS[k]}
		}
		ln, sc, err := plotter.NewLinePoints(pts)
		if err != nil {
			return nil, err
		}
		c := seriesColor(pr.A)
		ln.Color, sc.Color = c, c
		if pr.B == Truth {
			ln.Dashes = []vg.Length{vg.Points(4), vg.Points(2)}
			sc.Shape = draw.BoxGlyph{}
		} else {
			sc.Shape = draw.CircleGlyph{}
		}
		sc.Radius = vg.Points(2)
		p.Add(ln, sc)
		p.Legend.Add(pr.A+" − "+pr.B, ln, sc)
	}
	p.Legend.Top = true
	p.Add(plotter.NewGrid())
	return renderPlot(p, figureWidthInch*vg.Inch, figureHeightInch*vg.Inch)
}

// clampMap maps v to a colour of cm, clamping to the map's range.
func clampMap(cm palette.ColorMap, v float64) color.Color {
	v = math.Max(cm.Min(), math.Min(cm.Max(), v))
	c, err := cm.At(v)
	if err != nil {
		return color.Gray{Y: 128}
	}
	return c
}

// mapImage turns the h×w window at (y0, x0) of an ny×nx map (row 0 at the
// bottom) into an image, each map pixel drawn as a scale×scale block, so that
// the plot shows pixels rather than an interpolation. Pixels where mask is
// non-nil and zero are drawn light grey.
func mapImage(vals []float64, ny, nx, y0, x0, h, w int, mask []float64, cm palette.ColorMap) image.Image {
	scale := 1
	for scale*max(h, w) < 256 {
		scale++
	}
	img := image.NewRGBA(image.Rect(0, 0, w*scale, h*scale))
	for r := 0; r < h; r++ {
		y := y0 + h - 1 - r
		for c := 0; c < w; c++ {
			x := x0 + c
			i := y*nx + x
			var col color.Color = color.Gray{Y: 235}
			if mask == nil || mask[i] != 0 {
				col = clampMap(cm, vals[i])
			}
			for dy := 0; dy < scale; dy++ {
				for dx := 0; dx < scale; dx++ {
					img.Set(c*scale+dx, r*scale+dy, col)
				}
			}
		}
	}
	return img
}

// colorBar returns a horizontal colour bar plot of cm over [cm.Min, cm.Max].
func colorBar(cm palette.ColorMap, label string) *plot.Plot {
	const steps = 256
	img := image.NewRGBA(image.Rect(0, 0, steps, 1))
	lo, hi := cm.Min(), cm.Max()
	for i := 0; i < steps; i++ {
		img.Set(i, 0, clampMap(cm, lo+(hi-lo)*(float64(i)+0.5)/steps))
	}
	p := plot.New()
	p.X.Label.Text = label
	p.Add(plotter.NewImage(img, lo, 0, hi, 1))
	p.X.Min, p.X.Max = lo, hi
	p.Y.Min, p.Y.Max = 0, 1
	p.HideY()
	p.X.Padding, p.Y.Padding = 0, 0
	return p
}

func tilePlot(title string, img image.Image) *plot.Plot {
	p := plot.New()
	p.Title.Text = title
	p.Title.TextStyle.Font.Size = vg.Points(9)
	b := img.Bounds()
	p.Add(plotter.NewImage(img, 0, 0, float64(b.Dx()), float64(b.Dy())))
	p.HideAxes()
	return p
}

// wavefrontFigure draws the example patch: per series one row with the
// wavefront over the pupil (a diverging map symmetric about 0) and the
// square root of the focused and defocused PSFs, cropped to the centre.
func wavefrontFigure(r *Report) ([]byte, error) {
	ex := r.Example
	n := ex.N
	if n < 2 || len(ex.Pupil) != n*n || len(ex.Phase) != len(ex.Series) || len(ex.PSF[0]) != len(ex.Series) || len(ex.PSF[1]) != len(ex.Series) {
		return nil, fmt.Errorf("inconsistent example (n=%d, %d series)", n, len(ex.Series))
	}
	pmax := phaseRange(ex)
	div := moreland.SmoothBlueRed()
	div.SetMin(-pmax)
	div.SetMax(pmax)
	crop := n / 2
	if crop < 8 {
		crop = n
	}
	c0 := n/2 - crop/2
	sq, smax, err := sqrtPSFs(ex)
	if err != nil {
		return nil, err
	}
	rows := len(ex.Series) + 1 // the last row holds the colour bars
	plots := make([][]*plot.Plot, rows)
	for k, s := range ex.Series {
		plots[k] = []*plot.Plot{
			tilePlot(fmt.Sprintf("%s: wavefront (±%.2g rad)", s, pmax), mapImage(ex.Phase[k], n, n, 0, 0, n, n, ex.Pupil, div)),
		}
		for ch := 0; ch < 2; ch++ {
			cm := moreland.BlackBody()
			cm.SetMin(0)
			cm.SetMax(smax[ch])
			name := "focused"
			if ch == 1 {
				name = "defocused"
			}
			plots[k] = append(plots[k], tilePlot(s+": "+name+" PSF", mapImage(sq[ch][k], n, n, c0, c0, crop, crop, nil, cm)))
		}
	}
	plots[rows-1] = []*plot.Plot{colorBar(div, "phase (rad)")}
	for ch, name := range []string{"focused", "defocused"} {
		cm := moreland.BlackBody()
		cm.SetMin(0)
		cm.SetMax(smax[ch])
		plots[rows-1] = append(plots[rows-1], colorBar(cm, "√PSF "+name))
	}
	return tiledPNG(plots[:rows-1], plots[rows-1], 7*vg.Inch, vg.Length(rows-1)*2.4*vg.Inch)
}

// tiledPNG draws a grid of plots (equal tiles over the height h) above one
// row of colour bars (0.8 inch), w wide, and encodes it as PNG.
func tiledPNG(grid [][]*plot.Plot, bars []*plot.Plot, w, h vg.Length) ([]byte, error) {
	barH := 0.8 * vg.Inch
	cv := vgimg.New(w, h+barH)
	dc := draw.New(cv)
	pad := vg.Points(4)
	top := draw.Crop(dc, 0, 0, barH, 0)
	t := draw.Tiles{Rows: len(grid), Cols: len(grid[0]), PadX: vg.Millimeter, PadY: vg.Millimeter, PadTop: pad, PadBottom: pad, PadLeft: pad, PadRight: pad}
	cs := plot.Align(grid, t, top)
	for i := range grid {
		for j := range grid[i] {
			grid[i][j].Draw(cs[i][j])
		}
	}
	bottom := draw.Crop(dc, 0, 0, 0, -h)
	bt := draw.Tiles{Rows: 1, Cols: len(bars), PadX: 4 * vg.Millimeter, PadTop: pad, PadBottom: pad, PadLeft: pad, PadRight: pad}
	for j, b := range bars {
		b.Draw(bt.At(bottom, j, 0))
	}
	var buf bytes.Buffer
	if _, err := (vgimg.PngCanvas{Canvas: cv}).WriteTo(&buf); err != nil {
		return nil, err
	}
	return buf.Bytes(), nil
}

// FigRestored is the file of the restored-images figure.
const FigRestored = "restored.png"

// restoredFigure draws the example patch's images side by side on one
// grey scale: the 1st to 99th percentile of all their pixels.
func restoredFigure(r *Report) ([]byte, error) {
	ex := r.Example
	n := ex.N
	var all []float64
	for _, im := range ex.Images {
		if len(im) != n*n {
			return nil, fmt.Errorf("example image of %d pixels, want %d", len(im), n*n)
		}
		all = append(all, im...)
	}
	sort.Float64s(all)
	lo, hi := all[len(all)/100], all[len(all)-1-len(all)/100]
	if !(hi > lo) {
		hi = lo + 1
	}
	cm := grayMap{lo: lo, hi: hi}
	row := make([]*plot.Plot, len(ex.Images))
	for k, im := range ex.Images {
		row[k] = tilePlot(ex.ImageSeries[k], mapImage(im, n, n, 0, 0, n, n, nil, &cm))
	}
	bar := colorBar(&cm, "intensity (data units: photo-electrons or ADU as in the burst)")
	return tiledPNG([][]*plot.Plot{row}, []*plot.Plot{bar}, 7*vg.Inch, 7*vg.Inch/vg.Length(len(row)))
}

// grayMap is a linear grey scale from black at lo to white at hi
// (palette.ColorMap; values outside are clamped by the callers).
type grayMap struct{ lo, hi, alpha float64 }

func (g *grayMap) At(v float64) (color.Color, error) {
	t := (v - g.lo) / (g.hi - g.lo)
	t = math.Max(0, math.Min(1, t))
	return color.Gray{Y: uint8(math.Round(255 * t))}, nil
}
func (g *grayMap) Max() float64       { return g.hi }
func (g *grayMap) Min() float64       { return g.lo }
func (g *grayMap) SetMax(v float64)   { g.hi = v }
func (g *grayMap) SetMin(v float64)   { g.lo = v }
func (g *grayMap) Alpha() float64     { return 1 }
func (g *grayMap) SetAlpha(a float64) { g.alpha = a }
func (g *grayMap) Palette(n int) palette.Palette {
	cs := make(grays, n)
	for i := range cs {
		cs[i] = color.Gray{Y: uint8(255 * i / max(1, n-1))}
	}
	return cs
}

// grays is a palette.Palette of grey levels.
type grays []color.Color

func (g grays) Colors() []color.Color { return g }

// phaseRange returns the largest |phase| inside the pupil over all the
// example's series, rad, or 1 if every phase is 0 there.
func phaseRange(ex *Example) float64 {
	var pmax float64
	for _, ph := range ex.Phase {
		for i, v := range ph {
			if ex.Pupil[i] > 0 {
				pmax = math.Max(pmax, math.Abs(v))
			}
		}
	}
	if pmax == 0 {
		pmax = 1
	}
	return pmax
}

// sqrtPSFs returns, per channel and series, the square root of the
// example's PSF (negative values clipped to 0) and, per channel, the
// largest of them (1 if all are 0). It fails if a PSF is not n×n.
func sqrtPSFs(ex *Example) (sq [2][][]float64, smax [2]float64, err error) {
	n := ex.N
	for ch := 0; ch < 2; ch++ {
		sq[ch] = make([][]float64, len(ex.Series))
		for k, psf := range ex.PSF[ch] {
			if len(psf) != n*n {
				return sq, smax, fmt.Errorf("example PSF length %d, want %d", len(psf), n*n)
			}
			s := make([]float64, n*n)
			for i, v := range psf {
				s[i] = math.Sqrt(math.Max(v, 0))
				smax[ch] = math.Max(smax[ch], s[i])
			}
			sq[ch][k] = s
		}
		if smax[ch] == 0 {
			smax[ch] = 1
		}
	}
	return sq, smax, nil
}

func spectraFigure(r *Report) ([]byte, error) {
	sp := r.Spectra
	p := plot.New()
	p.Title.Text = "Azimuthally averaged power spectra"
	p.X.Label.Text = "spatial frequency (cycles/pixel)"
	p.Y.Label.Text = "power / mean²"
	p.Y.Scale = plot.LogScale{}
	p.Y.Tick.Marker = plot.LogTicks{Prec: 1}
	// Restorations are zero beyond the metric's frequencies; show only
	// what lies within 12 decades of the largest value.
	var top float64
	for _, pw := range sp.Power {
		for b, v := range pw {
			if sp.Freq[b] > 0 && v > top {
				top = v
			}
		}
	}
	floor := top * 1e-12
	lo, hi := math.Inf(1), math.Inf(-1)
	for k, s := range sp.Series {
		if len(sp.Power[k]) != len(sp.Freq) {
			return nil, fmt.Errorf("spectrum %s has %d bins, want %d", s, len(sp.Power[k]), len(sp.Freq))
		}
		var pts plotter.XYs
		for b, f := range sp.Freq {
			v := sp.Power[k][b]
			if f <= 0 || !(v > floor) || math.IsInf(v, 0) {
				continue
			}
			pts = append(pts, plotter.XY{X: f, Y: v})
			lo, hi = math.Min(lo, v), math.Max(hi, v)
		}
		if len(pts) == 0 {
			continue
		}
		ln, err := plotter.NewLine(pts)
		if err != nil {
			return nil, err
		}
		ln.Color = seriesColor(s)
		ln.Dashes = seriesDashes(s)
		ln.Width = vg.Points(1.2)
		p.Add(ln)
		p.Legend.Add(s, ln)
	}
	if sp.Cutoff > 0 && lo < hi {
		cl, err := plotter.NewLine(plotter.XYs{{X: sp.Cutoff, Y: lo}, {X: sp.Cutoff, Y: hi}})
		if err != nil {
			return nil, err
		}
		cl.Dashes = []vg.Length{vg.Points(3), vg.Points(3)}
		cl.Color = color.Gray{Y: 90}
		p.Add(cl)
		p.Legend.Add("cut-off D/λ", cl)
	}
	p.Legend.Left = true
	return renderPlot(p, figureWidthInch*vg.Inch, figureHeightInch*vg.Inch)
}

func ratioFigure(r *Report) ([]byte, error) {
	k := 0
	for i, m := range r.Summary.RatioMethods {
		if m == Learned {
			k = i
		}
	}
	rs := r.Summary.Ratios[k]
	xs, ys := uniq(rs, func(q Ratio) int { return q.X }), uniq(rs, func(q Ratio) int { return q.Y })
	nx, ny := len(xs), len(ys)
	vals := make([]float64, nx*ny)
	mask := make([]float64, nx*ny)
	lo, hi := math.Inf(1), math.Inf(-1)
	for _, q := range rs {
		ix, iy := sort.SearchInts(xs, q.X), sort.SearchInts(ys, q.Y)
		vals[iy*nx+ix] = q.Value
		mask[iy*nx+ix] = 1
		lo, hi = math.Min(lo, q.Value), math.Max(hi, q.Value)
	}
	if !(hi-lo > 1e-3*math.Abs(hi)) {
		mid := 0.5 * (lo + hi)
		lo, hi = mid-0.01*math.Max(math.Abs(mid), 1), mid+0.01*math.Max(math.Abs(mid), 1)
	}
	cm := moreland.Kindlmann()
	cm.SetMin(lo)
	cm.SetMax(hi)
	name := r.Summary.RatioMethods[k] + " / " + Fitted
	return fieldMapFigure(r, "Metric ratio "+name+" per patch", "metric ratio "+name, xs, ys, vals, mask, cm)
}

// flagFigure maps the number of quality flags raised on each patch over
// the field (0 = none).
func flagFigure(r *Report) ([]byte, error) {
	var xs, ys []int
	for _, p := range r.Patches {
		xs, ys = append(xs, p.X), append(ys, p.Y)
	}
	xs, ys = uniqInts(xs), uniqInts(ys)
	nx, ny := len(xs), len(ys)
	vals := make([]float64, nx*ny)
	mask := make([]float64, nx*ny)
	most := 1.0
	for _, p := range r.Patches {
		ix, iy := sort.SearchInts(xs, p.X), sort.SearchInts(ys, p.Y)
		vals[iy*nx+ix] = float64(len(p.Flags))
		mask[iy*nx+ix] = 1
		most = math.Max(most, float64(len(p.Flags)))
	}
	cm := moreland.BlackBody()
	cm.SetMin(0)
	cm.SetMax(most)
	return fieldMapFigure(r, "Quality flags per patch", "number of flags raised", xs, ys, vals, mask, cm)
}

// fieldMapFigure draws one value per patch (vals on the grid xs × ys of
// patch origins, mask 1 where a patch exists) at the patches' positions in
// the field, with a colour bar below.
func fieldMapFigure(r *Report, title, barLabel string, xs, ys []int, vals, mask []float64, cm palette.ColorMap) ([]byte, error) {
	nx, ny := len(xs), len(ys)
	img := mapImage(vals, ny, nx, 0, 0, ny, nx, mask, cm)
	p := plot.New()
	p.Title.Text = title
	p.X.Label.Text = "x (pixels)"
	p.Y.Label.Text = "y (pixels)"
	ps := float64(r.PatchSize)
	if ps <= 0 {
		ps = 1
	}
	// Cells are drawn at the patch positions; patches of a regular grid
	// give a regular mosaic.
	x0, x1 := float64(xs[0]), float64(xs[nx-1])+ps
	y0, y1 := float64(ys[0]), float64(ys[ny-1])+ps
	p.Add(plotter.NewImage(img, x0, y0, x1, y1))
	bar := colorBar(cm, barLabel)
	w, h := 6*vg.Inch, 6*vg.Inch
	cv := vgimg.New(w, h)
	dc := draw.New(cv)
	top := draw.Canvas{Canvas: dc.Canvas, Rectangle: vg.Rectangle{Min: vg.Point{X: 0, Y: h * 0.16}, Max: vg.Point{X: w, Y: h}}}
	bot := draw.Canvas{Canvas: dc.Canvas, Rectangle: vg.Rectangle{Min: vg.Point{X: w * 0.1, Y: 0}, Max: vg.Point{X: w * 0.9, Y: h * 0.14}}}
	p.Draw(top)
	bar.Draw(bot)
	var buf bytes.Buffer
	if _, err := (vgimg.PngCanvas{Canvas: cv}).WriteTo(&buf); err != nil {
		return nil, err
	}
	return buf.Bytes(), nil
}

// uniqInts returns the distinct values of v in increasing order.
func uniqInts(v []int) []int {
	out := append([]int(nil), v...)
	sort.Ints(out)
	return slices.Compact(out)
}

func uniq(rs []Ratio, key func(Ratio) int) []int {
	seen := map[int]bool{}
	var out []int
	for _, q := range rs {
		k := key(q)
		if !seen[k] {
			seen[k] = true
			out = append(out, k)
		}
	}
	sort.Ints(out)
	return out
}
