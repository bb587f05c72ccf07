package restore

import (
	"encoding/csv"
	"encoding/json"
	"fmt"
	"image"
	"image/color"
	"image/png"
	"io"
	"math"
	"sort"
	"strconv"
	"strings"

	"pdwave/internal/atomicfile"
	"pdwave/model/fits"
)

// Product is a finished restoration: the blended field and the per-patch
// results (tiles dropped) in id order.
type Product struct {
	Meta    *Meta         // sizes, settings and header cards of the restoration
	Image   []float64     // Nx·Ny restored field
	Patches []PatchResult // per-patch results without tiles, in id order
}

// Collector is the Sink of a full (unsharded) restoration: it blends tiles
// into a Mosaic in the order it receives them and keeps the per-patch
// results without their tiles.
type Collector struct {
	Mosaic  *Mosaic       // the blended field so far
	Patches []PatchResult // results received so far, tiles dropped
}

// NewCollector returns an empty collector for grid g.
func NewCollector(g *Grid) *Collector { return &Collector{Mosaic: NewMosaic(g)} }

// Add is a Sink: it blends r.Tile and records r without its tile.
func (c *Collector) Add(r *PatchResult) error {
	c.Mosaic.Add(r.ID, r.Tile)
	m := *r
	m.Tile = nil
	c.Patches = append(c.Patches, m)
	return nil
}

// Product returns the finished restoration. It sets FlagMetric on the
// patches whose metric ratio exceeds MetricRatioLimit times the median over
// the field.
func (c *Collector) Product(meta *Meta) *Product {
	mr := make([]float64, len(c.Patches))
	for i, p := range c.Patches {
		mr[i] = p.MetricRatio
	}
	med := finiteMedian(mr)
	for i := range c.Patches {
		if c.Patches[i].MetricRatio > MetricRatioLimit*med {
			c.Patches[i].Flags |= FlagMetric
		}
	}
	return &Product{Meta: meta, Image: c.Mosaic.Image(nil), Patches: c.Patches}
}

// SidecarBase returns the output path without a .fits/.fit/.fts extension;
// the previews and summaries are written next to it as
// base_preview.png, base_patches.csv and base_summary.json.
func SidecarBase(out string) string {
	for _, ext := range []string{".fits", ".fit", ".fts", ".FITS", ".FIT", ".FTS"} {
		if strings.HasSuffix(out, ext) {
			return strings.TrimSuffix(out, ext)
		}
	}
	return out
}

// Write writes the product: the FITS file out (restored field in the primary
// HDU with the input's cards and provenance, extensions RAWMEAN and PATCHES)
// and the sidecars of SidecarBase(out), as one atomicfile.Set: the four
// files appear together or not at all (the FITS file is renamed last).
// version is the program version recorded in the provenance.
func (p *Product) Write(out, version string) error {
	m := p.Meta
	settings := map[string]string{}
	for k, v := range m.Settings {
		settings[k] = v
	}
	var cards []fits.Card
	for _, c := range m.Cards {
		// The burst's description of its 4-D axes does not apply to the
		// restored image.
		if c.Key == "COMMENT" && strings.HasPrefix(c.Comment, "Axes:") { // commentary text is in Comment
			continue
		}
		cards = append(cards, c)
	}
	cards = append(cards, fits.Provenance(version, settings)...)
	cards = append(cards,
		fits.Card{Key: "PDPATCH", Value: m.Patch, Comment: "restoration patch side, pixels"},
		fits.Card{Key: "PDOVERLP", Value: m.Overlap, Comment: "patch overlap, pixels"},
		fits.Card{Key: "PDNPATCH", Value: len(p.Patches), Comment: "number of patches"},
		fits.Card{Key: "PDFRAMES", Value: m.Frames, Comment: "frames per channel"},
		fits.Card{Key: "PDBASIS", Value: m.Basis, Comment: "wavefront basis of COEFFS"},
		fits.Card{Key: "PDMODES", Value: m.Modes, Comment: "coefficients per frame"},
		fits.Card{Key: "PDESTIM", Value: m.Estimator, Comment: "wavefront estimator"},
		fits.Card{Key: "PDSHIFTX", Value: m.ShiftX, Comment: "defocused channel x offset removed, pixels"},
		fits.Card{Key: "PDSHIFTY", Value: m.ShiftY, Comment: "defocused channel y offset removed, pixels"},
	)
	if m.CalibrationNotes != "" {
		cards = append(cards, fits.Card{Key: "PDCALIB", Value: m.CalibrationNotes, Comment: "calibration applied"})
	}
	primary := &fits.Image{Dims: []int{m.Nx, m.Ny}, Data: p.Image, Cards: cards}
	raw := &fits.Image{Name: "RAWMEAN", Dims: []int{m.Nx, m.Ny}, Data: m.Mean,
		Cards: append(wcsCards(m.Cards), fits.Card{Key: "COMMENT", Value: "burst-mean focused image after calibration"})}
	set := atomicfile.NewSet()
	defer set.Abort()
	base := SidecarBase(out)
	for _, f := range []struct {
		path  string
		write func(io.Writer) error
	}{
		{base + "_preview.png", func(w io.Writer) error { return png.Encode(w, Preview(m.Mean, p.Image, m.Nx, m.Ny)) }},
		{base + "_patches.csv", p.writeCSV},
		{base + "_summary.json", func(w io.Writer) error {
			enc := json.NewEncoder(w)
			enc.SetIndent("", "  ")
			return enc.Encode(p.Summary())
		}},
	} {
		if err := set.Add(f.path, f.write); err != nil {
			return err
		}
	}
	if err := set.AddPath(out, func(tmp string) error { return fits.WriteFile(tmp, primary, raw, p.table()) }); err != nil {
		return err
	}
	return set.Commit()
}

