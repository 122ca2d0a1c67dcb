// Package parallel runs independent tasks on a few goroutines so that the
// result is the same to the bit as on one: each task writes only outputs of
// its own, and the caller gathers them in task order. It knows nothing of
// what the tasks compute.
package parallel

import (
	"fmt"
	"runtime"
	"runtime/debug"
	"sync"
	"sync/atomic"
)

// Workers returns n, or runtime.GOMAXPROCS(0) when n is 0 or less: the
// number of goroutines a caller's setting asks for.
func Workers(n int) int {
	if n <= 0 {
		return runtime.GOMAXPROCS(0)
	}
	return n
}

// For calls do(w, k) for every task k in [0, tasks) on up to workers
// goroutines, w being the calling goroutine's index in [0, workers), for
// scratch of its own. The tasks are taken in order from a shared counter,
// so which goroutine runs a task varies from run to run: a task's result
// must not depend on it. With one worker, or one task, everything runs on
// the caller's goroutine; otherwise the caller's goroutine is worker 0.
//
// A panic in a task stops the others from taking new tasks and is raised
// again on the caller's goroutine once every worker has returned, so a
// recovery there (the command line's, which reports an internal error)
// still sees it instead of the process dying in another goroutine.
func For(workers, tasks int, do func(w, k int)) {
	workers = min(workers, tasks)
	if workers <= 1 {
		for k := range tasks {
			do(0, k)
		}
		return
	}
	var (
		next   atomic.Int64
		mu     sync.Mutex
		failed *Panic
	)
	run := func(w int) {
		defer func() {
			if v := recover(); v != nil {
				next.Store(int64(tasks))
				mu.Lock()
				if failed == nil {
					failed = &Panic{Value: v, Stack: debug.Stack()}
				}
				mu.Unlock()
			}
		}()
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
	if failed != nil {
		panic(failed)
	}
}

// Panic is what For raises on the caller's goroutine when a task panicked:
// the task's panic value and the stack of the goroutine it panicked on.
type Panic struct {
	Value any
	Stack []byte
}

// Error says what the task panicked with; the stack is kept for a fuller
// report.
func (p *Panic) Error() string { return fmt.Sprintf("panic in a parallel task: %v", p.Value) }
