package train

import (
	"bytes"
	"fmt"
	"io"
	"maps"
	"math"
	"path/filepath"
	"slices"
	"strconv"
	"time"

	"pdwave/internal/atomicfile"
)

// Output file names of a run directory.
const (
	WeightsFile = "weights.safetensors"
	LossPlot    = "loss.png"
	HistoryFile = "history.csv"
)

// RunOptions controls Run.
type RunOptions struct {
	Out             string        // run directory: checkpoints, weights, plot, history
	CheckpointEvery int           // steps between checkpoints; 0 uses 100
	ValidateEvery   int           // steps between validations; 0 uses 200
	Validation      []*Sample     // fixed validation set (nil = no validation)
	Progress        io.Writer     // progress lines; nil = none
	ProgressEvery   time.Duration // minimum time between progress lines; 0 uses 10 s
	MaxWall         time.Duration // stop (after a checkpoint) once this much wall time is spent in this call; 0 = no limit
	History         []StepStats   // record carried over from a resumed run
	Vals            []Validation
	Seconds         float64 // wall time already spent (resumed runs)
	Referee         Referee // classical fit to score the network against on part of Validation; nil = none
	RefereeBursts   int     // validation bursts fitted for the referee; 0 uses 8
	// Stop, when closed, ends the run after the step in progress with a
	// checkpoint and an *Interrupted error; nil = never.
	Stop <-chan struct{}
}

// Interrupted is the error of a run ended through RunOptions.Stop (a
// signal): the checkpoint in Out holds step Step of Steps, and a run with
// Job.Resume continues from it exactly.
type Interrupted struct {
	Step, Steps int
	Out         string
}

// Error describes the stop.
func (e *Interrupted) Error() string {
	return fmt.Sprintf("train: interrupted at step %d of %d; checkpoint saved in %s", e.Step, e.Steps, e.Out)
}

// Run trains until all steps are taken (or MaxWall is reached), writing
// checkpoints, a progress line with the ETA, and at the end the weights
// (WeightsFile, with the training settings in their metadata), the loss
// curve (LossPlot) and the per-step record (HistoryFile). It returns the
// last validation (zero if none).
func (t *Trainer) Run(o RunOptions) (Validation, error) {
	o.fill()
	hist, vals := o.History, o.Vals
	start, startStep := time.Now(), t.step
	lastPrint := time.Time{}
	var last Validation // the latest validation, carried over on resume
	if len(vals) > 0 {
		last = vals[len(vals)-1]
	}
	elapsed := func() float64 { return o.Seconds + time.Since(start).Seconds() }
	ref, err := o.refereeSet()
	if err != nil {
		return last, err
	}
	validate := func() error {
		if o.Validation == nil {
			return nil
		}
		v, err := t.validateRun(o, ref)
		if err == nil {
			vals = append(vals, v)
			last = v
		}
		return err
	}
	if t.step == 0 && len(vals) == 0 {
		if err := validate(); err != nil {
			return last, err
		}
	}
	for !t.Done() {
		st, err := t.Step()
		if err != nil {
			return last, err
		}
		hist = append(hist, st)
		if o.Progress != nil && (time.Since(lastPrint) >= o.ProgressEvery || t.Done()) {
			lastPrint = time.Now()
			per := time.Since(start).Seconds() / float64(t.step-startStep)
			t.printProgress(o.Progress, st, hist, per)
		}
		if t.step%o.ValidateEvery == 0 || t.Done() {
			if err := validate(); err != nil {
				return last, err
			}
		}
		stop, err := t.checkpoint(o, time.Since(start), hist, vals, elapsed())
		if err != nil {
			return last, err
		}
		if stop {
			break
		}
	}
	t.recordSettings(last, elapsed())
	return last, t.writeOutputs(o.Out, hist, vals)
}

// checkpoint saves a checkpoint when one is due, the run is done, the wall
// time ran is past MaxWall (stop true) or Stop was closed (an *Interrupted
// error).
func (t *Trainer) checkpoint(o RunOptions, ran time.Duration, hist []StepStats, vals []Validation, seconds float64) (stop bool, err error) {
	stop = o.MaxWall > 0 && ran >= o.MaxWall
	asked := o.stopped()
	if t.step%o.CheckpointEvery == 0 || t.Done() || stop || asked {
		if err := t.SaveCheckpoint(o.Out, hist, vals, seconds); err != nil {
			return false, err
		}
	}
	if asked && !t.Done() {
		return false, &Interrupted{Step: t.step, Steps: t.cfg.Steps, Out: o.Out}
	}
	if stop {
		o.printf("stopping at step %d after %s of wall time (checkpoint saved; resume to continue)\n", t.step, o.MaxWall)
	}
	return stop, nil
}

