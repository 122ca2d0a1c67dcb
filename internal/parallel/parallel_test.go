package parallel

import (
	"fmt"
	"sync"
	"sync/atomic"
	"testing"
)

// TestFor runs every task exactly once, with worker indices in range, for
// named combinations of workers and tasks (common practice, no source: a
// count is its own reference).
func TestFor(t *testing.T) {
	for _, c := range []struct {
		name           string
		workers, tasks int
	}{
		{"no tasks", 2, 0},
		{"one worker", 1, 10},
		{"more workers than tasks", 8, 3},
		{"two workers, many tasks", 2, 1000},
		{"zero workers runs serially", 0, 5},
	} {
		t.Run(c.name, func(t *testing.T) {
			var mu sync.Mutex
			seen := make([]int, c.tasks)
			For(c.workers, c.tasks, func(w, k int) {
				if w < 0 || w >= max(c.workers, 1) {
					t.Errorf("worker %d outside [0, %d)", w, max(c.workers, 1))
				}
				mu.Lock()
				seen[k]++
				mu.Unlock()
			})
			for k, n := range seen {
				if n != 1 {
					t.Errorf("task %d ran %d times", k, n)
				}
			}
		})
	}
}

// ExampleFor sums squares by task into per-task outputs and gathers them in
// task order, the same on any number of goroutines.
func ExampleFor() {
	out := make([]int, 5)
	For(Workers(2), len(out), func(_, k int) { out[k] = k * k })
	sum := 0
	for _, v := range out {
		sum += v
	}
	fmt.Println(sum)
	// Output: 30
}

// TestForPanic: a task's panic, on whichever goroutine it runs, comes back
// on the caller's goroutine as a *Panic carrying its value, after every
// worker has returned (common practice, no source).
func TestForPanic(t *testing.T) {
	for _, c := range []struct {
		name           string
		workers, tasks int
		bad            int
	}{
		{"first task, two workers", 2, 100, 0},
		{"last task, two workers", 2, 100, 99},
		{"middle task, four workers", 4, 50, 25},
	} {
		t.Run(c.name, func(t *testing.T) {
			var active atomic.Int64
			got := func() (v any) {
				defer func() { v = recover() }()
				For(c.workers, c.tasks, func(_, k int) {
					active.Add(1)
					defer active.Add(-1)
					if k == c.bad {
						panic(fmt.Sprintf("task %d failed", k))
					}
				})
				return nil
			}()
			p, ok := got.(*Panic)
			if !ok || p.Value != fmt.Sprintf("task %d failed", c.bad) || len(p.Stack) == 0 {
				t.Fatalf("recovered %#v, want a *Panic with the task's value and a stack", got)
			}
			if n := active.Load(); n != 0 {
				t.Errorf("%d tasks still running when For returned", n)
			}
		})
	}
}
