package restore

import (
	"context"
	"errors"
	"fmt"
	"io"
	"math"
	"runtime"
	"strings"
	"time"

	"pdwave/infer"
)

// Quality flag bits of PatchResult.Flags.
const (
	FlagFailed   = 1 << iota // the estimator or deconvolution failed; the tile is the raw burst mean
	FlagMetric               // metric ratio above MetricRatioLimit times the field's median (set by Collector.Product)
	FlagCoeffs               // coefficient rms above CoeffRMSLimit times the prior rms
	FlagContrast             // restored contrast below the raw contrast or above ContrastLimit times it
	FlagRinging              // edge ringing above RingingLimit
	FlagLearned              // signal share above infer.LearnedSuspectShare: the learned wavefront is likely much worse than a fit's (set by the engine for the learned estimate without polish only, the case it is calibrated for)
)

// flagNames names each flag bit, in bit order, as every output writes it.
var flagNames = []string{"failed", "metric_vs_field", "coeffs_vs_prior", "contrast_vs_raw", "ringing", infer.FlagLearnedSuspect}

// FlagNames returns the names of the set bits of flags joined with ";"
// (the compare report's separator), or "none".
func FlagNames(flags int) string {
	var out []string
	for i, n := range flagNames {
		if flags&(1<<i) != 0 {
			out = append(out, n)
		}
	}
	if len(out) == 0 {
		return "none"
	}
	return strings.Join(out, ";")
}

// Thresholds of the quality flags (common practice for a first screening,
// not calibrated values). The metric ratio is judged against the field's
// median because model errors (light entering from outside the patch, a PSF
// varying inside it) keep it well above the noise-only value everywhere:
// measured median 36 on simulated 192 px fields (D/r0 ≈ 5.7, 8 frames).
const (
	MetricRatioLimit = 3.0
	CoeffRMSLimit    = 3.0
	ContrastLimit    = 4.0
	RingingLimit     = 2.0
)

// PatchResult is the outcome for one patch.
type PatchResult struct {
	ID     int       // patch id in Grid order
	X0, Y0 int       // patch origin in the field, pixels
	Tile   []float64 // Patch² restored intensities (same units as the focused frames), before blending
	// Coeffs holds the wavefront coefficients in the native basis, frame-major
	// (frames × modes, rad); Noll the Noll-equivalent Zernike coefficients
	// (j = 2..modes+1). Both nil when the engine estimated no wavefront.
	Coeffs, Noll []float64
	Metric       float64 // phase-diversity metric at the solution (engine units; NaN if unknown)
	MetricRatio  float64 // Metric over its noise-only expectation (NaN if unknown)
	CoeffRMS     float64 // rms coefficient over the rms prior standard deviation (NaN if unknown)
	// SignalShare is the share of the frequencies inside the diffraction
	// cut-off whose power exceeds the metric's noise threshold
	// (pd.Objective.MaskShare, with restore's tile window; NaN if unknown).
	SignalShare float64
	Contrast    float64 // rms/mean of the restored tile centre
	RawContrast float64 // rms/mean of the burst-mean focused tile centre
	Ringing     float64 // high-pass rms in the blend band over that in the centre
	Flags       int     // Flag* bits
	Err         string  // engine error message when FlagFailed
}

// Engine restores single patches. Each worker owns one Engine (with its own
// solver, plans and buffers); implementations need not be safe for
// concurrent use but must be deterministic: the result for a patch may not
// depend on which patches the engine saw before.
type Engine interface {
	// Restore estimates the wavefronts of the burst patch data[channel][frame]
	// (Patch² calibrated images, not windowed; the engine applies its own
	// apodisation) and writes the restored object into res.Tile (Patch²,
	// allocated by the caller, same units as the focused frames), plus
	// res.Coeffs, res.Noll, res.Metric, res.MetricRatio and res.CoeffRMS
	// (NaN where unknown). data must not be retained or modified.
	Restore(res *PatchResult, data [][][]float64) error
}

