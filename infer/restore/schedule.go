package restore

import (
	"context"
	"errors"
	"fmt"

	"pdwave/infer/patchrun"
)

// inOrder hands the results of one Run to its sink in increasing id order,
// keeps their tile-less copies and records them in the journal, if any.
type inOrder struct {
	sink    Sink
	results []PatchResult // emitted results, tiles dropped
	next    int           // id of the next patch to emit
	jr      *patchJournal // nil without a journal
}

// emit passes r to the sink and keeps a copy without the tile.
func (o *inOrder) emit(r *PatchResult) error {
	if err := o.sink(r); err != nil {
		return err
	}
	meta := *r
	meta.Tile = nil
	o.results = append(o.results, meta)
	return nil
}

// openJournal opens opt.Journal for the patches [lo, hi), if set, and with
// opt.Resume emits the patches recorded there, which must be the next ids
// in order.
func (o *inOrder) openJournal(opt Options, lo, hi int) error {
	if opt.Journal == "" {
		return nil
	}
	jr, err := openPatchJournal(opt.Journal, opt.Key, opt.Resume, lo, hi, opt.BatchSize)
	if err != nil {
		return err
	}
	o.jr = jr
	if !opt.Resume {
		return nil
	}
	err = jr.replay(func(r *PatchResult) error {
		if r.ID != o.next || r.ID >= hi {
			return fmt.Errorf("restore: journal %s: patch %d out of order (want %d)", opt.Journal, r.ID, o.next)
		}
		o.next++
		return o.emit(r)
	})
	if err == nil && opt.Log != nil {
		fmt.Fprintf(opt.Log, "restore: resuming from %s: replayed %d of %d patches\n", opt.Journal, o.next-lo, hi-lo)
	}
	return err
}

// runRest restores the patches o.next..hi−1 of the shard [lo, hi) on
// workers engines (patchrun.Runner, one engine per worker) and emits them
// in order, with progress on opt.Progress. It flushes the journal at the
// end (also after a failure of the sink or the journal). It fails with the
// first error, the cause of a cancelled ctx, or context.Canceled when
// interrupted.
func (o *inOrder) runRest(ctx context.Context, f *Field, g *Grid, opt Options, workers, lo, hi int) error {
	prog := newProgress(opt.Progress, opt.ProgressEvery, hi-lo, o.next-lo)
	rn := patchrun.Runner[*patchWorker, *PatchResult]{
		Grid:    g,
		Workers: workers,
		Window:  4 * workers,
		NewWorker: func() (*patchWorker, error) {
			eng, err := opt.NewEngine()
			if err != nil {
				return nil, fmt.Errorf("restore: making estimator: %w", err)
			}
			return &patchWorker{eng: eng, buf: newPatchBuffers(f.Frames, g.Patch), raw: make([]float64, g.Patch*g.Patch)}, nil
		},
		Work: func(ctx context.Context, w *patchWorker, p patchrun.Patch) (*PatchResult, bool) {
			r := runPatch(ctx, w.eng, f, g, p.ID, w.buf, w.raw)
			return r, r != nil
		},
		Done: func(_ patchrun.Patch, r *PatchResult) error { return o.done(r, prog) },
	}
	firstErr := rn.Run(ctx, o.next, hi)
	prog.finish()
	if o.jr != nil {
		if err := o.jr.flush(); err != nil && firstErr == nil {
			firstErr = err
		}
	}
	if firstErr != nil {
		return firstErr
	}
	if o.next < hi {
		if err := context.Cause(ctx); err != nil && !errors.Is(err, context.Canceled) {
			return err
		}
		return &Interrupted{Done: o.next - lo, Total: hi - lo, Journal: opt.Journal}
	}
	return nil
}

// patchWorker is one worker's state: its engine, patch buffers
// [channel][frame] and the burst-mean tile.
type patchWorker struct {
	eng Engine
	buf [][][]float64
	raw []float64
}

// done emits and journals the next patch r (the runner hands them over in
// id order) and counts it in the progress.
func (o *inOrder) done(r *PatchResult, prog *patchProgress) error {
	if r.ID != o.next {
		return fmt.Errorf("restore: patch %d finished out of order (want %d)", r.ID, o.next)
	}
	if err := o.emit(r); err != nil {
		return err
	}
	if o.jr != nil {
		if err := o.jr.add(r); err != nil {
			return err
		}
	}
	o.next++
	prog.step()
	return nil
}

// Interrupted is the error of a Run stopped by its context (a signal): the
// patches finished before the stop are recorded in the journal, if there
// is one, and a run with Resume continues from them. It unwraps to
// context.Canceled.
type Interrupted struct {
	Done, Total int    // patches of the shard finished, and in all
	Journal     string // the journal holding the finished patches; "" if none
	Out         string // the output being written (set by Job)
}

// Error describes the stop.
func (e *Interrupted) Error() string {
	s := fmt.Sprintf("restore: interrupted after %d of %d patches", e.Done, e.Total)
	if e.Out != "" {
		s += " of " + e.Out
	}
	if e.Journal != "" {
		s += "; the finished patches are kept in " + e.Journal
	}
	return s
}

// Unwrap returns context.Canceled.
func (e *Interrupted) Unwrap() error { return context.Canceled }
