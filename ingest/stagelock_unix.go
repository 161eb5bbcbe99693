//go:build unix

package ingest

import (
	"errors"
	"fmt"
	"os"
	"syscall"
)

// lockStage takes an exclusive lock on path (created when missing) for
// one stage of one shard, so two runs of the same shard never write at the
// same time. The kernel releases it when the process ends, however it
// ends, so a killed run never leaves a stale lock. It fails at once when
// another process holds it.
func lockStage(path, what string) (unlock func(), err error) {
	f, err := os.OpenFile(path, os.O_RDWR|os.O_CREATE, 0o644)
	if err != nil {
		return nil, fmt.Errorf("ingest: lock %s: %w", path, err)
	}
	if err := syscall.Flock(int(f.Fd()), syscall.LOCK_EX|syscall.LOCK_NB); err != nil {
		f.Close()
		if errors.Is(err, syscall.EWOULDBLOCK) {
			return nil, fmt.Errorf("ingest: %s is running in another process (it holds %s); wait for it to finish, or stop it, before running it again", what, path)
		}
		return nil, fmt.Errorf("ingest: lock %s: %w", path, err)
	}
	return func() { f.Close() }, nil
}
