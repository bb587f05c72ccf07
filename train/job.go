package train

import (
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"time"

	"pdwave/internal/atomicfile"
	"pdwave/internal/outpath"
	"pdwave/model/burst"
	"pdwave/model/instrument"
	"pdwave/model/modes"
	"pdwave/model/net"
	"pdwave/model/site"
	"pdwave/simulate"
)

// Job is one training run as the command line describes it.
type Job struct {
	Site   string // site file (optics, seeing, sizes); required
	Out    string // run directory; required
	Data   string // folder of burst FITS files to train on; "" = simulate from the site
	Resume bool   // continue the run checkpointed in Out
	// Steps is the number of optimiser steps; 0 uses 2000, or with Resume
	// the checkpoint's plan. With Resume, another value continues the run
	// to that step (the learning-rate schedule is stretched to end there).
	Steps      int
	Batch      int     // bursts per step; 0 uses 4
	Seed       uint64  // weights and data order
	WarmStart  int     // supervised steps on simulated truth first
	Modes      int     // 0 = the site's
	Basis      string  // "" = the site's
	Workers    int     // 0 = all cores
	LR         float64 // 0 uses DefaultLR
	Prior      float64 // prior weight; 0 uses the fit's (pd.DefaultSettings)
	Gamma      float64 // regulariser of the metric's object estimate; 0 uses the fit's (pd.DefaultSettings)
	Init       string  // weights file to start from (fine-tuning); "" = fresh weights from Seed
	Conv       []int   // channels of the convolutions; nil = net.DefaultArch's (ignored with Init)
	Hidden     int     // per-frame feature count; 0 = net.DefaultArch's
	Head       int     // head width; 0 = net.DefaultArch's
	Reuse      int     // uses of each simulated burst under flips/rotations (1–8); 0 uses 4
	Validation int     // validation bursts (simulated at the median r0, the camera's photons and the default contrast, over Scenes, with truth); 0 uses 32, < 0 none
	// Scenes chooses the objects of simulated bursts (training and
	// validation): ScenesMix (the default, ""), ScenesGranulation or
	// ScenesReal. Real and mixed scenes read the FITS images of SceneDir
	// ("" = simulate.FindSceneDir(): $PDWAVE_SCENES or testdata/scenes).
	Scenes   string
	SceneDir string
	// R0Margin widens the r0 distribution of training bursts: ln r0 is
	// drawn with R0Margin × the site's spread; 0 uses DefaultR0Margin
	// (1.25), 1 draws from the site's distribution.
	R0Margin float64
	// Photons is the range of the training bursts' photon level as factors
	// on the camera's, drawn log-uniformly; zero uses DefaultPhotons
	// (×0.5–×2), {1, 1} the camera's level.
	Photons [2]float64
	// Contrast is the range of the training scenes' diffraction-limited rms
	// contrast, drawn uniformly; zero uses DefaultContrast (0.08–0.16),
	// {0.12, 0.12} the simulator's default.
	Contrast [2]float64
	MaxWall  time.Duration // stop after this much wall time (checkpointed; resume later); 0 = none
	// Referee, if set, builds the classical fit that validation scores the
	// network against on the first RefereeBursts validation bursts (0 uses
	// 8; < 0 none).
	Referee       func(Setup) (Referee, error)
	RefereeBursts int
	Progress      io.Writer // progress lines; nil = none
	// Stop, when closed, ends the run after the step in progress with a
	// checkpoint and an *Interrupted error (RunOptions.Stop); nil = never.
	Stop    <-chan struct{}
	Command string // command line, recorded in the weights
	Version string // program version, recorded in the weights

	data  SimData        // the variety of simulated bursts in use (from the settings above, or the checkpoint's)
	scene simulate.Scene // the scene source of data (nil = granulation)
}

