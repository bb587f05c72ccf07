// Package compare sets learned, learned-and-polished and classically fitted
// wavefront coefficients side by side, patch by patch, and writes the result
// as CSV and JSON tables, PNG figures and one self-contained HTML page.
//
// The report is a plain Go value (Report). Run fills it from a burst by
// running the estimators on the same patches; Summarise derives the per-mode
// statistics and quality flags from the per-patch numbers; WriteDir writes
// every output into a folder atomically. The writers and figure makers only
// read the Report, so they can be driven by synthetic reports in tests.
//
// The folder holds: coefficients.csv (one row per patch, frame and mode:
// every method's coefficient, the truth for simulations, and the
// differences), patches.csv (per patch: metric of every method, ratio to the
// fit, restored contrast rms/mean, stage and cumulative seconds, iterations,
// quality flags), modes.csv (per mode: rms and spread over patches of every
// method, rms of every difference), spectra.csv, the same tables as JSON
// (report.json holds everything; patches.json, modes.json), the PNG figures
// and index.html with the figures embedded.
//
// NetEstimator adapts a trained model/net network to infer.Estimator (safe
// for concurrent use); Config.TruthAt brings the per-patch truth of a
// simulated field.
//
// Coefficients are in the native basis of the report (Report.Basis), radians,
// frames × modes. The metric of every estimate is the objective the classical
// fit minimises (model/pd Objective.ValueGrad: phase-diversity metric plus the
// turbulence prior), evaluated on the same patch data with the same settings,
// so metric values of different methods are directly comparable.
package compare

import (
	"fmt"
	"math"
	"sort"

	"gonum.org/v1/gonum/stat"

	"pdwave/infer"
)

// Method names used in reports. A report holds any subset of them, in this
// order; Truth is only present for simulated data.
const (
	Learned  = "learned"  // network prediction
	Polished = "polished" // network prediction followed by a few fit steps
	Fitted   = "fitted"   // full classical fit
	Truth    = "truth"    // simulation truth (burst.Truth)
)

// Estimate is one method's result on one patch.
type Estimate struct {
	Method string `json:"method"` // Learned, Polished, Fitted or Truth
	// Coeffs holds frames × modes coefficients in the report basis (rad).
	Coeffs [][]float64 `json:"coeffs"`
	// Metric is the fit objective at Coeffs (dimensionless: the metric is
	// normalised by the data power, plus the prior term).
	Metric float64 `json:"metric"`
	// Contrast is the rms/mean of the restored object (apodised patch).
	Contrast float64 `json:"contrast"`
	// Seconds is the wall time of this stage alone; Total is the wall time
	// needed to reach this estimate from the data (for example learned +
	// polish for the polished estimate).
	Seconds float64 `json:"seconds"`
	Total   float64 `json:"total_seconds"`
	// Iterations counts optimiser iterations spent in this stage (0 for a
	// prediction or the truth).
	Iterations int `json:"iterations"`
	// ImageError is the error of the restored patch against the
	// diffraction-limited true object (infer.ScoreImage over the patch's
	// central half); nil unless the burst carries its OBJECT.
	ImageError *float64 `json:"image_error,omitempty"`
}

// Patch is one patch of the field with the estimates of every method.
type Patch struct {
	Index int `json:"index"` // position in Report.Patches
	// X, Y locate the patch's first pixel (column, row) in the field.
	X int `json:"x"`
	Y int `json:"y"`
	// RawContrast is the rms/mean of the frame-averaged focused data,
	// apodised the same way as the restorations.
	RawContrast float64 `json:"raw_contrast"`
	// RawImageError is ImageError of the frame-averaged focused data; nil
	// unless the burst carries its OBJECT.
	RawImageError *float64 `json:"raw_image_error,omitempty"`
	// LearnedOverNoise is restore's metric over its noise-only expectation
	// at the learned estimate (restore.PatchResult.MetricRatio with the
	// learned estimate unpolished); nil without a learned estimate.
	LearnedOverNoise *float64 `json:"learned_metric_over_noise,omitempty"`
	// SignalShare is restore's signal share of the patch
	// (restore.PatchResult.SignalShare), the figure of
	// infer.LearnedSuspect; nil without a learned estimate.
	SignalShare *float64 `json:"signal_share,omitempty"`
	// Estimates holds one entry per method, in Report.Methods order; the
	// truth, when known, is an Estimate with Method == Truth.
	Estimates []Estimate `json:"estimates"`
	// Flags are the quality flags raised for this patch (see FlagNotes).
	Flags []string `json:"flags"`
}