// Options controls Run.
type Options struct {
	Patch, Overlap int // patch side and overlap of neighbours, pixels
	// Workers is the number of goroutines, each with its own Engine; 0 means
	// runtime.NumCPU().
	Workers int
	// NewEngine makes one Engine per worker.
	NewEngine func() (Engine, error)
	Shard     Shard // share of the patches to process; zero = all
	// Journal is a directory where finished patches are recorded in batches
	// (each batch file written atomically); "" disables it. With Resume, the
	// patches recorded there are replayed instead of recomputed.
	Journal string
	Resume  bool // replay the patches recorded in Journal
	// Key identifies the inputs and settings (Identity.Key); resuming from
	// a journal written under another key is refused with what differs
	// (DiffKeys), and a run without Resume refuses a journal that holds
	// finished patches rather than discard them.
	Key string
	// BatchSize is the number of patches per journal batch (0 = 16).
	BatchSize int
	// Progress receives a progress line with an ETA; nil = silent. With
	// ProgressEvery 0 the line is rewritten in place (carriage return, for
	// a terminal) at most every 0.5 s; with ProgressEvery > 0 a whole line
	// is written at most that often, and at the end.
	Progress      io.Writer
	ProgressEvery time.Duration
	// Log receives one-line reports (how many patches a resumed run
	// replayed); nil = silent.
	Log io.Writer
}

// Sink receives finished patches in increasing id order. Run calls it from a
// single goroutine; r and r.Tile are not reused afterwards.
type Sink func(r *PatchResult) error

// Run restores the patches of the shard opt.Shard of the tiling of f with
// opt.Workers engines and hands each result to sink in increasing id order
// (so any accumulation in sink is independent of scheduling). Memory beyond
// the field is bounded by the patches in flight (about 4 per worker). It
// returns the results without tiles, in id order.
func Run(ctx context.Context, f *Field, opt Options, sink Sink) ([]PatchResult, error) {
	g, err := NewGrid(f.Nx, f.Ny, opt.Patch, opt.Overlap)
	if err != nil {
		return nil, err
	}
	if err := opt.Shard.Validate(); err != nil {
		return nil, err
	}
	if opt.NewEngine == nil {
		return nil, errors.New("restore: Run: no engine")
	}
	workers := opt.Workers
	if workers <= 0 {
		workers = runtime.NumCPU()
	}
	lo, hi := opt.Shard.Range(g.Count())
	o := &inOrder{sink: sink, results: make([]PatchResult, 0, hi-lo), next: lo}

	// Journal: replay the finished prefix, then keep recording.
	if err := o.openJournal(opt, lo, hi); err != nil {
		return nil, err
	}
	if o.next == hi {
		if o.jr != nil {
			if err := o.jr.flush(); err != nil {
				return nil, err
			}
		}
		return o.results, nil
	}
	if err := o.runRest(ctx, f, g, opt, workers, lo, hi); err != nil {
		return nil, err
	}
	return o.results, nil
}

// newPatchBuffers returns one worker's patch buffers
// [channel][frame], each n×n.
func newPatchBuffers(frames, n int) [][][]float64 {
	buf := make([][][]float64, 2)
	for c := range buf {
		buf[c] = make([][]float64, frames)
		for j := range buf[c] {
			buf[c][j] = make([]float64, n*n)
		}
	}
	return buf
}