// ProductPaths returns the files Product.Write writes for out: the three
// sidecars and out itself, in the order they are renamed into place.
func ProductPaths(out string) []string {
	base := SidecarBase(out)
	return []string{base + "_preview.png", base + "_patches.csv", base + "_summary.json", out}
}

// wcsCards picks the world-coordinate cards of the input.
func wcsCards(cards []fits.Card) []fits.Card {
	var out []fits.Card
	for _, c := range cards {
		k := strings.ToUpper(c.Key)
		for _, p := range []string{"CRPIX", "CRVAL", "CDELT", "CUNIT", "CTYPE", "CROTA", "PC1_", "PC2_", "CD1_", "CD2_", "WCSNAME", "RADESYS", "EQUINOX", "DATE-OBS"} {
			if strings.HasPrefix(k, p) {
				out = append(out, c)
				break
			}
		}
	}
	return out
}

// table builds the PATCHES binary table.
func (p *Product) table() *fits.Table {
	n := len(p.Patches)
	ids, x0, y0, flags := make([]int64, n), make([]int64, n), make([]int64, n), make([]int64, n)
	col := func() [][]float64 { return make([][]float64, n) }
	metric, mratio, crms, con, rcon, ring, share := col(), col(), col(), col(), col(), col(), col()
	names := make([]string, n)
	nc := p.Meta.Frames * p.Meta.Modes
	coeffs, noll := col(), col()
	for i, r := range p.Patches {
		ids[i], x0[i], y0[i], flags[i] = int64(r.ID+1), int64(r.X0), int64(r.Y0), int64(r.Flags)
		names[i] = FlagNames(r.Flags)
		metric[i] = []float64{r.Metric}
		mratio[i] = []float64{r.MetricRatio}
		crms[i] = []float64{r.CoeffRMS}
		con[i] = []float64{r.Contrast}
		rcon[i] = []float64{r.RawContrast}
		ring[i] = []float64{r.Ringing}
		share[i] = []float64{r.SignalShare}
		coeffs[i] = exactOrNaN(r.Coeffs, nc)
		noll[i] = exactOrNaN(r.Noll, nc)
	}
	cols := []fits.Column{
		{Name: "PATCH", Int: ids}, // numbered from 1
		{Name: "X0", Unit: "pixel", Int: x0},
		{Name: "Y0", Unit: "pixel", Int: y0},
	}
	if nc > 0 {
		cols = append(cols,
			// frame-major cells: TDIM (modes, frames), astropy shape (patches, frames, modes)
			fits.Column{Name: "COEFFS", Unit: "rad", Float: coeffs, Dims: []int{p.Meta.Modes, p.Meta.Frames}},
			fits.Column{Name: "NOLL", Unit: "rad", Float: noll, Dims: []int{p.Meta.Modes, p.Meta.Frames}})
	}
	cols = append(cols,
		fits.Column{Name: "METRIC", Float: metric},
		fits.Column{Name: "MOVERNSE", Float: mratio}, // metric over its noise-only expectation
		fits.Column{Name: "COEFRMS", Float: crms},
		fits.Column{Name: "CONTRAST", Float: con},
		fits.Column{Name: "RAWCONTR", Float: rcon},
		fits.Column{Name: "RINGING", Float: ring},
		fits.Column{Name: "SIGSHARE", Float: share}, // share of the OTF support above the noise threshold
		fits.Column{Name: "FLAGS", Int: flags},
		fits.Column{Name: "FLAGNAME", Text: names},
	)
	return &fits.Table{Name: "PATCHES", Columns: cols, Cards: []fits.Card{
		{Key: "PDBASIS", Value: p.Meta.Basis, Comment: "basis of COEFFS (frame-major, frames x modes)"},
		{Key: "PDMODES", Value: p.Meta.Modes, Comment: "modes per frame"},
		{Key: "PDFRAMES", Value: p.Meta.Frames, Comment: "frames"},
		{Key: "COMMENT", Value: "NOLL: Noll-equivalent Zernike coefficients j=2..modes+1 per frame"},
		{Key: "COMMENT", Value: "COEFFS, NOLL: frames x modes per row, frame-major (mode index fastest)"},
		{Key: "COMMENT", Value: "FLAGS bits: 1 failed, 2 metric, 4 coefficients, 8 contrast, 16 ringing, 32 learned_suspect"},
	}}
}

