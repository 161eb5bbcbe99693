//go:build unix

package main

import (
	"os"
	"runtime"
	"syscall"
)

// maxRSSKiB is a finished process's peak resident memory in KiB, from
// getrusage(2): KiB on Linux, bytes on other systems, so 0 there.
func maxRSSKiB(ps *os.ProcessState) int64 {
	if ru, ok := ps.SysUsage().(*syscall.Rusage); ok && runtime.GOOS == "linux" {
		return int64(ru.Maxrss)
	}
	return 0
}