// Run executes the job and returns the last validation.
func (j Job) Run() (Validation, error) {
	if err := j.setDefaults(); err != nil {
		return Validation{}, err
	}
	// A run folder that exists is locked before anything is read from it;
	// a new one when it is made (makeOut).
	lock, err := j.lockExisting()
	if err != nil {
		return Validation{}, err
	}
	defer func() { lock.Release() }()
	st, setup, simCfg, init, err := j.problem()
	if err != nil {
		return Validation{}, err
	}
	sim, err := simulate.New(simCfg)
	if err != nil {
		return Validation{}, err
	}
	// On resume the checkpoint's settings rule; the sources are rebuilt from
	// them so the data stream continues where it stopped.
	var res *Resumed
	if j.Resume {
		if res, err = Resume(j.Out, nil, j.Workers); err != nil {
			return Validation{}, err
		}
		defer res.Close()
		if setup, sim, err = j.adoptCheckpoint(res, simCfg, sim); err != nil {
			return Validation{}, err
		}
	}
	src, err := j.source(sim, st, setup)
	if err != nil {
		return Validation{}, err
	}
	opts := RunOptions{Out: j.Out, Progress: j.Progress, MaxWall: j.MaxWall, Stop: j.Stop}
	t, err := j.trainer(res, &opts, setup, init, src)
	if err != nil {
		return Validation{}, err
	}
	if res == nil {
		defer t.Close()
	}
	m := t.Model()
	data := j.recordTraining(m, st)
	if err := j.validationSet(&opts, sim, setup); err != nil {
		return Validation{}, err
	}
	if j.Progress != nil && res == nil {
		fmt.Fprintf(j.Progress, "training %d weights on %s: %d steps of %d bursts (%d×%d px, %d frames, %d %s modes)\n",
			m.NumParams(), data, t.Config().Steps, t.Config().Batch, setup.Patch, setup.Patch, setup.Frames, setup.Modes, setup.Basis)
	}
	if err := j.makeOut(opts.Validation, &lock); err != nil {
		return Validation{}, err
	}
	return t.Run(opts)
}

// trainer returns the resumed run's trainer on the source src, with the
// record carried into opts and the step target of continueTo, or without
// res a fresh trainer (newTrainer).
func (j Job) trainer(res *Resumed, opts *RunOptions, setup Setup, init *net.Model, src Source) (*Trainer, error) {
	if res == nil {
		return j.newTrainer(setup, init, src)
	}
	t := res.Trainer
	if err := j.sameArch(t.Model().Arch); err != nil {
		return nil, err
	}
	t.src = src
	opts.History, opts.Vals, opts.Seconds = res.History, res.Vals, res.Seconds
	return t, j.continueTo(t)
}

// sameArch checks the architecture flags given with Resume (Conv, Hidden,
// Head; unset ones are not checked) against the checkpoint's network a.
func (j Job) sameArch(a net.Arch) error {
	diff := func(flag string, want, have any) error {
		return fmt.Errorf("train: --%s %v differs from the checkpoint's network in %s (%v); resume without it or train into a new folder", flag, want, j.Out, have)
	}
	if j.Conv != nil && fmt.Sprint(j.Conv) != fmt.Sprint(a.Conv) {
		return diff("conv", j.Conv, a.Conv)
	}
	if j.Hidden != 0 && j.Hidden != a.Hidden {
		return diff("hidden", j.Hidden, a.Hidden)
	}
	if j.Head != 0 && j.Head != a.Head {
		return diff("head", j.Head, a.Head)
	}
	return nil
}

// continueTo sets the resumed trainer t to run to j.Steps, if given, and
// says where the run resumes and where it goes. A target at or below the
// step already reached is an error.
func (j Job) continueTo(t *Trainer) error {
	planned := t.cfg.Steps
	if j.Steps > 0 && j.Steps != planned {
		if j.Steps <= t.step {
			return fmt.Errorf("train: --steps %d: the run in %s is already at step %d (of %d planned)", j.Steps, j.Out, t.step, planned)
		}
		t.cfg.Steps = j.Steps
		if j.Progress != nil {
			fmt.Fprintf(j.Progress, "resuming %s at step %d: continuing to step %d as --steps asks (the checkpoint planned %d; the learning-rate schedule now ends at step %d)\n",
				j.Out, t.step, j.Steps, planned, j.Steps)
		}
		return nil
	}
	if j.Progress != nil {
		fmt.Fprintf(j.Progress, "resuming %s at step %d of %d\n", j.Out, t.step, planned)
	}
	return nil
}