// runPatch extracts patch id, runs the engine and computes the quality
// figures. Engine failures become flagged fallback tiles, not errors. It
// returns nil if ctx is already cancelled.
func runPatch(ctx context.Context, eng Engine, f *Field, g *Grid, id int, buf [][][]float64, raw []float64) *PatchResult {
	n := g.Patch
	x0, y0 := g.Origin(id)
	f.cut(buf, x0, y0, n)
	for y := 0; y < n; y++ {
		copy(raw[y*n:(y+1)*n], f.Mean[(y0+y)*f.Nx+x0:(y0+y)*f.Nx+x0+n])
	}
	if ctx.Err() != nil {
		return nil // cancelled: nothing computed, nothing to record
	}
	r := &PatchResult{ID: id, X0: x0, Y0: y0, Tile: make([]float64, n*n),
		Metric: math.NaN(), MetricRatio: math.NaN(), CoeffRMS: math.NaN(), SignalShare: math.NaN()}
	err := runEngine(eng, r, buf)
	if err == nil {
		for _, v := range r.Tile {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				err = errors.New("non-finite restored pixel")
				break
			}
		}
	}
	if err != nil {
		r.Flags |= FlagFailed
		r.Err = err.Error()
		copy(r.Tile, raw)
	}
	qualityFigures(r, raw, g)
	return r
}

// runEngine runs the engine and turns a panic inside it into an error, so
// one bad patch cannot take the whole field down.
func runEngine(eng Engine, r *PatchResult, data [][][]float64) (err error) {
	defer func() {
		if p := recover(); p != nil {
			err = fmt.Errorf("estimator panicked: %v", p)
		}
	}()
	return eng.Restore(r, data)
}

// qualityFigures fills the image-based quality figures and the flags.
func qualityFigures(r *PatchResult, raw []float64, g *Grid) {
	n := g.Patch
	q := n / 4
	r.Contrast = tileContrast(r.Tile, n, q)
	r.RawContrast = tileContrast(raw, n, q)
	band := max(g.Overlap/2, 2)
	r.Ringing = edgeRinging(r.Tile, n, band)
	if r.CoeffRMS > CoeffRMSLimit {
		r.Flags |= FlagCoeffs
	}
	if r.Flags&FlagFailed == 0 && (r.Contrast < r.RawContrast || r.Contrast > ContrastLimit*r.RawContrast) {
		r.Flags |= FlagContrast
	}
	if r.Ringing > RingingLimit {
		r.Flags |= FlagRinging
	}
	if r.Flags&FlagFailed != 0 {
		r.Flags &^= FlagLearned
	}
}

// tileContrast is the rms over the mean of the centre of an n×n tile
// (border q pixels excluded).
func tileContrast(t []float64, n, q int) float64 {
	var s, s2, c float64
	for y := q; y < n-q; y++ {
		for x := q; x < n-q; x++ {
			v := t[y*n+x]
			s += v
			s2 += v * v
			c++
		}
	}
	m := s / c
	if m == 0 {
		return math.NaN()
	}
	return math.Sqrt(math.Max(s2/c-m*m, 0)) / math.Abs(m)
}

// edgeRinging is the rms of the high-pass image t − box3(t) over the
// outer band of width band, divided by its rms over the rest of the tile.
func edgeRinging(t []float64, n, band int) float64 {
	var eb, ei, cb, ci float64
	for y := 1; y < n-1; y++ {
		for x := 1; x < n-1; x++ {
			var s float64
			for dy := -1; dy <= 1; dy++ {
				for dx := -1; dx <= 1; dx++ {
					s += t[(y+dy)*n+x+dx]
				}
			}
			h := t[y*n+x] - s/9
			if min(x, y, n-1-x, n-1-y) < band {
				eb += h * h
				cb++
			} else {
				ei += h * h
				ci++
			}
		}
	}
	if ei == 0 || ci == 0 || cb == 0 {
		return math.NaN()
	}
	return math.Sqrt((eb / cb) / (ei / ci))
}

// Mosaic accumulates blended tiles into a field. Add the tiles in a fixed
// order (Run's sinks see increasing ids) for bit-identical results. The
// sum of the weights is not stored (it would take another 8 bytes per
// output pixel): Image sums them again over the patches added, in the
// order they were added, so the result is the same to the bit.
type Mosaic struct {
	Grid *Grid     // patch layout and blending weights
	Sum  []float64 // Nx·Ny accumulator of the weighted tiles
	ids  []int     // the patches added, in order
	w    []float64
}

