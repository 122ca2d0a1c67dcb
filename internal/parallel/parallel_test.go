package parallel

import (
	"fmt"
	"sync"
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
