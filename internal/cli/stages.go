package cli

import (
	"runtime"
	"sync"

	"flowset/internal/parallel"
)

// stages runs the independent stages of a job after its fit (the ranking
// of readings, the plans for the repairs, the report's system curves, the
// rendering of each output file) side by side. Every stage writes only
// its own result and reads only what was finished before it started, so
// the outputs do not depend on the order the stages end in: with one
// worker each stage runs at once, in the order started, and the results
// are the same bit for bit (TestRunConcurrentSame).
type stages struct {
	workers int
	wg      sync.WaitGroup
}

// newStages returns a runner for a job's stages: with workers above one
// each stage started runs on a goroutine of its own (they are few; the
// runtime shares the processors among them) and each bounds its loops to
// workers goroutines; with one, every stage runs where it is started.
// workers 0 means runtime.GOMAXPROCS(0).
func newStages(workers int) *stages {
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	return &stages{workers: workers}
}

// serial reports whether stages run one after another where started.
func (s *stages) serial() bool { return s == nil || s.workers <= 1 }

// wait waits for every stage started; a job's error path calls it so
// that no stage outlives the command.
func (s *stages) wait() {
	if s != nil {
		s.wg.Wait()
	}
}

// future is the result of a stage started earlier.
type future[T any] struct {
	done   chan struct{}
	v      T
	err    error
	panicV any // a panic in the stage, raised again by get
}

// start runs f as a stage: on its own goroutine, or at once when s is
// serial (or nil).
func start[T any](s *stages, f func() (T, error)) *future[T] {
	fu := &future[T]{done: make(chan struct{})}
	if s.serial() {
		fu.v, fu.err = f()
		close(fu.done)
		return fu
	}
	s.wg.Add(1)
	go func() {
		defer s.wg.Done()
		defer close(fu.done)
		defer func() {
			// A panic is carried to the goroutine that reads the result,
			// where RunIO's recovery reports it as an internal error
			// instead of the process dying.
			if r := recover(); r != nil {
				fu.panicV = r
			}
		}()
		fu.v, fu.err = f()
	}()
	return fu
}

// get waits for the stage and returns its result.
func (fu *future[T]) get() (T, error) {
	<-fu.done
	if fu.panicV != nil {
		panic(fu.panicV)
	}
	return fu.v, fu.err
}

// each runs f(0) ... f(n-1) on up to s.workers goroutines at a time (in
// order, on this one, when s is serial) and returns their results by
// index. The first error by index is returned with them. A panic in f is
// raised again here (parallel.For carries it back).
func each[T any](s *stages, n int, f func(k int) (T, error)) ([]T, []error) {
	out, errs := make([]T, n), make([]error, n)
	workers := 1
	if !s.serial() {
		workers = s.workers
	}
	parallel.For(workers, n, func(_, k int) { out[k], errs[k] = f(k) })
	return out, errs
}
