package queries

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/topostate/topostate/schema"
)

const holdLockEnv = "TOPOSTATE_TEST_HOLD_LOCK"

// holdLock runs in a child process (the test binary started again with
// holdLockEnv set): it opens the warehouse for writing, which takes DuckDB's
// file lock, says "locked", and keeps the lock until its stdin closes.
func holdLock(path string) {
	db, err := schema.Open(path, false, nil)
	if err != nil {
		fmt.Println("error:", err)
		os.Exit(1)
	}
	fmt.Println("locked")
	io.Copy(io.Discard, os.Stdin)
	db.Close()
}

// Another process holds the file for writing: Open must fail at once with
// an error wrapping schema.ErrInUse, not hang and not crash. DuckDB's lock
// is per process, so the writer is a real second process.
func TestOpenWhileAnotherProcessWrites(t *testing.T) {
	path := filepath.Join(t.TempDir(), "copy.duckdb")
	b, err := os.ReadFile(warehousePath)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
	cmd := exec.Command(os.Args[0], "-test.run=^$")
	cmd.Env = append(os.Environ(), holdLockEnv+"="+path)
	stdin, err := cmd.StdinPipe()
	if err != nil {
		t.Fatal(err)
	}
	stdout, err := cmd.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	defer func() {
		stdin.Close()
		cmd.Wait()
	}()
	line, err := bufio.NewReader(stdout).ReadString('\n')
	if err != nil || strings.TrimSpace(line) != "locked" {
		t.Fatalf("the writer process said %q, %v", line, err)
	}
	done := make(chan error, 1)
	start := time.Now()
	go func() {
		d, err := Open(context.Background(), path)
		if err == nil {
			d.Close()
		}
		done <- err
	}()
	select {
	case err := <-done:
		if !errors.Is(err, schema.ErrInUse) {
			t.Fatalf("Open while another process writes: %v; want schema.ErrInUse", err)
		}
		if !strings.Contains(err.Error(), "in use by another process") {
			t.Errorf("message %q does not say the file is in use", err)
		}
		t.Logf("refused after %v: %v", time.Since(start), err)
	case <-time.After(30 * time.Second):
		t.Fatal("Open did not return within 30 s while another process held the file")
	}
}
