package restore

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"runtime/debug"
	"strconv"
	"strings"
	"time"

	"pdwave/infer"
	"pdwave/internal/atomicfile"
	"pdwave/internal/outpath"
	"pdwave/model/burst"
	"pdwave/model/fits"
	"pdwave/model/instrument"
	"pdwave/model/net"
	"pdwave/model/site"
)

// Job is one invocation of the restore command: inputs, settings and where
// the outputs go. The command line fills it; Run does the work.
type Job struct {
	// Inputs are burst files: 4-D cubes, or (with Pairs) focused/defocused
	// 3-D files alternating.
	Inputs []string
	Pairs  bool // Inputs are focused/defocused pairs of 3-D files
	// Reading says how bursts are read (image HDUs, limits); each input
	// may join several files with '+' (burst.ReadRef).
	Reading burst.Options
	// Out is the output FITS file for a single burst, or a directory (made
	// if needed) for several: DIR/<input name>_restored.fits. Shard runs
	// write partial files instead (same names with .part).
	Out       string
	Site      *site.Site // nil: optics from the burst headers, sizes and seeing defaults
	Model     *net.Model // learned estimator; nil = none
	ModelFrom string     // where the weights came from (provenance)
	// ModelOptional marks built-in weights: if they do not fit the data,
	// the classical fit is used (with a note on Log) instead of an error.
	ModelOptional bool
	// Flags are the instrument values given on the command line (the
	// patch side, ...); they take precedence over header, weights and site.
	Flags    instrument.Partial
	Overlap  int       // < 0 = patch/4
	Polish   int       // classical iterations after the learned estimate
	Turns    int       // symmetries of the square the learned estimate averages over (1, 4, 8; 0 = 1)
	Fit      bool      // full classical fit instead of the learned estimate
	NoAlign  bool      // measure but do not remove the channel offset
	Offset   *Offset   // known channel offset (pixels) instead of measuring; nil = measure
	Shard    Shard     // share of the patches to restore; zero = all
	Resume   bool      // continue from the journal next to Out
	Workers  int       // goroutines; 0 = all cores
	Progress io.Writer // progress lines; nil = silent
	// ProgressEvery > 0 writes whole progress lines at most that often
	// (for logs); 0 rewrites one line in place (for a terminal).
	ProgressEvery time.Duration
	Log           io.Writer // one-line reports (offset, timing); nil = silent
	Version       string    // program version for the provenance cards
	Command       string    // command line for the provenance cards
	SiteFile      string    // the site file Site was read from, if any (checked as an input)
	WeightsFile   string    // the weight file Model was read from, if any (checked as an input)

	// Calib names each camera's dark, flat and bad-pixel map (applied as
	// the bursts are read, before the camera geometry); zero = none.
	Calib CalibFiles
	// GCHeadroom > 0 bounds the garbage the Go collector lets accumulate
	// while a burst is restored to about this many bytes instead of the
	// default 100 % of the live heap (which would double the memory the
	// field takes): the collector's percentage is set from the burst's
	// file sizes (see gcPercent) for each burst and restored afterwards.
	// It changes the whole process's collector (runtime/debug); the
	// command sets it unless GOGC is given. 0 leaves the collector alone.
	GCHeadroom int64

	hashes      map[string]string // content hashes of the files read, by path
	weightsHash string            // content hash of Model, once computed
}

// unit is one burst of a job: its name (the focused file), its file or
// files, the output it is restored into, and the other spellings of its
// file that were given.
type unit struct {
	name, a, b, out string
	again           []string
}

// units lists the bursts of the job with their outputs. One file given
// twice (under any spelling) is one burst, restored once.
func (j *Job) units() ([]unit, error) {
	var units []unit
	if j.Pairs {
		if len(j.Inputs) == 0 || len(j.Inputs)%2 != 0 {
			return nil, fmt.Errorf("restore: --pairs needs focused/defocused files two by two, got %d files", len(j.Inputs))
		}
		for i := 0; i < len(j.Inputs); i += 2 {
			if outpath.SameFile(j.Inputs[i], j.Inputs[i+1]) {
				return nil, fmt.Errorf("restore: --pairs: %s is given as its own defocused channel (%s)", j.Inputs[i], j.Inputs[i+1])
			}
			units = append(units, unit{name: j.Inputs[i], a: j.Inputs[i], b: j.Inputs[i+1]})
		}
	} else {
		if len(j.Inputs) == 0 {
			return nil, errors.New("restore: no burst files given")
		}
	next:
		for _, in := range j.Inputs {
			for k := range units {
				if outpath.SameFile(units[k].a, in) {
					units[k].again = append(units[k].again, in)
					continue next
				}
			}
			units = append(units, unit{name: in, a: in})
		}
	}
	for k := range units {
		units[k].out = j.outFor(units[k].name, len(units) > 1)
	}
	return units, nil
}

