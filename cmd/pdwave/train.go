package main

import (
	"fmt"
	"math"
	"os"
	"slices"
	"strings"

	"github.com/spf13/cobra"

	"pdwave/infer"
	"pdwave/internal/progress"
	"pdwave/model/instrument"
	"pdwave/model/pd"
	"pdwave/train"
)

// trainOpts holds the flags of "pdwave train".
var trainOpts train.Job

// trainRanges holds the range flags that fill trainOpts' two-value fields.
var trainRanges struct{ photons, contrast []float64 }

var trainCmd = &cobra.Command{
	Use:   "train --site FILE --out DIR",
	Short: "Train the wavefront network on simulated bursts or on observations",
	Long: `train fits the small convolutional network that reads wavefront coefficients
straight from a phase-diversity burst. The loss needs no ground truth: it is
the phase-diversity objective (metric plus turbulence prior) at the predicted
coefficients, so the network can learn from bursts simulated for the site
file (default) or from a folder of your own burst FITS files (--data).

The site file gives the optics, the seeing and the sizes (patch, frames,
modes, basis). Training runs on the CPU, deterministic for a given --seed, and
writes into DIR:

  weights.safetensors   the trained weights (load with --weights)
  loss.png, history.csv the loss curve and per-step record
  checkpoint.*          weights and optimiser state, every 100 steps

A killed run continues exactly where it stopped with --resume (same DIR,
site and --data); --resume --steps N continues it to step N instead of the
planned count. SIGINT or SIGTERM ends a run after the step in progress with a
checkpoint and prints the command that resumes it; DIR/train.lock keeps a
second run off the folder. A fixed set of bursts simulated at the site's median seeing
scores the network as it learns (error per wavefront mode as a fraction of
the true variance); the first --fit-check of them are also fitted classically
once, and each validation reports the network's objective against the fit's.`,
	Args: cobra.NoArgs,
	RunE: trainRun,
}

func init() {
	f := trainCmd.Flags()
	o := &trainOpts
	f.StringVar(&o.Site, "site", "", "site file (YAML): optics, seeing, sizes")
	f.StringVar(&o.Out, "out", "", "output folder for weights, checkpoints and the loss curve")
	f.StringVar(&o.Data, "data", "", "folder of burst FITS files to train on instead of simulations")
	f.BoolVar(&o.Resume, "resume", false, "continue the run checkpointed in --out")
	f.IntVar(&o.Steps, "steps", 2000, "optimiser steps (with --resume: continue to this step; default the checkpoint's plan)")
	f.IntVar(&o.Batch, "batch", 4, "bursts per step")
	f.Uint64Var(&o.Seed, "seed", 1, "random seed (weights and data)")
	f.IntVar(&o.WarmStart, "warm-start", 0, "first N steps supervised on the simulated truth")
	f.IntVar(&o.Modes, "modes", 0, "wavefront modes to estimate (default: the site's)")
	f.StringVar(&o.Basis, "basis", "", "zernike or kl (default: the site's)")
	f.IntVar(&o.Workers, "workers", 0, "worker goroutines (default: all cores)")
	f.Float64Var(&o.LR, "lr", train.DefaultLR, "peak learning rate (Adam)")
	f.Float64Var(&o.Prior, "prior", pd.DefaultSettings().PriorWeight, "weight of the turbulence prior in the loss (default: the fit's)")
	f.Float64Var(&o.Gamma, "gamma", pd.DefaultSettings().Gamma, "regulariser of the metric's object estimate, relative to the image count (default: the fit's)")
	f.StringVar(&o.Init, "init", "", "weights file to start from (fine-tuning, e.g. on your own bursts with --data); default: fresh weights from --seed")
	f.IntSliceVar(&o.Conv, "conv", nil, "channels of the network's stride-2 convolutions, e.g. 16,32,64 (default 8,16,32)")
	f.IntVar(&o.Hidden, "hidden", 0, "per-frame features of the network (default 64)")
	f.IntVar(&o.Head, "head", 0, "width of the network's head (default 64)")
	f.IntVar(&o.Reuse, "reuse", 4, "uses of each simulated burst under flips and rotations (1–8)")
	f.IntVar(&o.Validation, "validation", 32, "validation bursts simulated at the median seeing (-1 = none)")
	f.IntVar(&o.RefereeBursts, "fit-check", 8, "validation bursts also fitted classically, to score the network's objective against (0 = none)")
	f.DurationVar(&o.MaxWall, "max-wall", 0, "stop after this much wall time, checkpointed (e.g. 55m); 0 = no limit")
	f.StringVar(&o.Scenes, "scenes", "", "objects of simulated bursts: mix (default), granulation or real")
	f.StringVar(&o.SceneDir, "scene-dir", "", "folder of real scene images (default: $PDWAVE_SCENES or testdata/scenes)")
	f.Float64Var(&o.R0Margin, "r0-margin", 0, "draw ln r0 with this factor times the site's spread (default 1.25)")
	f.Float64SliceVar(&trainRanges.photons, "photons", nil, "range of the photon level as factors on the camera's, lo,hi (default 0.5,2)")
	f.Float64SliceVar(&trainRanges.contrast, "contrast", nil, "range of the scenes' rms contrast at the diffraction limit, lo,hi (default 0.08,0.16)")
	root.AddCommand(trainCmd)
}