// Setting is one provenance entry (name and value as text).
type Setting struct {
	Key   string `json:"key"`
	Value string `json:"value"`
}

// BasisInfo describes the modal basis of all coefficients in a report.
type BasisInfo struct {
	Kind   string  `json:"kind"`   // "zernike" or "kl"
	Count  int     `json:"count"`  // modes, piston excluded
	N      int     `json:"n"`      // grid side, pixels
	Radius float64 `json:"radius"` // pupil radius, pixels
}

// Example holds the wavefronts and PSFs of one patch and frame for the
// side-by-side figure. Images are N×N row-major; PSFs are centred (zero
// offset at pixel (N/2, N/2)) and normalised to unit sum.
type Example struct {
	Patch  int         `json:"patch"`  // Patch.Index of the patch shown
	Frame  int         `json:"frame"`  // frame shown, 0-based
	N      int         `json:"n"`      // patch side, pixels
	Series []string    `json:"series"` // method of each Phase and PSF entry
	Pupil  []float64   `json:"-"`      // pupil transmission, N*N
	Phase  [][]float64 `json:"-"`      // per series, rad, N*N
	// PSF[channel][series]: channel 0 focused, 1 defocused.
	PSF [2][][]float64 `json:"-"`
	// ImageSeries names each of Images: "raw" (the frame-averaged focused
	// data), the methods' restorations (in Series order) and "object" (the
	// diffraction-limited true object, simulations only). Images are N×N,
	// not shifted, in data units.
	ImageSeries []string    `json:"image_series"`
	Images      [][]float64 `json:"-"`
}

// Spectra holds azimuthally averaged power spectra of the raw data and of
// the restorations, averaged over patches.
type Spectra struct {
	Series []string `json:"series"` // "raw" then methods
	// Freq is the radial spatial frequency of each bin, cycles per pixel.
	Freq []float64 `json:"freq"`
	// Power[series][bin] is the mean over the annulus and over patches of
	// |F{x − mean x}|² / (N²·m²), x the image (the raw frame average
	// apodised with the metric's window, or a restoration, which carries
	// the same window) and m the window-weighted mean of the raw average,
	// so that Σ over all frequencies / N² is the squared contrast
	// (Parseval).
	Power [][]float64 `json:"power"`
	// Cutoff is the diffraction cut-off D/λ in cycles per pixel (0 unknown).
	Cutoff float64 `json:"cutoff"`
}

// Report is the whole comparison.
type Report struct {
	Version  string    `json:"version"`  // pdwave version that made it
	Created  string    `json:"created"`  // RFC 3339, UTC
	Source   string    `json:"source"`   // the burst file compared
	Settings []Setting `json:"settings"` // provenance
	Basis    BasisInfo `json:"basis"`    // basis of every coefficient
	Frames   int       `json:"frames"`   // frames per patch
	Modes    int       `json:"modes"`    // coefficients per frame
	// PatchSize is the side of the square patches, pixels.
	PatchSize int `json:"patch_size"`
	// FieldNx, FieldNy give the field size, pixels.
	FieldNx int `json:"field_nx"`
	FieldNy int `json:"field_ny"`
	// Methods lists the estimates present in every patch, in order; Truth
	// comes last when present.
	Methods []string `json:"methods"`
	// Notes are free remarks shown in the report (for example a missing
	// estimator).
	Notes   []string `json:"notes"`
	Patches []Patch  `json:"patches"`           // every patch compared
	Example *Example `json:"example,omitempty"` // wavefront/PSF figure data; nil if none
	Spectra *Spectra `json:"spectra,omitempty"` // power spectra; nil if none
	Summary Summary  `json:"summary"`           // figures derived by Summarise
}

