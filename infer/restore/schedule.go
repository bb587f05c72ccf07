package restore

import (
	"context"
	"errors"
	"fmt"
	"sync"
)

// inOrder hands the results of one Run to its sink in increasing id order,
// keeps their tile-less copies and records them in the journal, if any.
type inOrder struct {
	sink    Sink
	results []PatchResult   // emitted results, tiles dropped
	next    int             // id of the next patch to emit
	jr      *restoreJournal // nil without a journal
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
	jr, err := restoreOpenJournal(opt.Journal, opt.Key, opt.Resume, lo, hi, opt.BatchSize)
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

// restoreRest restores the patches o.next..hi−1 of the shard [lo, hi) on
// workers engines and emits them in order, with progress on opt.Progress.
// It flushes the journal at the end (also after a failure of the sink or
// the journal, not after a failure to make an engine). It fails with the
// first error, the cause of a cancelled ctx, or context.Canceled when
// interrupted.
func (o *inOrder) restoreRest(ctx context.Context, f *Field, g *Grid, opt Options, workers, lo, hi int) error {
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	s := newScheduler(ctx, cancel, 4*workers)
	if err := s.startWorkers(f, g, opt.NewEngine, workers); err != nil {
		return err
	}
	go s.feed(o.next, hi)
	prog := restoreNewProgress(opt.Progress, opt.ProgressEvery, hi-lo, o.next-lo)
	firstErr := o.collect(s, hi, prog)
	cancel()
	s.wg.Wait()
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

// collect receives finished patches until id hi−1 is emitted or the run is
// cancelled, emitting each as soon as all lower ids are out. On a sink or
// journal error it cancels the run and returns the error.
func (o *inOrder) collect(s *scheduler, hi int, prog *restoreProgress) error {
	pending := make(map[int]*PatchResult)
	for o.next < hi {
		var r *PatchResult
		select {
		case r = <-s.done:
		case <-s.ctx.Done():
		}
		if r == nil {
			return nil
		}
		pending[r.ID] = r
		if err := o.emitReady(pending, s.credits, prog); err != nil {
			s.cancel()
			return err
		}
	}
	return nil
}

// emitReady emits and journals the pending patches from o.next on while
// they are consecutive, returning one credit per patch emitted.
func (o *inOrder) emitReady(pending map[int]*PatchResult, credits chan<- struct{}, prog *restoreProgress) error {
	for {
		p, ok := pending[o.next]
		if !ok {
			return nil
		}
		delete(pending, o.next)
		if err := o.emit(p); err != nil {
			return err
		}
		if o.jr != nil {
			if err := o.jr.add(p); err != nil {
				return err
			}
		}
		o.next++
		prog.step()
		credits <- struct{}{}
	}
}

// scheduler feeds patch ids to the workers and carries their results
// back. Credits bound the patches in flight plus those waiting for their
// turn to be emitted.
type scheduler struct {
	ctx     context.Context
	cancel  context.CancelFunc
	jobs    chan int          // patch ids to restore
	done    chan *PatchResult // restored patches, any order
	credits chan struct{}     // one per patch allowed in flight
	wg      sync.WaitGroup    // the workers
}

// newScheduler returns a scheduler on ctx with window credits.
func newScheduler(ctx context.Context, cancel context.CancelFunc, window int) *scheduler {
	s := &scheduler{ctx: ctx, cancel: cancel, jobs: make(chan int),
		done: make(chan *PatchResult, window), credits: make(chan struct{}, window)}
	for i := 0; i < window; i++ {
		s.credits <- struct{}{}
	}
	return s
}

// startWorkers makes one engine per worker and starts the workers. If an
// engine cannot be made, it cancels the run, stops the workers already
// started and returns the error.
func (s *scheduler) startWorkers(f *Field, g *Grid, newEngine func() (Engine, error), workers int) error {
	for w := 0; w < workers; w++ {
		eng, err := newEngine()
		if err != nil {
			s.cancel()
			close(s.jobs)
			s.wg.Wait()
			return fmt.Errorf("restore: making estimator: %w", err)
		}
		s.wg.Add(1)
		go s.work(eng, f, g)
	}
	return nil
}

// work restores the patches it receives with its own engine and buffers
// until the jobs run out or the run is cancelled.
func (s *scheduler) work(eng Engine, f *Field, g *Grid) {
	defer s.wg.Done()
	buf := restoreNewPatchBuffers(f.Frames, g.Patch)
	raw := make([]float64, g.Patch*g.Patch)
	for id := range s.jobs {
		r := restorePatch(s.ctx, eng, f, g, id, buf, raw)
		if r == nil {
			return
		}
		select {
		case s.done <- r:
		case <-s.ctx.Done():
			return
		}
	}
}

// feed sends the ids from..hi−1 to the workers, each after taking a
// credit, and closes the job channel when done or cancelled.
func (s *scheduler) feed(from, hi int) {
	defer close(s.jobs)
	for id := from; id < hi; id++ {
		select {
		case <-s.credits:
		case <-s.ctx.Done():
			return
		}
		select {
		case s.jobs <- id:
		case <-s.ctx.Done():
			return
		}
	}
}
