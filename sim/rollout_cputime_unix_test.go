//go:build unix

package sim

import "syscall"

// benchCPUSeconds is the CPU time (user + system) the test process has
// used. Benchmarks report it per operation beside the wall time, because
// on a shared machine the wall time also counts waiting for a core; with
// zero allocations there is no garbage collector time in it.
func benchCPUSeconds() float64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	tv := func(t syscall.Timeval) float64 { return float64(t.Sec) + 1e-6*float64(t.Usec) }
	return tv(ru.Utime) + tv(ru.Stime)
}
