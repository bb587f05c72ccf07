package infer

import (
	"context"
	"runtime"
	"sync"
)

// ForEach runs do(w, i) for every i in 0…count−1 on up to workers
// goroutines (≤ 0: GOMAXPROCS), each with its own worker state w made once
// by setup (per-goroutine buffers, FFT plans, engines). Indices are handed
// out in order; do must write its result by index, so the outcome does not
// depend on the number of workers. It returns when every call has
// returned. It is Pool without a context, results or a window.
func ForEach[W any](count, workers int, setup func() W, do func(w W, i int)) {
	p := Pool[W, struct{}]{
		Workers: workers,
		Window:  count, // nothing is handed over, so nothing need wait
		Setup:   func() (W, error) { return setup(), nil },
		Do: func(_ context.Context, w W, i int) (struct{}, bool) {
			do(w, i)
			return struct{}{}, true
		},
	}
	p.Run(context.Background(), 0, count) // cannot fail: Setup never does, Done is nil
}

// Pool is the one worker pool of the per-patch loops (fits, offset fits,
// restore's and compare's patches through infer/patchrun): Run computes
// Do for a range of indices on Workers goroutines and hands every result
// to Done in increasing index order, from one goroutine, as soon as all
// lower indices are handed over. So whatever Done accumulates does not
// depend on the number of workers or their timing.
type Pool[W, R any] struct {
	// Workers is the number of goroutines (≤ 0: GOMAXPROCS), never more
	// than the indices to do.
	Workers int
	// Window bounds the results being computed or waiting for a lower
	// index (≤ 0: 4·Workers), and with it the memory of results in flight.
	Window int
	// Setup makes one worker's state (buffers, plans, an engine); Run calls
	// it Workers times, in turn, before any Do.
	Setup func() (W, error)
	// Do computes index i with the worker state w, which no other goroutine
	// uses meanwhile. It returns ok = false when it stopped because ctx
	// was cancelled; its result is dropped and the run stops.
	Do func(ctx context.Context, w W, i int) (r R, ok bool)
	// Done receives the results in increasing index order; an error stops
	// the run. nil drops the results (Do stores them itself).
	Done func(i int, r R) error
}

// indexed is one result of a Pool and its index.
type indexed[R any] struct {
	i int
	r R
}

// Run computes the indices from…to−1 (none when to ≤ from). It returns
// the first error of Setup (then no Do has run) or of Done (then the
// remaining work is cancelled), and nil otherwise, including when ctx is
// cancelled before the end: Done has then seen a prefix of the indices,
// which tells the caller where to resume. Run returns after every Do has
// returned.
func (p *Pool[W, R]) Run(ctx context.Context, from, to int) error {
	if to <= from {
		return nil
	}
	workers := p.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	workers = min(workers, to-from)
	window := p.Window
	if window <= 0 {
		window = 4 * workers
	}
	states := make([]W, workers)
	for k := range states {
		w, err := p.Setup()
		if err != nil {
			return err
		}
		states[k] = w
	}
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	jobs := make(chan int)
	results := make(chan indexed[R], window)
	credits := make(chan struct{}, window) // one per result allowed in flight
	for range window {
		credits <- struct{}{}
	}
	var wg sync.WaitGroup
	for _, w := range states {
		wg.Add(1)
		go func() {
			defer wg.Done()
			p.work(ctx, cancel, w, jobs, results)
		}()
	}
	go feed(ctx, from, to, jobs, credits)
	err := p.collect(ctx, cancel, from, to, results, credits)
	cancel()
	wg.Wait()
	return err
}

// work does the indices it receives until they run out or ctx is
// cancelled; a Do that stops early cancels the run.
func (p *Pool[W, R]) work(ctx context.Context, cancel context.CancelFunc, w W, jobs <-chan int, results chan<- indexed[R]) {
	for i := range jobs {
		r, ok := p.Do(ctx, w, i)
		if !ok {
			cancel()
			return
		}
		select {
		case results <- indexed[R]{i, r}:
		case <-ctx.Done():
			return
		}
	}
}

// feed sends the indices from…to−1, each after taking a credit, and
// closes jobs when done or cancelled.
func feed(ctx context.Context, from, to int, jobs chan<- int, credits <-chan struct{}) {
	defer close(jobs)
	for i := from; i < to; i++ {
		select {
		case <-credits:
		case <-ctx.Done():
			return
		}
		select {
		case jobs <- i:
		case <-ctx.Done():
			return
		}
	}
}

// collect receives results until index to−1 is handed over or ctx is
// cancelled, handing each to Done once all lower indices are and returning
// its credit. A Done error cancels the run and is returned.
func (p *Pool[W, R]) collect(ctx context.Context, cancel context.CancelFunc, from, to int, results <-chan indexed[R], credits chan<- struct{}) error {
	pending := make(map[int]R)
	for next := from; next < to; {
		select {
		case ir := <-results:
			pending[ir.i] = ir.r
		case <-ctx.Done():
			return nil
		}
		for r, ok := pending[next]; ok; r, ok = pending[next] {
			delete(pending, next)
			if p.Done != nil {
				if err := p.Done(next, r); err != nil {
					cancel()
					return err
				}
			}
			next++
			credits <- struct{}{}
		}
	}
	return nil
}
