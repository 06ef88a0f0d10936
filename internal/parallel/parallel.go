package parallel

import (
	"fmt"
	"runtime"
	"sync"
)

// For calls fn(i) for i in [0, n) on up to workers goroutines (all CPUs
// when workers <= 0). Work is handed out by index, so results written to
// per-index slots do not depend on the number of workers.
//
// A panic in fn stops handing out work and is raised again in the caller's
// goroutine once the workers have returned, so that a recover there (the
// command line's) sees it; a panic in a goroutine of its own would end the
// process with a stack trace.
func For(n, workers int, fn func(i int)) {
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	if workers > n {
		workers = n
	}
	if workers <= 1 {
		for i := 0; i < n; i++ {
			fn(i)
		}
		return
	}
	var (
		wg       sync.WaitGroup
		once     sync.Once
		panicked any
		stop     = make(chan struct{})
	)
	next := make(chan int, n)
	for i := 0; i < n; i++ {
		next <- i
	}
	close(next)
	wg.Add(workers)
	for w := 0; w < workers; w++ {
		go func() {
			defer wg.Done()
			defer func() {
				if r := recover(); r != nil {
					once.Do(func() { panicked = r; close(stop) })
				}
			}()
			for i := range next {
				select {
				case <-stop:
					return
				default:
				}
				fn(i)
			}
		}()
	}
	wg.Wait()
	if panicked != nil {
		if err, ok := panicked.(error); ok {
			panic(fmt.Errorf("in a worker: %w", err))
		}
		panic(fmt.Errorf("in a worker: %v", panicked))
	}
}