// exactOrNaN returns v padded (or replaced) with NaN to length n.
func exactOrNaN(v []float64, n int) []float64 {
	out := make([]float64, n)
	for i := range out {
		if i < len(v) && len(v) == n {
			out[i] = v[i]
		} else {
			out[i] = math.NaN()
		}
	}
	return out
}

// formatFloat writes v with 6 significant digits, as every table of
// restore does.
func formatFloat(v float64) string { return strconv.FormatFloat(v, 'g', 6, 64) }

func (p *Product) writeCSV(w io.Writer) error {
	cw := csv.NewWriter(w)
	cw.Write([]string{"patch", "x0", "y0", "wavefront_rms_rad", "metric", "metric_over_noise", "coeff_rms_vs_prior", "contrast", "raw_contrast", "ringing", "signal_share", "flags", "error"})
	for _, r := range p.Patches {
		rms := math.NaN()
		if len(r.Coeffs) > 0 && p.Meta.Frames > 0 {
			var s float64
			for _, v := range r.Coeffs {
				s += v * v
			}
			// Coefficients are orthonormal over the pupil (Noll
			// normalisation; KL modes are orthonormal combinations), so the
			// wavefront variance of a frame is Σ α² over its modes.
			rms = math.Sqrt(s / float64(p.Meta.Frames))
		}
		cw.Write([]string{strconv.Itoa(r.ID + 1), strconv.Itoa(r.X0), strconv.Itoa(r.Y0), formatFloat(rms),
			formatFloat(r.Metric), formatFloat(r.MetricRatio), formatFloat(r.CoeffRMS), formatFloat(r.Contrast),
			formatFloat(r.RawContrast), formatFloat(r.Ringing), formatFloat(r.SignalShare), FlagNames(r.Flags), r.Err})
	}
	cw.Flush()
	return cw.Error()
}

// Summary is the JSON summary of a restoration.
type Summary struct {
	Nx, Ny, Frames, Patch, Overlap, Patches int               // field size, frames, patch side and overlap (pixels), patch count
	Basis, Estimator                        string            // as in Meta
	Modes                                   int               // coefficients per frame
	ShiftX, ShiftY                          float64           // defocused channel offset removed, pixels
	Inputs                                  []string          // input file names
	Settings                                map[string]string // provenance settings
	Flagged                                 map[string]int    // patches per flag name
	MedianContrast, MedianRawContrast       float64           // median rms/mean contrast over patches, restored and raw (−1 if none)
	MedianMetricRatio, MedianCoeffRMS       float64           // median PatchResult.MetricRatio and CoeffRMS (−1 if none)
	MedianRinging                           float64           // median PatchResult.Ringing (−1 if none)
}

