package main

import (
	"database/sql"
	"os"
	"path/filepath"

	"github.com/urfave/cli/v2"

	"github.com/topostate/topostate/ingest"
)

// replicationFlags place a cohort in the states of an earlier analysis.
func replicationFlags() []cli.Flag {
	return []cli.Flag{
		&cli.StringFlag{Name: "states-from", Usage: "reuse the states of analysis `NAME` instead of fitting: every window is assigned to its centroids (regions and window settings must match)"},
		&cli.StringFlag{Name: "states-db", Usage: "warehouse `FILE` holding the --states-from analysis (default: the --db file)"},
	}
}

// fitFlags have no effect when the states are reused.
var fitFlags = []string{"states", "states-min", "states-max", "k-rule", "gap-references", "gap-windows", "strength-splits", "strength-windows", "strength-threshold", "strength-halving", "fit-windows", "fit-memory", "fit-sample", "restarts", "scan-restarts", "max-iter"}

// checkReplicationFlags refuses --states-db without --states-from and the
// fitting options beside --states-from.
func checkReplicationFlags(c *cli.Context) error {
	if c.String("states-from") == "" {
		if c.String("states-db") != "" {
			return usagef("--states-db names the file of a --states-from analysis; give --states-from NAME too")
		}
		return nil
	}
	for _, f := range fitFlags {
		if c.IsSet(f) {
			return usagef("--%s fits states, but --states-from reuses those of %q; leave one out", f, c.String("states-from"))
		}
	}
	return nil
}

// loadStatesFrom reads the --states-from analysis: from db (the file being
// written, dbPath) or from the --states-db file opened read-only. It
// returns nil when --states-from is not given.
func loadStatesFrom(c *cli.Context, db *sql.DB, dbPath string) (*ingest.StatesFrom, error) {
	name := c.String("states-from")
	if name == "" {
		return nil, nil
	}
	src, err := filepath.Abs(dbPath)
	if err != nil {
		return nil, err
	}
	if other := c.String("states-db"); other != "" {
		abs, err := filepath.Abs(other)
		if err != nil {
			return nil, err
		}
		if abs != src {
			if _, err := os.Stat(other); err != nil {
				return nil, usagef("--states-db: %v", err)
			}
			odb, err := openRead(c.Context, other)
			if err != nil {
				return nil, err
			}
			defer odb.Close()
			return ingest.LoadStates(c.Context, odb, abs, name)
		}
	}
	return ingest.LoadStates(c.Context, db, src, name)
}