// outFor returns the file the burst named name is restored into: the
// product, Out itself for a single burst or a file in the folder Out named
// after the burst, or with a partial shard that product's part file
// (PartPath).
func (j *Job) outFor(name string, several bool) string {
	out := j.Out
	if several {
		base := strings.TrimSuffix(filepath.Base(name), filepath.Ext(name))
		out = filepath.Join(j.Out, base+"_restored.fits")
	}
	if j.Shard.Partial() {
		return PartPath(out, j.Shard)
	}
	return out
}

// Outputs returns every file and folder a run of the job for out may
// write: the product and its sidecars (or the part file), the journal
// folder and the lock file.
func (j *Job) outputs(out string) (files, dirs []string) {
	if j.Shard.Partial() {
		files = []string{out}
	} else {
		files = ProductPaths(out)
	}
	return append(files, outpath.LockPath(out)), []string{JournalPath(out)}
}

// JournalPath returns the journal folder of the output out.
func JournalPath(out string) string { return out + ".journal" }

// checkPaths refuses, before any work, outputs that are inputs, are not
// regular files (or folders where folders go), hold inputs, or clash
// (see internal/outpath).
func (j *Job) checkPaths(units []unit) error {
	p := outpath.New("restore").Input(j.Inputs...).Input(j.Calib.Paths()...).Input(j.SiteFile, j.WeightsFile)
	if len(units) > 1 {
		p.Dir(j.Out)
		if !j.Shard.Partial() {
			p.File(filepath.Join(j.Out, SeriesFile))
		}
	}
	for _, u := range units {
		files, dirs := j.outputs(u.out)
		for _, f := range files {
			p.File(f)
		}
		for _, d := range dirs {
			p.Dir(d)
		}
	}
	return p.Err()
}

// logf writes a line to j.Log, if set.
func (j *Job) logf(format string, a ...any) {
	if j.Log != nil {
		fmt.Fprintf(j.Log, format, a...)
	}
}

// Check validates the job's output, shard and inputs and checks the
// outputs against the inputs (internal/outpath: no output may be an input
// under any spelling, or a device or folder where a file goes, or a folder
// holding an input; no two outputs may share a name), without reading or
// writing anything. Run calls it first.
func (j *Job) Check() error {
	_, err := j.checked()
	return err
}

// checked is Check returning the job's units.
func (j *Job) checked() ([]unit, error) {
	if j.Out == "" {
		return nil, errors.New("restore: no output (--out)")
	}
	if err := j.Shard.Validate(); err != nil {
		return nil, err
	}
	units, err := j.units()
	if err != nil {
		return nil, err
	}
	return units, j.checkPaths(units)
}

// Run restores every burst of the job in turn, after Check.
func (j *Job) Run(ctx context.Context) error {
	units, err := j.checked()
	if err != nil {
		return err
	}
	if len(units) > 1 {
		if err := os.MkdirAll(j.Out, 0o755); err != nil {
			return fmt.Errorf("restore: creating %s: %w", j.Out, err)
		}
	}
	cal, err := LoadCalibrations(j.Calib)
	if err != nil {
		return err
	}
	if cal != nil && j.Log != nil {
		fmt.Fprintf(j.Log, "restore: bad pixels %s\n", cal.BadSetting())
	}
	series := len(units) > 1 && !j.Shard.Partial()
	for _, u := range units {
		for _, a := range u.again {
			j.logf("restore: %s is %s given again; restoring it once\n", a, u.a)
		}
		req, err := j.request(u)
		if err != nil {
			return err
		}
		if (series || j.Resume) && !j.Shard.Partial() && j.done(u, req) {
			j.logf("restore: %s: already restored from the same inputs and settings; skipped\n", u.out)
		} else if err := j.unit(ctx, u, cal, req); err != nil {
			return err
		}
		if series {
			if err := j.writeSeries(units); err != nil {
				return err
			}
		}
	}
	if series {
		j.logf("restore: series of %d bursts summarised in %s\n", len(units), filepath.Join(j.Out, SeriesFile))
	}
	return nil
}