// LockFile is the lock file inside a run folder that keeps a second run off
// it (internal/outpath.Acquire).
const LockFile = "train.lock"

// lockExisting takes the run folder's lock if the folder exists (nil, nil
// otherwise).
func (j Job) lockExisting() (*outpath.Lock, error) {
	if st, err := os.Stat(j.Out); err != nil || !st.IsDir() {
		return nil, nil
	}
	return j.lock()
}

// lock takes the run folder's lock, reporting a takeover on Progress.
func (j Job) lock() (*outpath.Lock, error) {
	l, note, err := outpath.Acquire(filepath.Join(j.Out, LockFile), j.Command)
	if err != nil {
		return nil, fmt.Errorf("train: %s: %w", j.Out, err)
	}
	if note != "" && j.Progress != nil {
		fmt.Fprintf(j.Progress, "train: %s\n", note)
	}
	return l, nil
}

// makeOut creates the run directory, takes its lock unless *lock holds it
// already, removes the temporaries an interrupted run left in it and lists
// the validation bursts in it (ValidationFile).
func (j Job) makeOut(val []*Sample, lock **outpath.Lock) error {
	if err := os.MkdirAll(j.Out, 0o755); err != nil {
		return fmt.Errorf("train: output folder: %w", err)
	}
	if *lock == nil {
		l, err := j.lock()
		if err != nil {
			return err
		}
		*lock = l
	}
	for _, n := range []string{WeightsFile, LossPlot, HistoryFile, CheckpointWeights, CheckpointState, ValidationFile} {
		if _, err := atomicfile.RemoveStale(filepath.Join(j.Out, n)); err != nil {
			return fmt.Errorf("train: %w", err)
		}
	}
	return writeValidationList(filepath.Join(j.Out, ValidationFile), val)
}

// setDefaults fills the zero settings with their defaults (2000 steps,
// batch 4, learning rate DefaultLR, reuse 4, 32 validation bursts, mixed
// scenes, r0 margin 1.25, photons ×0.5–×2, contrast 0.08–0.16) and
// rejects a missing site or output folder, a reuse outside 1–8, a negative
// or non-finite gamma and an unknown scene choice or bad range.
func (j *Job) setDefaults() error {
	if j.Site == "" || j.Out == "" {
		return fmt.Errorf("train: a site file and an output folder are required")
	}
	if j.Steps < 0 {
		return fmt.Errorf("train: %d steps", j.Steps)
	}
	if j.Steps == 0 && !j.Resume {
		j.Steps = 2000
	}
	if j.Batch == 0 {
		j.Batch = 4
	}
	if j.LR == 0 {
		j.LR = DefaultLR
	}
	if j.Reuse == 0 {
		j.Reuse = 4
	}
	if j.Reuse < 1 || j.Reuse > 8 {
		return fmt.Errorf("train: reuse %d outside 1–8", j.Reuse)
	}
	if j.Gamma < 0 || math.IsNaN(j.Gamma) || math.IsInf(j.Gamma, 0) {
		return fmt.Errorf("train: --gamma %g must be a positive number (0 = default)", j.Gamma)
	}
	if j.Validation == 0 {
		j.Validation = 32
	}
	j.data = SimData{Scenes: j.Scenes, R0Margin: j.R0Margin, Photons: j.Photons, Contrast: j.Contrast}
	if j.data.Scenes == "" {
		j.data.Scenes = ScenesMix
	}
	if j.data.R0Margin == 0 {
		j.data.R0Margin = DefaultR0Margin
	}
	if j.data.Photons == [2]float64{} {
		j.data.Photons = DefaultPhotons
	}
	if j.data.Contrast == [2]float64{} {
		j.data.Contrast = DefaultContrast
	}
	return j.data.validate()
}