// rangeFlag copies a lo,hi flag into dst; nil leaves dst unset.
func rangeFlag(dst *[2]float64, v []float64, name string) error {
	if v == nil {
		return nil
	}
	if len(v) != 2 || !(v[0] > 0) || !(v[1] >= v[0]) || math.IsInf(v[1], 0) {
		return fmt.Errorf("train: --%s wants two positive finite values lo,hi with lo ≤ hi, got %v", name, v)
	}
	*dst = [2]float64{v[0], v[1]}
	return nil
}

func trainRun(cmd *cobra.Command, args []string) error {
	o := trainOpts
	if o.Site == "" {
		return fmt.Errorf("train: --site is required")
	}
	if o.Out == "" {
		return fmt.Errorf("train: --out is required")
	}
	if err := checkDir("train", o.Out, o.Site, o.Data, o.Init, o.SceneDir); err != nil {
		return err
	}
	if err := trainFlagsCheck(cmd, &o); err != nil {
		return err
	}
	if o.RefereeBursts < 0 {
		return fmt.Errorf("train: --fit-check %d is negative", o.RefereeBursts)
	}
	if o.RefereeBursts == 0 {
		o.RefereeBursts = -1 // none
	}
	if err := rangeFlag(&o.Photons, trainRanges.photons, "photons"); err != nil {
		return err
	}
	if err := rangeFlag(&o.Contrast, trainRanges.contrast, "contrast"); err != nil {
		return err
	}
	o.Referee = newFitReferee
	o.Progress, _ = progress.Stderr()
	o.Command = "pdwave " + strings.Join(os.Args[1:], " ")
	o.Version = version
	ctx, intr, stop := catchInterrupts(os.Stderr, "train")
	defer stop()
	o.Stop = ctx.Done()
	v, err := o.Run()
	if s := intr.received(); s != nil && err != nil {
		return stopped(s, err)
	}
	if err != nil {
		return err
	}
	if v.Bursts > 0 {
		fmt.Fprintf(os.Stderr, "final validation: %s\n", v.Summary())
	}
	fmt.Fprintf(os.Stderr, "weights written to %s\n", o.Out+string(os.PathSeparator)+train.WeightsFile)
	return nil
}

// trainFlagsCheck refuses, before any work, a step count below 1, a
// negative wall-time limit, a worker count out of bounds and an
// architecture with --init (the starting weights fix it). With --resume
// (whose printed command repeats the run's flags) --init is ignored and an
// architecture must match the checkpoint's (train.Job checks it); without
// --steps, o.Steps becomes 0: the checkpoint's plan.
func trainFlagsCheck(cmd *cobra.Command, o *train.Job) error {
	if o.Steps < 1 {
		return fmt.Errorf("train: --steps %d: want at least 1", o.Steps)
	}
	if o.MaxWall < 0 {
		return fmt.Errorf("train: --max-wall %v is negative (0 = no limit)", o.MaxWall)
	}
	if err := checkWorkers("train", o.Workers); err != nil {
		return err
	}
	arch := cmd.Flags().Changed("conv") || cmd.Flags().Changed("hidden") || cmd.Flags().Changed("head")
	if err := exclusive("train", "--init", o.Init != "", "--conv/--hidden/--head (the starting weights fix the network)", arch && !o.Resume); err != nil {
		return err
	}
	if o.Resume && !cmd.Flags().Changed("steps") {
		o.Steps = 0
	}
	return nil
}

// fitReferee scores training against the classical fit: infer.Fitter with
// its default settings (those of "pdwave fit"), started from zero.
type fitReferee struct{ f *infer.Fitter }

func newFitReferee(s train.Setup) (train.Referee, error) {
	cfg := infer.DefaultConfig()
	cfg.Telescope = s.Telescope
	cfg.Diversity = slices.Clone(s.Diversity)
	cfg.BasisFor = instrument.ClearAperture // the network's basis
	cfg.Patch, cfg.Frames, cfg.Modes, cfg.Basis = s.Patch, s.Frames, s.Modes, s.Basis
	cfg.DOverR0 = s.DOverR0
	f, err := infer.NewFitter(cfg)
	if err != nil {
		return nil, fmt.Errorf("train: classical fit for validation: %w", err)
	}
	return fitReferee{f}, nil
}

// Fit fits the burst classically from zero (train.Referee).
func (r fitReferee) Fit(data [][][]float64) ([][]float64, error) {
	res, err := r.f.Fit(data, nil)
	if err != nil {
		return nil, err
	}
	return res.Coeffs, nil
}

// Objective is the fitter's objective at coeffs (train.Referee).
func (r fitReferee) Objective(data [][][]float64, coeffs [][]float64) (float64, error) {
	e, _, err := r.f.Objective(data, coeffs)
	return e, err
}