// unit restores one burst: it takes the output's lock, reads the burst
// (calibrated by cal, nil = none, as it is read) and restores it.
func (j *Job) unit(ctx context.Context, u unit, cal *Calibrations, req string) error {
	l, err := j.lock(u.out)
	if err != nil {
		return err
	}
	defer l.Release()
	if j.GCHeadroom > 0 {
		defer debug.SetGCPercent(debug.SetGCPercent(gcPercent(j.GCHeadroom, u)))
	}
	var b *burst.Burst
	inputs := []string{u.a}
	opt := j.Reading
	opt.Quantise16 = true // the field held once, as 16-bit scaled integers (Field.Data)
	if cal != nil {
		opt.Calibrate = cal
	}
	if u.b != "" {
		b, err = burst.ReadPairWith(u.a, u.b, opt)
		inputs = append(inputs, u.b)
	} else {
		b, err = burst.ReadRef(u.a, opt)
	}
	if err != nil {
		return err
	}
	if err := j.one(ctx, b, cal, inputs, u.out, req); err != nil {
		return fmt.Errorf("restoring %s: %w", u.name, err)
	}
	return nil
}

// gcPercent returns the collector percentage that keeps the garbage of
// restoring u near headroom bytes: the field is held as 16-bit scaled
// integers (the bytes of 16-bit files, half those of float32 ones; more
// for compressed files, where the estimate is low and the collector runs
// less often than intended) beside output-sized arrays, so the live heap
// is taken as twice the input files' size. It lies in 10..100.
func gcPercent(headroom int64, u unit) int {
	var size int64
	for _, p := range append(burst.SplitRef(u.a), u.b) {
		if st, err := os.Stat(p); err == nil && p != "" {
			size += st.Size()
		}
	}
	if size <= 0 {
		return 100
	}
	return int(min(100, max(10, 100*headroom/(2*size))))
}

// Configure returns the fit configuration and wavefront method for a burst
// with the given header optics and frame count, following the job's
// settings: the instrument is resolved once (instrument.Resolve over the
// job's flags, the header, the weights when a network is used, and the
// site), and the weights are checked against it (instrument.Compatible).
// Built-in weights (ModelOptional) that do not fit give way to the
// classical fit with a note on Log.
func (j *Job) Configure(o burst.Optics, frames int) (infer.Config, Method, error) {
	src := instrument.Sources{Flags: j.Flags, Header: infer.HeaderInstrument(o)}
	if j.Site != nil {
		src.Site = j.Site.Instrument()
	}
	if j.Fit || j.Model == nil {
		cfg, err := infer.ConfigFor(src, frames)
		return cfg, Method{Name: "fit"}, j.hint(err)
	}
	cfg, used, note, err := infer.ConfigWithWeights(src, frames, j.Model, j.ModelOptional)
	if err != nil {
		return cfg, Method{}, j.hint(err)
	}
	if !used {
		if j.Log != nil {
			fmt.Fprintf(j.Log, "restore: built-in weights not used (%s); classical fit in every patch\n", note)
		}
		return cfg, Method{Name: "fit"}, nil
	}
	l, err := NewNetwork(j.Model, cfg)
	if err != nil {
		return cfg, Method{}, err
	}
	if err := l.SetTurns(max(j.Turns, 1)); err != nil {
		return cfg, Method{}, fmt.Errorf("restore: %w", err)
	}
	m := Method{Start: l, Polish: j.Polish, Name: "learned"}
	if j.Polish > 0 {
		m.Name = fmt.Sprintf("learned+polish %d", j.Polish)
	}
	return cfg, m, nil
}