// loadScene builds the scene source of j.data, recording the identities of
// the real images read (a resumed run checks them against its record).
func (j *Job) loadScene() error {
	if j.Data != "" && j.Validation <= 0 {
		return nil // nothing is simulated
	}
	sc, ids, err := j.data.scene(j.SceneDir)
	if err != nil {
		return err
	}
	j.scene = sc
	if j.data.Images == nil {
		j.data.Images = ids
	}
	return nil
}

// problem loads the site and derives the training set-up and simulator
// configuration (with the job's mode count and basis, if set), plus the
// starting weights of a fine-tuning run (nil without Init or on resume),
// which must match the set-up's optics and basis.
func (j Job) problem() (*site.Site, Setup, simulate.Config, *net.Model, error) {
	st, err := site.Load(j.Site)
	if err != nil {
		return nil, Setup{}, simulate.Config{}, nil, err
	}
	var kind modes.Kind
	if j.Basis != "" {
		if kind, err = modes.ParseKind(j.Basis); err != nil {
			return nil, Setup{}, simulate.Config{}, nil, err
		}
	}
	setup, simCfg, err := FromSite(st, j.Modes, kind)
	if err != nil {
		return nil, Setup{}, simulate.Config{}, nil, err
	}
	var init *net.Model
	if j.Init != "" && !j.Resume {
		if init, err = net.Load(j.Init); err != nil {
			return nil, Setup{}, simulate.Config{}, nil, err
		}
		if err := instrument.Compatible(init.Meta.Instrument(), setup.Instrument); err != nil {
			return nil, Setup{}, simulate.Config{}, nil, fmt.Errorf("train: starting weights %s: %w", j.Init, err)
		}
	}
	return st, setup, simCfg, init, nil
}

// adoptCheckpoint takes over the resumed run's batch, seed, warm start,
// reuse, variety of simulated data (SimData) and set-up, and rebuilds the simulator if the checkpoint's modes
// or basis differ from the site's. It returns the set-up and simulator to
// use.
func (j *Job) adoptCheckpoint(res *Resumed, simCfg simulate.Config, sim *simulate.Simulator) (Setup, *simulate.Simulator, error) {
	c := res.Config()
	j.Batch, j.Seed, j.WarmStart, j.data = c.Batch, c.Seed, c.WarmStart, c.Data
	if c.Reuse > 0 {
		j.Reuse = c.Reuse
	}
	setup := res.prob.setup
	if simCfg.Modes != setup.Modes || simCfg.Basis != setup.Basis {
		simCfg.Modes, simCfg.Basis = setup.Modes, setup.Basis
		var err error
		if sim, err = simulate.New(simCfg); err != nil {
			return Setup{}, nil, err
		}
	}
	return setup, sim, nil
}

// newTrainer makes a fresh trainer from the job's settings, starting from
// init if not nil, with the job's architecture overrides applied to
// net.DefaultArch (validated) when any is set.
func (j Job) newTrainer(setup Setup, init *net.Model, src Source) (*Trainer, error) {
	cfg := Config{Steps: j.Steps, Batch: j.Batch, LR: j.LR, PriorWeight: j.Prior, WarmStart: j.WarmStart,
		Seed: j.Seed, Workers: j.Workers, ClipNorm: 100, Reuse: j.Reuse, Gamma: j.Gamma, Data: j.data}
	cfg.Init = init
	if j.Conv != nil || j.Hidden != 0 || j.Head != 0 {
		a := net.DefaultArch(setup.Modes)
		if j.Conv != nil {
			a.Conv = j.Conv
		}
		if j.Hidden != 0 {
			a.Hidden = j.Hidden
		}
		if j.Head != 0 {
			a.Head = j.Head
		}
		if err := a.Validate(); err != nil {
			return nil, fmt.Errorf("train: %w", err)
		}
		cfg.Arch = &a
	}
	return New(setup, cfg, src)
}