// Pair names a coefficient difference A − B.
type Pair struct {
	A string `json:"a"`
	B string `json:"b"`
}

// String returns "a-b".
func (p Pair) String() string { return p.A + "-" + p.B }

// ModeStat holds the statistics of one mode over all patches and frames.
type ModeStat struct {
	Mode int `json:"mode"` // 1-based index in the report basis
	// RMS[s] is the rms of the coefficient of series s (Summary.Series)
	// over all patches and frames, rad.
	RMS []float64 `json:"rms"`
	// Spread[s] is the standard deviation over patches of the per-patch
	// rms (over frames) of series s, rad.
	Spread []float64 `json:"spread"`
	// DiffRMS[p] is the rms over patches and frames of A − B for pair p
	// (Summary.Pairs), rad.
	DiffRMS []float64 `json:"diff_rms"`
}

// Ratio is the metric ratio of one method to the fit on one patch.
type Ratio struct {
	Patch int     `json:"patch"` // Patch.Index
	X     int     `json:"x"`     // patch origin (column) in the field, pixels
	Y     int     `json:"y"`     // patch origin (row) in the field, pixels
	Value float64 `json:"value"` // metric(method)/metric(fitted)
}

// Summary holds everything derived from the per-patch numbers.
type Summary struct {
	Series []string   `json:"series"` // methods with coefficients, in Report.Methods order
	Pairs  []Pair     `json:"pairs"`  // coefficient differences summarised
	Modes  []ModeStat `json:"modes"`  // one entry per mode of the report basis
	// Ratios[m] holds metric(m)/metric(fitted) per patch for each method m
	// in RatioMethods (every method but the fit, the truth included).
	RatioMethods []string  `json:"ratio_methods"`
	Ratios       [][]Ratio `json:"ratios"`
	// MedianRatio[m] is the median of Ratios[m].
	MedianRatio []float64 `json:"median_ratio"`
	// RMSDiff[p] is the rms over patches, frames and modes of pair p, rad.
	RMSDiff []float64 `json:"rms_diff"`
	// FlagCount counts patches per flag.
	FlagCount map[string]int `json:"flag_count"`
	// ImageError maps "raw" and each method with image errors to the
	// median over patches of their ImageError (simulated bursts only).
	ImageError map[string]float64 `json:"image_error,omitempty"`
}

// Quality flags raised per patch by Summarise.
const (
	// FlagOrder: the metric ordering fitted ≤ polished ≤ learned is broken
	// by more than OrderTolerance (relative).
	FlagOrder = "order"
	// FlagRatio: metric(learned)/metric(fitted) exceeds RatioLimit.
	FlagRatio = "objective_ratio"
	// FlagContrast: the learned restoration's contrast differs from the
	// fitted one by more than ContrastLimit (relative).
	FlagContrast = "contrast_vs_fit"
	// FlagTruth: the fit ends with a higher metric than the truth, so the
	// optimiser stopped early or in a local minimum (simulations only).
	FlagTruth = "truth"
	// FlagFlat: raw contrast below FlatLimit; too little structure for
	// phase diversity to see the wavefront.
	FlagFlat = "flat"
	// FlagLearnedSuspect: the patch's signal share exceeds
	// infer.LearnedSuspectShare (one patch, no comparison with the fit or
	// the field); the same flag as restore's.
	FlagLearnedSuspect = infer.FlagLearnedSuspect
)

// Thresholds for the quality flags.
const (
	OrderTolerance = 1e-9
	RatioLimit     = 1.5
	ContrastLimit  = 0.10
	FlatLimit      = 0.01
)