// hint adds to a configuration error the advice to give a site file when
// there is none.
func (j *Job) hint(err error) error {
	switch {
	case err == nil:
		return nil
	case j.Site == nil:
		return fmt.Errorf("restore: %w; give a site file (--site)", err)
	}
	return fmt.Errorf("restore: %w", err)
}

// removeStale removes the temporaries an interrupted run left beside the
// outputs of out (the product and its sidecars, or the part file).
func removeStale(out string) error {
	for _, p := range append(ProductPaths(out), out) {
		if _, err := atomicfile.RemoveStale(p); err != nil {
			return err
		}
	}
	return nil
}

// lock takes the lock of the output out (see outpath.Acquire), reporting a
// takeover on Log, and removes the temporaries an interrupted run left.
func (j *Job) lock(out string) (*outpath.Lock, error) {
	l, note, err := outpath.Acquire(outpath.LockPath(out), j.Command)
	if err != nil {
		return nil, fmt.Errorf("restore: %s: %w", out, err)
	}
	if note != "" {
		j.logf("restore: %s\n", note)
	}
	if err := removeStale(out); err != nil {
		l.Release()
		return nil, err
	}
	return l, nil
}

// one restores one burst into out.
func (j *Job) one(ctx context.Context, b *burst.Burst, cal *Calibrations, inputs []string, out, req string) error {
	t0 := time.Now()
	cfg, method, err := j.Configure(b.Optics, b.Frames)
	if err != nil {
		return err
	}
	overlap := j.Overlap
	if overlap < 0 {
		overlap = cfg.Patch / 4
	}
	if _, err := NewGrid(b.Nx, b.Ny, cfg.Patch, overlap); err != nil {
		return err
	}
	field, off, err := Prepare(b, nil, &Coreg{Fixed: j.Offset, Fit: &cfg}, !j.NoAlign, j.Workers)
	if err != nil {
		return err
	}
	if j.Log != nil {
		j.logOffset(off)
	}
	phys, err := NewFieldSetup(cfg, method)
	if err != nil {
		return err
	}
	meta := j.meta(b, cal, cfg, method, overlap, off, field, inputs)
	id, err := j.identity(inputs, method, meta.Settings)
	if err != nil {
		return err
	}
	meta.Key = id.Key()
	recordIdentity(meta.Settings, id)
	meta.Settings["request"] = req
	// The command line itself may differ between shards and the merge; it
	// is recorded but not part of the key.
	opt := Options{Patch: cfg.Patch, Overlap: overlap, Workers: j.Workers, NewEngine: phys.NewEngine,
		Shard: j.Shard, Journal: out + ".journal", Resume: j.Resume, Key: meta.Key, Progress: j.Progress, ProgressEvery: j.ProgressEvery, Log: j.Log}
	g, _ := NewGrid(b.Nx, b.Ny, cfg.Patch, overlap)
	results, err := j.runPatches(ctx, field, opt, g, meta, out)
	if ie := (*Interrupted)(nil); errors.As(err, &ie) {
		ie.Out = out
	}
	if err != nil {
		return err
	}
	if err := removeJournal(opt.Journal); err != nil {
		return err
	}
	if j.Log != nil {
		j.logDone(out, results, method.Name, t0)
	}
	return nil
}

