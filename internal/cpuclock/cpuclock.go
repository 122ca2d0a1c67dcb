// Package cpuclock measures the process CPU time of a benchmark loop. On a
// machine shared with other work, wall time (ns/op) varies with the load; CPU
// time (cpu-ns/op, which includes the garbage collector's) much less. It is
// imported by benchmarks only.
package cpuclock

import "testing"

// Clock is a CPU-time reading taken at the start of a benchmark loop.
type Clock struct {
	start int64
	ok    bool
}

// Start reads the process CPU time.
func Start() Clock {
	t, ok := processCPU()
	return Clock{t, ok}
}

// Report adds the CPU time per operation since Start as the metric
// cpu-ns/op; it reports nothing where CPU time cannot be read.
func (c Clock) Report(b *testing.B) {
	t, ok := processCPU()
	if c.ok && ok && b.N > 0 {
		b.ReportMetric(float64(t-c.start)/float64(b.N), "cpu-ns/op")
	}
}