// FlagNotes explains each flag for the report page.
var FlagNotes = []Setting{
	{FlagOrder, "The metric should never rise along learned → polished → fitted, because each stage starts from the previous one and only accepts steps that lower it. A broken order points to a bug or a non-finite value."},
	{FlagRatio, fmt.Sprintf("The learned estimate's metric is more than %.1f× the fitted one: the network is outside its training envelope here (seeing, scene or noise unlike its training data). Prefer the polished or fitted coefficients.", RatioLimit)},
	{FlagContrast, fmt.Sprintf("The learned restoration's contrast (rms/mean) differs from the fitted one by more than %.0f %%: the learned wavefront under- or over-corrects this patch.", 100*ContrastLimit)},
	{FlagTruth, "Simulations only: the fit ends above the metric of the true coefficients, so the optimiser stopped early or in a local minimum; raise --iterations."},
	{FlagLearnedSuspect, fmt.Sprintf("More than %.0f %% of the frequencies inside the diffraction cut-off carry signal above the noise (restore's signal_share, computed from the data alone, without the fit): on such patches the classical fit reaches much better wavefronts than the network, so polish or fit here before science. Measured on fresh simulated fields it catches about 3 in 4 of the patches where the learned error exceeds twice the fit's, and marks about 1 in 9 of those where it is within 1.2× (see the README).", 100*infer.LearnedSuspectShare)},
	{FlagFlat, fmt.Sprintf("The raw contrast is below %.0f %%: too little structure for phase diversity to measure the wavefront; all methods are unreliable here.", 100*FlatLimit)},
}

// Find returns the estimate of method m, or nil.
func (p *Patch) Find(m string) *Estimate {
	for i := range p.Estimates {
		if p.Estimates[i].Method == m {
			return &p.Estimates[i]
		}
	}
	return nil
}

func (r *Report) has(m string) bool {
	for _, x := range r.Methods {
		if x == m {
			return true
		}
	}
	return false
}

// Check verifies that the report is consistent: every patch holds exactly
// the methods of r.Methods, in order, with frames × modes coefficients.
func (r *Report) Check() error {
	if r.Frames < 1 || r.Modes < 1 {
		return fmt.Errorf("report: %d frames × %d modes", r.Frames, r.Modes)
	}
	if len(r.Methods) == 0 {
		return fmt.Errorf("report: no methods")
	}
	for i, p := range r.Patches {
		if !finite(p.RawContrast) {
			return fmt.Errorf("report: patch %d raw contrast %g", i, p.RawContrast)
		}
		if len(p.Estimates) != len(r.Methods) {
			return fmt.Errorf("report: patch %d has %d estimates, want %d", i, len(p.Estimates), len(r.Methods))
		}
		for k, e := range p.Estimates {
			if e.Method != r.Methods[k] {
				return fmt.Errorf("report: patch %d estimate %d is %q, want %q", i, k, e.Method, r.Methods[k])
			}
			if !finite(e.Metric) || e.Metric < 0 || !finite(e.Contrast) || !finite(e.Seconds) || !finite(e.Total) {
				return fmt.Errorf("report: patch %d %s: metric %g, contrast %g, seconds %g, %g must be finite (metric ≥ 0)", i, e.Method, e.Metric, e.Contrast, e.Seconds, e.Total)
			}
			if len(e.Coeffs) != r.Frames {
				return fmt.Errorf("report: patch %d %s has %d frames, want %d", i, e.Method, len(e.Coeffs), r.Frames)
			}
			for f, c := range e.Coeffs {
				if len(c) != r.Modes {
					return fmt.Errorf("report: patch %d %s frame %d has %d modes, want %d", i, e.Method, f, len(c), r.Modes)
				}
				for _, v := range c {
					if !finite(v) {
						return fmt.Errorf("report: patch %d %s frame %d: coefficient %g", i, e.Method, f, v)
					}
				}
			}
		}
	}
	return nil
}

// Summarise computes r.Summary and every patch's Flags from the per-patch
// numbers. It returns an error if the report is inconsistent (see Check).
func Summarise(r *Report) error {
	if err := r.Check(); err != nil {
		return err
	}
	s := Summary{Series: append([]string(nil), r.Methods...), FlagCount: map[string]int{}}
	s.Pairs = comparisonPairs(r)
	s.Modes = make([]ModeStat, r.Modes)
	for m := range s.Modes {
		s.Modes[m] = modeStat(r, m, s.Series, s.Pairs)
	}
	s.RMSDiff = make([]float64, len(s.Pairs))
	for k := range s.Pairs {
		var sum2 float64
		for _, st := range s.Modes {
			sum2 += st.DiffRMS[k] * st.DiffRMS[k]
		}
		s.RMSDiff[k] = math.Sqrt(sum2 / float64(r.Modes))
	}
	if r.has(Fitted) {
		addMetricRatios(&s, r)
	}
	for i := range r.Patches {
		p := &r.Patches[i]
		p.Flags = flags(p)
		for _, f := range p.Flags {
			s.FlagCount[f]++
		}
	}
	s.ImageError = medianImageErrors(r)
	r.Summary = s
	return nil
}

