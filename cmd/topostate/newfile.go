package main

import (
	"context"
	"database/sql"
	"errors"
	"io/fs"
	"os"
)

// A warehouse file a run is about to create may be created by another run
// at the same moment (two first ingests, or a merge and an ingest, into the
// same new file). Only one of them can hold DuckDB's lock on it, and a file
// holds an analysis only once a run committed it. So a failing run removes
// the file it meant to create only while it still holds the lock (its
// database handle is open) and the file holds no table at all: nothing was
// ever committed there, by this run or another. A run that lost the lock,
// or finds anything in the file, leaves it alone.

// missing reports whether path does not exist yet (the run may create it).
func missing(path string) bool {
	_, err := os.Lstat(path)
	return errors.Is(err, fs.ErrNotExist)
}

// discardIfEmpty removes path and its .wal when the open db (which holds
// the file's lock) shows no table in it. Call it before closing db, and
// only for a file that was missing when the run started.
func discardIfEmpty(db *sql.DB, path string) {
	var n int
	err := db.QueryRowContext(context.Background(),
		`SELECT count(*) FROM information_schema.tables WHERE table_catalog = current_database()`).Scan(&n)
	if err != nil || n != 0 {
		return
	}
	os.Remove(path)
	os.Remove(path + ".wal")
}
