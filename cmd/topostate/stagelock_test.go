//go:build unix

package main

import (
	"os"
	"syscall"
	"testing"
)

// holdStageLock takes the advisory lock a running stage holds (as another
// process running the same shard would) until the returned function is
// called.
func holdStageLock(t *testing.T, path string) func() {
	t.Helper()
	f, err := os.OpenFile(path, os.O_RDWR|os.O_CREATE, 0o644)
	if err != nil {
		t.Fatal(err)
	}
	if err := syscall.Flock(int(f.Fd()), syscall.LOCK_EX|syscall.LOCK_NB); err != nil {
		f.Close()
		t.Fatal(err)
	}
	return func() { f.Close() }
}