// stopped reports whether Stop has been closed.
func (o RunOptions) stopped() bool {
	select {
	case <-o.Stop:
		return true
	default:
		return false
	}
}

// printf writes a progress line, if there is a progress writer.
func (o RunOptions) printf(format string, a ...any) {
	if o.Progress != nil {
		fmt.Fprintf(o.Progress, format, a...)
	}
}

// fill sets the defaults of the zero fields (checkpoints every 100 steps,
// validation every 200, progress every 10 s).
func (o *RunOptions) fill() {
	if o.CheckpointEvery <= 0 {
		o.CheckpointEvery = 100
	}
	if o.ValidateEvery <= 0 {
		o.ValidateEvery = 200
	}
	if o.ProgressEvery <= 0 {
		o.ProgressEvery = 10 * time.Second
	}
}

// validateRun scores the current weights on o.Validation, against the
// referee's fits when ref is not nil, and prints the result.
func (t *Trainer) validateRun(o RunOptions, ref *refereeSet) (Validation, error) {
	v, err := t.Validate(o.Validation)
	if err != nil {
		return v, err
	}
	if ref != nil {
		if err := ref.score(t, &v); err != nil {
			return v, err
		}
	}
	o.printf("validation at step %d: %s\n", t.step, v.Summary())
	return v, nil
}

// refereeSet fits the referee's share of the validation set (nil without
// a referee or validation set; RefereeBursts 0 uses 8).
func (o RunOptions) refereeSet() (*refereeSet, error) {
	if o.Referee == nil || o.Validation == nil {
		return nil, nil
	}
	if o.RefereeBursts <= 0 {
		o.RefereeBursts = 8
	}
	o.printf("fitting %d validation bursts classically, to score the network against\n", min(o.RefereeBursts, len(o.Validation)))
	return newRefereeSet(o.Referee, o.Validation, o.RefereeBursts)
}

// writeOutputs writes the weights, the per-step record and the loss curve
// into the run directory dir as one atomicfile.Set (the weights renamed
// last).
func (t *Trainer) writeOutputs(dir string, hist []StepStats, vals []Validation) error {
	png, err := plotLossPNG(LossPlot, hist, vals)
	if err != nil {
		return err
	}
	set := atomicfile.NewSet()
	for _, f := range []struct {
		name  string
		write func(io.Writer) error
	}{
		{HistoryFile, bytesTo(historyCSV(hist, vals))},
		{LossPlot, bytesTo(png)},
		{WeightsFile, t.model.Write},
	} {
		if err := set.Add(filepath.Join(dir, f.name), f.write); err != nil {
			set.Abort()
			return err
		}
	}
	return set.Commit()
}

// printProgress writes the progress line of the step just taken (st, the
// record hist, per seconds per step) with the time left.
func (t *Trainer) printProgress(w io.Writer, st StepStats, hist []StepStats, per float64) {
	eta := time.Duration(per*float64(t.cfg.Steps-t.step)) * time.Second
	mode := "pd"
	if st.Supervised {
		mode = "supervised"
	}
	fmt.Fprintf(w, "step %d/%d  %s loss %.4f (mean of last 50: %.4f)  lr %.2e  |g| %.3g  %.2f s/step  ETA %s\n",
		t.step, t.cfg.Steps, mode, st.Loss, recentLoss(hist, 50), st.LR, st.GradNorm, per, eta.Round(time.Second))
}

// recordSettings puts the training settings and the last validation into the
// model's metadata.
func (t *Trainer) recordSettings(v Validation, seconds float64) {
	m := &t.model.Meta
	if m.Training == nil {
		m.Training = map[string]string{}
	}
	c := t.cfg
	f := func(x float64) string { return strconv.FormatFloat(x, 'g', 6, 64) }
	m.Training["steps"] = strconv.Itoa(t.step)
	m.Training["steps_planned"] = strconv.Itoa(c.Steps)
	m.Training["batch"] = strconv.Itoa(c.Batch)
	m.Training["lr"] = f(c.LR)
	m.Training["warmup"] = strconv.Itoa(c.Warmup)
	m.Training["min_lr"] = f(c.MinLR)
	m.Training["clip_norm"] = f(c.ClipNorm)
	m.Training["prior_weight"] = f(c.PriorWeight)
	m.Training["gamma"] = f(c.Gamma)
	m.Training["warm_start"] = strconv.Itoa(c.WarmStart)
	m.Training["seed"] = strconv.FormatUint(c.Seed, 10)
	su := t.prob.setup
	m.Training["r0_median_m"] = f(su.Telescope.Diameter / su.DOverR0)
	m.Training["d_over_r0"] = f(su.DOverR0)
	m.Training["wall_seconds"] = f(seconds)
	if v.Bursts > 0 {
		m.Training["val_bursts"] = strconv.Itoa(v.Bursts)
		m.Training["val_loss"] = f(v.Loss)
		if e := v.ErrFrac(2, 10); !math.IsNaN(e) {
			m.Training["val_err_noll_2_10"] = f(e)
		}
		if e := v.ErrFrac(2, 21); !math.IsNaN(e) {
			m.Training["val_err_noll_2_21"] = f(e)
		}
		for _, g := range slices.Sorted(maps.Keys(v.ByScene)) {
			e := v.ByScene[g]
			m.Training["val_bursts_"+g] = strconv.Itoa(e.Bursts)
			if x := e.ErrFrac(2, 10); !math.IsNaN(x) {
				m.Training["val_err_noll_2_10_"+g] = f(x)
			}
			if x := e.ErrFrac(2, 21); !math.IsNaN(x) {
				m.Training["val_err_noll_2_21_"+g] = f(x)
			}
		}
		if v.FitBursts > 0 {
			m.Training["val_fit_bursts"] = strconv.Itoa(v.FitBursts)
			m.Training["val_fit_ratio_median"] = f(v.FitRatioMedian)
			m.Training["val_fit_within_1.5"] = f(v.FitWithin)
		}
	}
}

