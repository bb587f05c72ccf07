package infer

import (
	"runtime"
	"sync"
)

// ForEach runs do(w, i) for every i in 0…count−1 on up to workers
// goroutines (≤ 0: GOMAXPROCS), each with its own worker state w made once
// by setup (per-goroutine buffers, FFT plans, engines). Indices are handed
// out in order; do must write its result by index, so the outcome does not
// depend on the number of workers. It returns when every call has
// returned. The one worker pool of the per-patch loops (fits, offset fits,
// comparisons); restore's scheduler, which also journals and keeps
// patches in order for the mosaic, is its own.
func ForEach[W any](count, workers int, setup func() W, do func(w W, i int)) {
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	workers = min(workers, count)
	jobs := make(chan int)
	var wg sync.WaitGroup
	for range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			w := setup()
			for i := range jobs {
				do(w, i)
			}
		}()
	}
	for i := range count {
		jobs <- i
	}
	close(jobs)
	wg.Wait()
}
