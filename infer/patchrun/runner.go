package patchrun

import (
	"context"
	"fmt"

	"pdwave/infer"
)

// Patch is one patch of a tiling: its id in Grid order and its origin
// (lower-left pixel) in the field.
type Patch struct {
	ID, X0, Y0 int
}

// Patches returns the patches [from, to) of g in id order. It panics if
// the range is outside [0, g.Count()].
func Patches(g *infer.Grid, from, to int) []Patch {
	ps := make([]Patch, 0, max(to-from, 0))
	for id := from; id < to; id++ {
		x0, y0 := g.Origin(id)
		ps = append(ps, Patch{id, x0, y0})
	}
	return ps
}

// Runner runs per-patch work over the patches of a tiling on a pool of
// workers (infer.Pool) and hands each result to Done in increasing patch
// id, so whatever Done accumulates (a mosaic, a journal, a report) does
// not depend on the number of workers. It is restore's and compare's one
// loop over patches; W is one worker's state (buffers, plans, an engine),
// R one patch's result.
type Runner[W, R any] struct {
	Grid *infer.Grid // the tiling
	// Workers is the number of goroutines, each with its own state
	// (≤ 0: GOMAXPROCS).
	Workers int
	// Window bounds the patches being computed or waiting for a lower id
	// (≤ 0: 4·Workers).
	Window int
	// NewWorker makes one worker's state; its error ends Run before any
	// patch is computed.
	NewWorker func() (W, error)
	// Work computes patch p with the worker state w. It returns ok = false
	// when it stopped because ctx was cancelled (the run then stops).
	Work func(ctx context.Context, w W, p Patch) (r R, ok bool)
	// Done receives the results in increasing patch id from one
	// goroutine; its error stops the run. nil: results are dropped.
	Done func(p Patch, r R) error
}

// Run computes the patches [from, to) of the grid. It returns an error
// for a range outside [0, Grid.Count()], the first error of NewWorker or
// Done, and nil otherwise, also when ctx is cancelled before the end: Done
// has then seen the patches from…k−1 for some k, where a resumed run
// starts.
func (rn *Runner[W, R]) Run(ctx context.Context, from, to int) error {
	if n := rn.Grid.Count(); from < 0 || to > n || from > to {
		return fmt.Errorf("patchrun: patches [%d, %d) outside the %d of the grid", from, to, n)
	}
	g := rn.Grid
	patch := func(id int) Patch {
		x0, y0 := g.Origin(id)
		return Patch{id, x0, y0}
	}
	pool := infer.Pool[W, R]{
		Workers: rn.Workers,
		Window:  rn.Window,
		Setup:   rn.NewWorker,
		Do: func(ctx context.Context, w W, id int) (R, bool) {
			return rn.Work(ctx, w, patch(id))
		},
	}
	if rn.Done != nil {
		pool.Done = func(id int, r R) error { return rn.Done(patch(id), r) }
	}
	return pool.Run(ctx, from, to)
}