// meta returns the provenance of one burst's restoration: its settings
// (command, estimator, sizes, prior, offset and how it was found,
// calibration, inputs), the header cards of the optics used and the mean
// image.
func (j *Job) meta(b *burst.Burst, cal *Calibrations, cfg infer.Config, method Method, overlap int, off Coregistration, field *Field, inputs []string) *Meta {
	settings := map[string]string{
		"command":   j.Command,
		"estimator": method.Name,
		"patch":     strconv.Itoa(cfg.Patch),
		"overlap":   strconv.Itoa(overlap),
		"polish":    strconv.Itoa(j.Polish),
		"turns":     strconv.Itoa(max(j.Turns, 1)),
		"basis":     string(cfg.Basis),
		"modes":     strconv.Itoa(cfg.Modes),
		"frames":    strconv.Itoa(cfg.Frames),
		"d_over_r0": strconv.FormatFloat(cfg.DOverR0, 'g', 6, 64),
		"prior":     strconv.FormatFloat(cfg.Prior, 'g', 6, 64),
		"diversity": strconv.FormatFloat(cfg.SecondDiversity(), 'g', 6, 64),
		"from":      cfg.Notes.String(),
		"align":     strconv.FormatBool(!j.NoAlign),
		"offset":    fmt.Sprintf("%.4f,%.4f", off.DX, off.DY),
		"offset_by": off.Method,
		"inputs":    strings.Join(inputs, ","),
	}
	if j.ModelFrom != "" && method.Start != nil {
		settings["weights"] = j.ModelFrom
	}
	for k, v := range j.Calib.Settings() {
		settings[k] = v
	}
	if b.Geometry != "" {
		settings["geometry"] = b.Geometry
	}
	settings["masked"] = fmt.Sprintf("%d px in channel 1, %d px in channel 2 (all frames)", b.Masked[0], b.Masked[1])
	calNote := ""
	var calCards []fits.Card
	if cal != nil {
		calNote, calCards = cal.Note(), cal.Cards()
		settings["bad_pixels"] = cal.BadSetting()
	}
	tel := cfg.Telescope
	cards := append(append(append([]fits.Card{}, b.Cards...), calCards...),
		fits.Card{Key: "WAVELNTH", Value: tel.Wavelength * 1e9, Comment: "wavelength used, nm"},
		fits.Card{Key: "WAVEUNIT", Value: -9, Comment: "WAVELNTH in units of 10^-9 m"},
		fits.Card{Key: "TELDIAM", Value: tel.Diameter, Comment: "aperture diameter used, m"},
		fits.Card{Key: "OBSCUR", Value: tel.Obscuration, Comment: "central obscuration used, fraction of diameter"},
		fits.Card{Key: "DIVPV", Value: cfg.SecondDiversity(), Comment: "defocus of channel 2 used, waves PV"},
		fits.Card{Key: "PDSHMETH", Value: off.Method, Comment: "how the defocused channel offset was found"})
	return &Meta{Nx: b.Nx, Ny: b.Ny, Frames: b.Frames, Patch: cfg.Patch, Overlap: overlap,
		Basis: string(cfg.Basis), Modes: cfg.Modes, Estimator: method.Name, ShiftX: off.DX, ShiftY: off.DY,
		Cards: cards, Settings: settings, Mean: field.Mean, Inputs: inputs, CalibrationNotes: calNote}
}

// runPatches restores the patches of field, into a shard part when the job
// is sharded, else into the finished product at out.
func (j *Job) runPatches(ctx context.Context, field *Field, opt Options, g *Grid, meta *Meta, out string) ([]PatchResult, error) {
	if j.Shard.Partial() {
		lo, hi := j.Shard.Range(g.Count())
		w, err := CreatePart(out, meta, j.Shard, lo, hi)
		if err != nil {
			return nil, err
		}
		results, err := Run(ctx, field, opt, w.Write)
		if err != nil {
			w.Abort()
			return nil, err
		}
		return results, w.Close()
	}
	col := NewCollector(g)
	results, err := Run(ctx, field, opt, col.Add)
	if err != nil {
		return nil, err
	}
	return results, col.Product(meta).Write(out, j.Version)
}

// logDone writes the summary line of one burst to j.Log.
func (j *Job) logDone(out string, results []PatchResult, name string, t0 time.Time) {
	failed := 0
	for _, r := range results {
		if r.Flags&FlagFailed != 0 {
			failed++
		}
	}
	fmt.Fprintf(j.Log, "restore: %s: %d patches (%s) in %.1f s, %d failed\n", out, len(results), name, time.Since(t0).Seconds(), failed)
}

// logOffset writes the channel offset line of one burst to j.Log.
func (j *Job) logOffset(off Coregistration) {
	done := " removed"
	if j.NoAlign {
		done = " not removed"
	}
	spread := ""
	if len(off.Patches) > 0 {
		spread = fmt.Sprintf(", spread ±(%.3f, %.3f) px, %.1f s", off.Spread.DX, off.Spread.DY, off.Elapsed.Seconds())
	}
	fmt.Fprintf(j.Log, "restore: defocused channel offset (%.3f, %.3f) px (%s%s),%s\n", off.DX, off.DY, off.Method, spread, done)
}