// medianImageErrors returns the median ImageError over patches of the raw
// average and of each method that has one (nil when none has).
func medianImageErrors(r *Report) map[string]float64 {
	vals := map[string][]float64{}
	for _, p := range r.Patches {
		if p.RawImageError != nil {
			vals["raw"] = append(vals["raw"], *p.RawImageError)
		}
		for _, e := range p.Estimates {
			if e.ImageError != nil {
				vals[e.Method] = append(vals[e.Method], *e.ImageError)
			}
		}
	}
	if len(vals) == 0 {
		return nil
	}
	out := map[string]float64{}
	for k, v := range vals {
		sort.Float64s(v)
		out[k] = stat.Quantile(0.5, stat.Empirical, v, nil)
	}
	return out
}

// comparisonPairs lists the differences the summary reports: every
// estimate against the fit, then every estimate against the truth, for
// the references present in r.
func comparisonPairs(r *Report) []Pair {
	var pairs []Pair
	for _, b := range []string{Fitted, Truth} {
		if !r.has(b) {
			continue
		}
		for _, a := range r.Methods {
			if a == b || a == Truth {
				continue
			}
			pairs = append(pairs, Pair{a, b})
		}
	}
	return pairs
}

// modeStat returns the statistics of mode index m (Noll-style number m+1)
// over all patches and frames: per series the RMS coefficient and the
// sample standard deviation of the per-patch RMS, per pair the RMS
// difference. With no patches the values stay 0.
func modeStat(r *Report, m int, series []string, pairs []Pair) ModeStat {
	np := len(r.Patches)
	st := ModeStat{Mode: m + 1, RMS: make([]float64, len(series)), Spread: make([]float64, len(series)), DiffRMS: make([]float64, len(pairs))}
	for k, name := range series {
		var sum2 float64
		per := make([]float64, 0, np)
		for i := range r.Patches {
			e := r.Patches[i].Find(name)
			var p2 float64
			for f := range e.Coeffs {
				v := e.Coeffs[f][m]
				p2 += v * v
			}
			sum2 += p2
			per = append(per, math.Sqrt(p2/float64(r.Frames)))
		}
		if np > 0 {
			st.RMS[k] = math.Sqrt(sum2 / float64(np*r.Frames))
			st.Spread[k] = stddev(per)
		}
	}
	for k, pr := range pairs {
		var sum2 float64
		for i := range r.Patches {
			a, b := r.Patches[i].Find(pr.A), r.Patches[i].Find(pr.B)
			for f := range a.Coeffs {
				d := a.Coeffs[f][m] - b.Coeffs[f][m]
				sum2 += d * d
			}
		}
		if np > 0 {
			st.DiffRMS[k] = math.Sqrt(sum2 / float64(np*r.Frames))
		}
	}
	return st
}

// addMetricRatios sets, for every method but the fit, the per-patch
// metric ratio method/fitted (metricRatio) and its median over patches.
func addMetricRatios(s *Summary, r *Report) {
	np := len(r.Patches)
	for _, m := range r.Methods {
		if m == Fitted {
			continue
		}
		rs := make([]Ratio, np)
		vals := make([]float64, np)
		for i := range r.Patches {
			p := &r.Patches[i]
			v := metricRatio(p.Find(m).Metric, p.Find(Fitted).Metric)
			rs[i] = Ratio{Patch: p.Index, X: p.X, Y: p.Y, Value: v}
			vals[i] = v
		}
		s.RatioMethods = append(s.RatioMethods, m)
		s.Ratios = append(s.Ratios, rs)
		s.MedianRatio = append(s.MedianRatio, median(vals))
	}
}

