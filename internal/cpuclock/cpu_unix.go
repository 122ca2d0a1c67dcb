//go:build unix

package cpuclock

import "syscall"

// processCPU returns the CPU time [ns] the process has used (user plus
// system), so benchmarks on a shared machine can report CPU per operation
// beside wall time.
func processCPU() (int64, bool) {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0, false
	}
	return ru.Utime.Nano() + ru.Stime.Nano(), true
}