// NewMosaic returns an empty mosaic over g.
func NewMosaic(g *Grid) *Mosaic {
	return &Mosaic{Grid: g, Sum: make([]float64, g.Nx*g.Ny), w: make([]float64, g.Patch*g.Patch)}
}

// Add blends tile (Patch²) of patch id into the mosaic with the weight of
// Grid.Weight. It panics on a wrong tile length or id.
func (m *Mosaic) Add(id int, tile []float64) {
	g := m.Grid
	n := g.Patch
	if len(tile) != n*n {
		panic("restore: Mosaic.Add: wrong tile length")
	}
	g.Weight(m.w, id)
	x0, y0 := g.Origin(id)
	for y := 0; y < n; y++ {
		o := (y0+y)*g.Nx + x0
		for x := 0; x < n; x++ {
			m.Sum[o+x] += m.w[y*n+x] * tile[y*n+x]
		}
	}
	m.ids = append(m.ids, id)
}

// Image writes the blended field Sum/(sum of the weights) into dst (Nx·Ny)
// and returns it (allocating when dst is nil). Pixels no tile reached are
// NaN. dst must not be Sum.
func (m *Mosaic) Image(dst []float64) []float64 {
	if dst == nil {
		dst = make([]float64, len(m.Sum))
	}
	g := m.Grid
	n := g.Patch
	clear(dst) // the sum of the weights first
	for _, id := range m.ids {
		g.Weight(m.w, id)
		x0, y0 := g.Origin(id)
		for y := 0; y < n; y++ {
			o := (y0+y)*g.Nx + x0
			for x, w := range m.w[y*n : (y+1)*n] {
				dst[o+x] += w
			}
		}
	}
	for i, s := range m.Sum {
		if dst[i] > 0 {
			dst[i] = s / dst[i]
		} else {
			dst[i] = math.NaN()
		}
	}
	return dst
}

// patchProgress writes "restore: k/n patches, elapsed, ETA" lines.
type patchProgress struct {
	w          io.Writer
	every      time.Duration // 0: rewrite in place every 0.5 s; > 0: whole lines
	total, k   int
	start      int
	t0, last   time.Time
	wroteEnded bool
}

// newProgress returns a progress writer for total patches of which
// done are already finished (replayed); w nil writes nothing. every is
// Options.ProgressEvery.
func newProgress(w io.Writer, every time.Duration, total, done int) *patchProgress {
	now := time.Now()
	return &patchProgress{w: w, every: every, total: total, k: done, start: done, t0: now, last: now}
}

// step counts one more finished patch and, at most every 0.5 s (or every
// p.every) and at the last patch, writes the progress line with the ETA
// from the patches computed in this run.
func (p *patchProgress) step() {
	p.k++
	if p.w == nil {
		return
	}
	now := time.Now()
	gap := p.every
	if gap <= 0 {
		gap = 500 * time.Millisecond
	}
	if now.Sub(p.last) < gap && p.k < p.total {
		return
	}
	p.last = now
	el := now.Sub(p.t0).Seconds()
	eta := math.NaN()
	if p.k > p.start {
		eta = el / float64(p.k-p.start) * float64(p.total-p.k)
	}
	line := fmt.Sprintf("restore: %d/%d patches (%.0f%%), %.1f s elapsed, ETA %.1f s", p.k, p.total, 100*float64(p.k)/float64(max(p.total, 1)), el, eta)
	if p.every > 0 {
		fmt.Fprintln(p.w, line)
		return
	}
	fmt.Fprintf(p.w, "\r%s   ", line)
	p.wroteEnded = true
}

// finish ends the progress line, if one was rewritten in place.
func (p *patchProgress) finish() {
	if p.w != nil && p.wroteEnded {
		fmt.Fprintln(p.w)
	}
}