// flags returns the quality flags of one patch.
func flags(p *Patch) []string {
	out := []string{}
	l, pol, fit, tr := p.Find(Learned), p.Find(Polished), p.Find(Fitted), p.Find(Truth)
	// Order along the chain of methods present.
	chain := []*Estimate{}
	for _, e := range []*Estimate{l, pol, fit} {
		if e != nil {
			chain = append(chain, e)
		}
	}
	for i := 1; i < len(chain); i++ {
		a, b := chain[i-1].Metric, chain[i].Metric
		if !(b <= a+OrderTolerance*math.Abs(a)) {
			out = append(out, FlagOrder)
			break
		}
	}
	if l != nil && fit != nil && !(l.Metric <= RatioLimit*fit.Metric) {
		out = append(out, FlagRatio)
	}
	if l != nil && fit != nil && fit.Contrast > 0 && !(math.Abs(l.Contrast-fit.Contrast) <= ContrastLimit*fit.Contrast) {
		out = append(out, FlagContrast)
	}
	if tr != nil && fit != nil && !(fit.Metric <= tr.Metric) {
		out = append(out, FlagTruth)
	}
	if p.SignalShare != nil && infer.LearnedSuspect(*p.SignalShare) {
		out = append(out, FlagLearnedSuspect)
	}
	if !(p.RawContrast >= FlatLimit) {
		out = append(out, FlagFlat)
	}
	return out
}

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// metricRatio returns a/b; for b == 0 it returns 1 if a == 0 too and the
// largest float64 otherwise, so the value stays finite for JSON.
func metricRatio(a, b float64) float64 {
	if b == 0 {
		if a == 0 {
			return 1
		}
		return math.MaxFloat64
	}
	return a / b
}

// stddev returns the sample standard deviation of x (divisor n−1), or 0
// for fewer than two values.
func stddev(x []float64) float64 {
	if len(x) < 2 {
		return 0
	}
	return stat.StdDev(x, nil)
}

// median returns the median of x (NaN if empty): the middle value, or the
// average of the two middle values for an even count. It is written out
// because stat.Quantile(0.5, stat.Empirical, ...) returns the lower middle
// value for even counts, which would move the reported median ratios.
func median(x []float64) float64 {
	if len(x) == 0 {
		return math.NaN()
	}
	y := append([]float64(nil), x...)
	sort.Float64s(y)
	n := len(y)
	if n%2 == 1 {
		return y[n/2]
	}
	return 0.5 * (y[n/2-1] + y[n/2])
}

// AzimuthalAverage averages an n×n power spectrum with zero frequency at
// index 0 (unshifted FFT layout) over annuli of unit width in frequency
// pixels. dst must have length n/2+1; bin k holds radii in [k−½, k+½).
// Frequencies beyond n/2 are dropped. It panics if len(power) != n*n or
// len(dst) != n/2+1. dst must not alias power.
func AzimuthalAverage(dst, power []float64, n int) {
	if len(power) != n*n || len(dst) != n/2+1 {
		panic(fmt.Sprintf("compare: AzimuthalAverage lengths %d, %d for n=%d", len(power), len(dst), n))
	}
	var cnt [1024]int
	counts := cnt[:0]
	if n/2+1 <= len(cnt) {
		counts = cnt[:n/2+1]
	} else {
		counts = make([]int, n/2+1)
	}
	for k := range dst {
		dst[k] = 0
	}
	for y := 0; y < n; y++ {
		fy := y
		if fy > n/2 {
			fy -= n
		}
		for x := 0; x < n; x++ {
			fx := x
			if fx > n/2 {
				fx -= n
			}
			k := int(math.Floor(math.Hypot(float64(fx), float64(fy)) + 0.5))
			if k > n/2 {
				continue
			}
			dst[k] += power[y*n+x]
			counts[k]++
		}
	}
	for k := range dst {
		if counts[k] > 0 {
			dst[k] /= float64(counts[k])
		}
	}
}
