//go:build unix

package mpc

import "syscall"

// processCPUSeconds is the CPU time the test process has used (user +
// system, all threads), for benchmark metrics that do not count the time
// spent waiting for a core on a shared machine.
func processCPUSeconds() float64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	tv := func(t syscall.Timeval) float64 { return float64(t.Sec) + 1e-6*float64(t.Usec) }
	return tv(ru.Utime) + tv(ru.Stime)
}