// identity returns what the restoration of the burst files inputs depends
// on: their content, that of the dark, flat and site files, the weights'
// if the network is used, and the settings without the command line and
// file names.
func (j *Job) identity(inputs []string, method Method, settings map[string]string) (Identity, error) {
	var id Identity
	files := []struct{ role, path string }{{"burst", inputs[0]}}
	if len(inputs) > 1 {
		files = append(files, struct{ role, path string }{"defocused", inputs[1]})
	}
	files = append(files, []struct{ role, path string }{{"site", j.SiteFile}}...)
	for _, r := range j.Calib.Roles() {
		files = append(files, struct{ role, path string }{r.Role, r.Path})
	}
	for _, f := range files {
		if f.path == "" {
			continue
		}
		h, err := j.hash(f.path)
		if err != nil {
			return id, err
		}
		id.Files = append(id.Files, FileID{Role: f.role, Name: f.path, Hash: h})
	}
	id.Weights = "none"
	if method.Start != nil && j.Model != nil {
		if j.weightsHash == "" {
			h, err := HashWeights(j.Model)
			if err != nil {
				return id, err
			}
			j.weightsHash = h
		}
		id.Weights = j.weightsHash
	}
	id.Settings = map[string]string{}
	for k, v := range settings {
		switch k {
		case "command", "inputs", "dark", "flat", "bad_map", "weights":
		default:
			id.Settings[k] = v
		}
	}
	return id, nil
}

// hash returns HashFile of path, once per path and job.
func (j *Job) hash(path string) (string, error) {
	if h, ok := j.hashes[path]; ok {
		return h, nil
	}
	h, err := HashFile(path)
	if err != nil {
		return "", err
	}
	if j.hashes == nil {
		j.hashes = map[string]string{}
	}
	j.hashes[path] = h
	return h, nil
}

// recordIdentity adds the content hashes of id to the provenance settings
// ("sha256 <role>", "sha256 weights").
func recordIdentity(settings map[string]string, id Identity) {
	for _, f := range id.Files {
		settings["sha256 "+f.Role] = strings.TrimPrefix(f.Hash, "sha256:")
	}
	if w, ok := strings.CutPrefix(id.Weights, "sha256:"); ok {
		settings["sha256 weights"] = w
	}
}

// CheckMerge checks, before a merge reads anything, that its outputs (the
// product at out and its sidecars) are none of the parts, regular files
// where they exist, and distinct (internal/outpath).
func CheckMerge(parts []string, out string) error {
	p := outpath.New("restore merge").Input(parts...)
	for _, f := range append(ProductPaths(out), outpath.LockPath(out)) {
		p.File(f)
	}
	return p.Err()
}

// MergeParts returns the part files to merge into out: parts if any are
// given, else the files matching PartGlob(out) (an error if there are
// none).
func MergeParts(parts []string, out string) ([]string, error) {
	if len(parts) > 0 {
		return parts, nil
	}
	found, err := filepath.Glob(PartGlob(out))
	if err != nil || len(found) == 0 {
		return nil, fmt.Errorf("restore merge: no part files %s (run \"pdwave restore --shard i/n --out %s\" for every i, or name the parts)", PartGlob(out), out)
	}
	return found, nil
}

// MergeFiles assembles the part files of a sharded restoration into the
// same output a single run writes (FITS product and sidecars, identical
// pixels and patch table) at out, and returns the product. The
// provenance records command as the command and every shard's command. It
// runs CheckMerge first and holds the output's lock while it writes.
func MergeFiles(parts []string, out, version, command string) (*Product, error) {
	if err := CheckMerge(parts, out); err != nil {
		return nil, err
	}
	l, _, err := outpath.Acquire(outpath.LockPath(out), command)
	if err != nil {
		return nil, fmt.Errorf("restore merge: %s: %w", out, err)
	}
	defer l.Release()
	if err := removeStale(out); err != nil {
		return nil, err
	}
	var col *Collector
	meta, _, err := Merge(parts, func(_ *Meta, g *Grid) (Sink, error) {
		col = NewCollector(g)
		return col.Add, nil
	})
	if err != nil {
		return nil, err
	}
	meta.Settings["command"] = command
	p := col.Product(meta)
	if err := p.Write(out, version); err != nil {
		return nil, err
	}
	return p, nil
}
