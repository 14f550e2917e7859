//go:build unix

// Package internal holds test helpers of the calib packages.
package internal

import "syscall"

// CPUTime returns the user plus system CPU time this process has used, in
// ns, so that a benchmark on a shared machine can report the processor time
// it needed beside the wall time it waited for.
func CPUTime() float64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return float64(ru.Utime.Nano() + ru.Stime.Nano())
}
