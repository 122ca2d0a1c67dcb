//go:build !unix

package cpuclock

// processCPU is not available here; benchmarks then report wall time only.
func processCPU() (int64, bool) { return 0, false }
