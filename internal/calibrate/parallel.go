package calibrate

import (
	"sync"
	"sync/atomic"
)

// forEach calls do(w, k) for every task k in [0, tasks) on up to workers
// goroutines, w being the calling goroutine's index in [0, workers), for
// scratch of its own. The tasks are taken in order from a shared counter,
// so which goroutine runs a task varies from run to run: a task's result
// must not depend on it (each writes only its own outputs, and the caller
// gathers them in task order). With one worker, or one task, everything
// runs on the caller's goroutine. (lsq has the same helper: it is too small
// to be worth a package both would import.)
func forEach(workers, tasks int, do func(w, k int)) {
	workers = min(workers, tasks)
	if workers <= 1 {
		for k := range tasks {
			do(0, k)
		}
		return
	}
	var next atomic.Int64
	run := func(w int) {
		for {
			k := int(next.Add(1) - 1)
			if k >= tasks {
				return
			}
			do(w, k)
		}
	}
	var wg sync.WaitGroup
	for w := 1; w < workers; w++ {
		wg.Add(1)
		go func() {
			defer wg.Done()
			run(w)
		}()
	}
	run(0)
	wg.Wait()
}
