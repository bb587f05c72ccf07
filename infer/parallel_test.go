package infer

import (
	"context"
	"errors"
	"sync/atomic"
	"testing"
	"time"
)

// TestForEach: every index is done exactly once, by at most workers
// goroutines each set up once, for counts below, at and above the worker
// count (and zero).
func TestForEach(t *testing.T) {
	for _, c := range []struct{ count, workers int }{{0, 3}, {1, 3}, {3, 3}, {100, 3}, {7, 0}} {
		hits := make([]int32, c.count)
		var setups int32
		ForEach(c.count, c.workers, func() *int32 { atomic.AddInt32(&setups, 1); return new(int32) }, func(w *int32, i int) {
			atomic.AddInt32(&hits[i], 1)
			*w++
		})
		for i, h := range hits {
			if h != 1 {
				t.Errorf("count %d, workers %d: index %d done %d times", c.count, c.workers, i, h)
			}
		}
		if lim := max(c.workers, 1); c.workers > 0 && int(setups) > min(lim, c.count) {
			t.Errorf("count %d, workers %d: %d workers set up", c.count, c.workers, setups)
		}
	}
}

// TestPoolOrder: Done sees every index of the range once, in increasing
// order, with Do's result, while the indices are finished out of order
// (later ones faster); no more than Window are in flight or waiting.
// Planted and seen to fail: Done called as results arrive (order), feed
// not taking credits (window).
func TestPoolOrder(t *testing.T) {
	const from, to, window = 3, 40, 5
	var inFlight, most int32
	var got []int
	p := Pool[int, int]{
		Workers: 3,
		Window:  window,
		Setup:   func() (int, error) { return 0, nil },
		Do: func(_ context.Context, _ int, i int) (int, bool) {
			if n := atomic.AddInt32(&inFlight, 1); n > atomic.LoadInt32(&most) {
				atomic.StoreInt32(&most, n) // racy maximum, enough for a bound check
			}
			time.Sleep(time.Duration(to-i) * 100 * time.Microsecond)
			return i * i, true
		},
		Done: func(i, r int) error {
			atomic.AddInt32(&inFlight, -1)
			if r != i*i {
				t.Errorf("index %d: result %d", i, r)
			}
			got = append(got, i)
			return nil
		},
	}
	if err := p.Run(context.Background(), from, to); err != nil {
		t.Fatal(err)
	}
	if len(got) != to-from {
		t.Fatalf("Done saw %d indices, want %d", len(got), to-from)
	}
	for k, i := range got {
		if i != from+k {
			t.Fatalf("Done order %v", got)
		}
	}
	if most > window {
		t.Errorf("%d results in flight, window %d", most, window)
	}
}

// TestPoolStop: a context cancelled from Done stops the run without an
// error after a prefix of the indices, with every Do returned; an error
// of Done is returned and ends the calls to Done; an error of Setup is
// returned before any Do. Planted and seen to fail: collect ignoring
// Done's error.
func TestPoolStop(t *testing.T) {
	ctx, cancel := context.WithCancel(context.Background())
	var active int32
	var seen []int
	p := Pool[int, int]{Workers: 2, Setup: func() (int, error) { return 0, nil },
		Do: func(ctx context.Context, _ int, i int) (int, bool) {
			atomic.AddInt32(&active, 1)
			defer atomic.AddInt32(&active, -1)
			time.Sleep(200 * time.Microsecond)
			return i, ctx.Err() == nil
		},
		Done: func(i, _ int) error {
			seen = append(seen, i)
			if i == 5 {
				cancel()
			}
			return nil
		}}
	if err := p.Run(ctx, 0, 100); err != nil {
		t.Fatalf("cancelled run: %v", err)
	}
	if len(seen) < 6 || len(seen) > 100 || seen[len(seen)-1] != len(seen)-1 {
		t.Errorf("cancelled run handed over %v", seen)
	}
	if a := atomic.LoadInt32(&active); a != 0 {
		t.Errorf("%d calls of Do still running after Run", a)
	}
	errDone := errors.New("sink full")
	seen = nil
	p.Done = func(i, _ int) error {
		seen = append(seen, i)
		if i == 2 {
			return errDone
		}
		return nil
	}
	if err := p.Run(context.Background(), 0, 50); err != errDone || len(seen) != 3 {
		t.Errorf("Done error: got %v after %v, want %v after 0…2", err, seen, errDone)
	}
	errSetup := errors.New("no engine")
	p.Setup = func() (int, error) { return 0, errSetup }
	p.Do = func(context.Context, int, int) (int, bool) { t.Error("Do ran after a failed Setup"); return 0, true }
	if err := p.Run(context.Background(), 0, 5); err != errSetup {
		t.Errorf("Setup error: got %v", err)
	}
}