// Summary is a one-line account of v.
func (v Validation) Summary() string {
	s := fmt.Sprintf("%d bursts, loss %.4f (no correction %.4f", v.Bursts, v.Loss, v.LossZero)
	if v.SqErr != nil {
		s += fmt.Sprintf(", truth %.4f)", v.LossTruth)
		if e := v.ErrFrac(2, 10); !math.IsNaN(e) {
			s += fmt.Sprintf(", error/variance Noll 2–10 %.3f", e)
		} else {
			s += fmt.Sprintf(", error/variance Noll 2–%d %.3f", len(v.SqErr)+1, v.ErrFrac(2, len(v.SqErr)+1))
		}
		if e := v.ErrFrac(2, 21); !math.IsNaN(e) {
			s += fmt.Sprintf(", 2–21 %.3f", e)
		}
		s += v.sceneSummary()
	} else {
		s += ")"
	}
	if v.FitBursts > 0 {
		s += fmt.Sprintf("; against the classical fit (%d bursts): objective ×%.2f (median), %.0f %% within ×%.1f",
			v.FitBursts, v.FitRatioMedian, 100*v.FitWithin, RefereeTolerance)
	}
	return s
}

// sceneSummary is the per-scene-group part of Summary: "; granulation
// (16 bursts) 2–10 0.172, 2–21 0.240; real (16 bursts) ...", or "" when
// there are fewer than two groups.
func (v Validation) sceneSummary() string {
	if len(v.ByScene) < 2 {
		return ""
	}
	var s string
	for _, g := range slices.Sorted(maps.Keys(v.ByScene)) {
		e := v.ByScene[g]
		unit := "bursts"
		if e.Bursts == 1 {
			unit = "burst"
		}
		s += fmt.Sprintf("; %s (%d %s) 2–10 %.3f", g, e.Bursts, unit, e.ErrFrac(2, 10))
		if x := e.ErrFrac(2, 21); !math.IsNaN(x) {
			s += fmt.Sprintf(", 2–21 %.3f", x)
		}
	}
	return s
}

func recentLoss(h []StepStats, n int) float64 {
	if len(h) < n {
		n = len(h)
	}
	var s float64
	for _, st := range h[len(h)-n:] {
		s += st.Loss
	}
	return s / float64(n)
}

func historyCSV(h []StepStats, vals []Validation) []byte {
	var b bytes.Buffer
	b.WriteString("step,supervised,loss,metric,prior,lr,grad_norm,skipped,val_loss,val_loss_zero,val_loss_truth,val_err_2_10,val_err_2_21,val_fit_ratio_median,val_fit_within\n")
	vi := 0
	for _, st := range h {
		fmt.Fprintf(&b, "%d,%t,%.6g,%.6g,%.6g,%.4g,%.4g,%d", st.Step+1, st.Supervised, st.Loss, st.Metric, st.Prior, st.LR, st.GradNorm, st.Skipped)
		for vi < len(vals) && vals[vi].Step < st.Step+1 {
			vi++
		}
		if vi < len(vals) && vals[vi].Step == st.Step+1 {
			v := vals[vi]
			fmt.Fprintf(&b, ",%.6g,%.6g,%.6g,%.4g,%.4g", v.Loss, v.LossZero, v.LossTruth, v.ErrFrac(2, 10), v.ErrFrac(2, 21))
			if v.FitBursts > 0 {
				fmt.Fprintf(&b, ",%.4g,%.4g\n", v.FitRatioMedian, v.FitWithin)
			} else {
				b.WriteString(",,\n")
			}
		} else {
			b.WriteString(",,,,,,,\n")
		}
	}
	return b.Bytes()
}
