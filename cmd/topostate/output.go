package main

import (
	"fmt"
	"io"
	"os"
	"path/filepath"

	"github.com/topostate/topostate/schema"
)

// Read-only commands (query, report, plot, export) write only the files
// they are asked for, and never over the warehouse they read: refuseClobber
// refuses an output path that is the warehouse or its .wal by any name
// (schema.Clobbers), and writeAtomic writes a file beside its target and
// renames it into place only once it is whole, so a failed or interrupted
// run leaves an existing file as it was.

// refuseClobber is a usage error (exit 2) when out would overwrite db.
func refuseClobber(cmd, flag, out, db string) error {
	if schema.Clobbers(out, db) {
		return usagef("%s: %s %s is the warehouse %s (or its .wal file) by another name; a read-only command never writes over it: choose another path", cmd, flag, out, db)
	}
	return nil
}

// writeAtomic calls write with a temporary file in path's folder and
// renames it to path when write and the close succeed; otherwise the
// temporary is removed and path is untouched. The new file gets the mode of
// the file it replaces, or 0644.
func writeAtomic(cmd, path string, write func(w io.Writer) error) error {
	dir := filepath.Dir(path)
	tmp, err := os.CreateTemp(dir, "."+filepath.Base(path)+"-*.tmp")
	if err != nil {
		return fmt.Errorf("%s: %w", cmd, err)
	}
	defer os.Remove(tmp.Name()) // a no-op after the rename
	mode := os.FileMode(0o644)
	if st, err := os.Stat(path); err == nil && st.Mode().IsRegular() {
		mode = st.Mode().Perm()
	}
	err = write(tmp)
	if cerr := tmp.Close(); err == nil && cerr != nil {
		err = fmt.Errorf("%s: %w", cmd, cerr)
	}
	if err != nil {
		return err
	}
	if err := os.Chmod(tmp.Name(), mode); err != nil {
		return fmt.Errorf("%s: %w", cmd, err)
	}
	if err := os.Rename(tmp.Name(), path); err != nil {
		return fmt.Errorf("%s: %w", cmd, err)
	}
	return nil
}