// recordTraining writes the program version and the training provenance
// (command, data, reuse, starting weights; for simulated data the scenes,
// r0 distribution, photon level and contrast drawn; the validation set)
// into the model's metadata and returns the description of the data.
func (j Job) recordTraining(m *net.Model, st *site.Site) string {
	m.Meta.Version = j.Version
	if m.Meta.Training == nil {
		m.Meta.Training = map[string]string{}
	}
	if j.Command != "" {
		m.Meta.Training["command"] = j.Command
	}
	data := "simulated from " + filepath.Base(j.Site)
	if j.Data != "" {
		data = "burst files in " + j.Data
	}
	m.Meta.Training["data"] = data
	m.Meta.Training["reuse"] = fmt.Sprint(j.Reuse)
	if j.Init != "" {
		m.Meta.Training["init"] = filepath.Base(j.Init)
	}
	desc := j.data.describe(st, st.Camera.PhotonsPerPixel)
	if j.Data == "" {
		for _, k := range []string{"scenes", "r0_draw", "photons", "contrast"} {
			m.Meta.Training[k] = desc[k]
		}
	}
	if j.Validation > 0 {
		m.Meta.Training["validation"] = fmt.Sprintf("%d bursts at the median r0 (%.4g m), the camera's %g e-/px, contrast 0.12; scenes %s (listed in %s)",
			j.Validation, st.R0Median(), st.Camera.PhotonsPerPixel, desc["scenes"], ValidationFile)
	}
	return data
}

// validationSet simulates the job's validation bursts (at the median r0,
// the camera's photons and the default contrast, over the job's scenes,
// from a seed derived from the job's) into opts and sets up the referee
// fit, if any. It does nothing when Validation < 0.
func (j Job) validationSet(opts *RunOptions, sim *simulate.Simulator, setup Setup) error {
	if j.Validation <= 0 {
		return nil
	}
	vsrc, err := NewSimSource(sim, setup, j.Seed^0x7a11da7e, nil)
	if err != nil {
		return err
	}
	vsrc.Scene = j.scene
	if j.Progress != nil {
		sc := j.data.Scenes
		if sc == "" {
			sc = ScenesGranulation
		}
		fmt.Fprintf(j.Progress, "simulating %d validation bursts at the median r0 = %.3f m (D/r0 = %.2f) over %s scenes\n", j.Validation, setup.Telescope.Diameter/setup.DOverR0, setup.DOverR0, sc)
	}
	if opts.Validation, err = FetchSet(vsrc, j.Validation); err != nil {
		return err
	}
	if j.Referee != nil && j.RefereeBursts >= 0 {
		if opts.Referee, err = j.Referee(setup); err != nil {
			return err
		}
		opts.RefereeBursts = j.RefereeBursts
	}
	return nil
}

// source loads the scene of j.data (loadScene; the validation set uses it
// too) and builds the training data stream: the folder's bursts, or bursts
// simulated with the variety of j.data (scene, r0 distribution, contrast
// and photon ranges).
func (j *Job) source(sim *simulate.Simulator, st *site.Site, setup Setup) (Source, error) {
	if err := j.loadScene(); err != nil {
		return nil, err
	}
	if j.Data != "" {
		return NewFolderSourceWith(j.Data, setup.Patch, setup.Frames, j.Seed, burst.Options{Geometry: st.CameraGeometry()})
	}
	raw, err := NewSimSource(sim, setup, j.Seed, j.data.r0Draw(st))
	if err != nil {
		return nil, err
	}
	raw.Scene, raw.Contrast, raw.Photons = j.scene, j.data.Contrast, j.data.Photons
	if j.Reuse == 1 {
		return raw, nil
	}
	reuse := &ReuseSource{Src: raw, Batch: j.Batch, Times: j.Reuse}
	// Supervised warm-start steps need truth: no reuse for them.
	ws := uint64(j.WarmStart) * uint64(j.Batch)
	return FuncSource(func(i uint64) (*Sample, error) {
		if i < ws {
			return raw.Get(i)
		}
		return reuse.Get(i)
	}), nil
}