// Summary computes the summary figures.
func (p *Product) Summary() Summary {
	m := p.Meta
	s := Summary{Nx: m.Nx, Ny: m.Ny, Frames: m.Frames, Patch: m.Patch, Overlap: m.Overlap, Patches: len(p.Patches),
		Basis: m.Basis, Estimator: m.Estimator, Modes: m.Modes, ShiftX: m.ShiftX, ShiftY: m.ShiftY,
		Inputs: m.Inputs, Settings: m.Settings, Flagged: map[string]int{}}
	names := []string{"failed", "metric", "coefficients", "contrast", "ringing", "learned_suspect"}
	var con, raw, mr, cr, ri []float64
	for _, r := range p.Patches {
		for b, n := range names {
			if r.Flags&(1<<b) != 0 {
				s.Flagged[n]++
			}
		}
		con = append(con, r.Contrast)
		raw = append(raw, r.RawContrast)
		mr = append(mr, r.MetricRatio)
		cr = append(cr, r.CoeffRMS)
		ri = append(ri, r.Ringing)
	}
	s.MedianContrast, s.MedianRawContrast = finiteMedian(con), finiteMedian(raw)
	s.MedianMetricRatio, s.MedianCoeffRMS, s.MedianRinging = finiteMedian(mr), finiteMedian(cr), finiteMedian(ri)
	// JSON cannot carry NaN.
	for _, v := range []*float64{&s.MedianContrast, &s.MedianRawContrast, &s.MedianMetricRatio, &s.MedianCoeffRMS, &s.MedianRinging} {
		if math.IsNaN(*v) || math.IsInf(*v, 0) {
			*v = -1
		}
	}
	return s
}

// finiteMedian is the median of the finite values of v (NaN if none).
func finiteMedian(v []float64) float64 {
	var f []float64
	for _, x := range v {
		if !math.IsNaN(x) && !math.IsInf(x, 0) {
			f = append(f, x)
		}
	}
	if len(f) == 0 {
		return math.NaN()
	}
	sort.Float64s(f)
	if len(f)%2 == 1 {
		return f[len(f)/2]
	}
	return 0.5 * (f[len(f)/2-1] + f[len(f)/2])
}

// Preview renders raw (left) and restored (right) nx×ny images side by side
// as 8-bit grey, both with the same linear scale: the 0.5 and 99.5
// percentiles of the raw image map to black and white. Row 0 of the data is
// drawn at the bottom (FITS orientation). NaN pixels are black.
func Preview(raw, restored []float64, nx, ny int) *image.Gray {
	const gap = 4
	f := make([]float64, 0, len(raw))
	for _, v := range raw {
		if !math.IsNaN(v) {
			f = append(f, v)
		}
	}
	sort.Float64s(f)
	lo, hi := 0.0, 1.0
	if len(f) > 0 {
		lo, hi = f[len(f)*5/1000], f[min(len(f)-1, len(f)*995/1000)]
	}
	if hi <= lo {
		hi = lo + 1
	}
	img := image.NewGray(image.Rect(0, 0, 2*nx+gap, ny))
	for i := range img.Pix {
		img.Pix[i] = 255
	}
	put := func(off int, d []float64) {
		for y := 0; y < ny; y++ {
			for x := 0; x < nx; x++ {
				v := d[y*nx+x]
				g := 0.0
				if !math.IsNaN(v) {
					g = math.Max(0, math.Min(1, (v-lo)/(hi-lo)))
				}
				img.SetGray(off+x, ny-1-y, color.Gray{Y: uint8(math.Round(255 * g))})
			}
		}
	}
	put(0, raw)
	put(nx+gap, restored)
	return img
}

// String describes the product in one line.
func (p *Product) String() string {
	s := p.Summary()
	return fmt.Sprintf("%d×%d field, %d patches of %d px (overlap %d), median contrast %.4f (raw %.4f), %d failed",
		s.Nx, s.Ny, s.Patches, s.Patch, s.Overlap, s.MedianContrast, s.MedianRawContrast, s.Flagged["failed"])
}
