package schema

import (
	"context"
	"database/sql"
	"database/sql/driver"
	_ "embed"
	"errors"
	"fmt"
	"os"
	"strings"

	"github.com/marcboeker/go-duckdb"
)

// Version is the warehouse layout this build writes and reads.
const Version = 1

//go:embed v1.sql
var ddlV1 string

// DDL returns the embedded DDL of the current version.
func DDL() string { return ddlV1 }

// ErrInUse reports that another process holds the database file.
var ErrInUse = errors.New("database is in use by another process")

// Open opens (creating when missing and not read-only) a warehouse file.
// Read-only opening never creates or changes the file. connInit, when not
// nil, runs on every new connection (the SQL functions are registered there).
func Open(path string, readOnly bool, connInit func(driver.ExecerContext) error) (*sql.DB, error) {
	if readOnly {
		if _, err := os.Stat(path); err != nil {
			return nil, fmt.Errorf("schema: %w", err)
		}
	}
	dsn := path
	if readOnly {
		dsn += "?access_mode=read_only"
	}
	c, err := duckdb.NewConnector(dsn, connInit)
	if err != nil {
		return nil, fmt.Errorf("schema: open %s: %w", path, classify(err))
	}
	db := sql.OpenDB(c)
	// Ping forces the file open now so a lock conflict is reported here.
	if err := db.Ping(); err != nil {
		db.Close()
		return nil, fmt.Errorf("schema: open %s: %w", path, classify(err))
	}
	return db, nil
}

// classify turns DuckDB's lock message into ErrInUse.
func classify(err error) error {
	msg := err.Error()
	if strings.Contains(msg, "Could not set lock on file") || strings.Contains(msg, "Conflicting lock") {
		return fmt.Errorf("%w (%s)", ErrInUse, firstLine(msg))
	}
	return err
}

func firstLine(s string) string {
	if i := strings.IndexByte(s, '\n'); i >= 0 {
		return s[:i]
	}
	return s
}

// Migrate creates the tables of the current version where missing and
// records the version. A file written by a newer layout is refused.
func Migrate(ctx context.Context, conn *sql.Conn) error {
	var n int
	err := conn.QueryRowContext(ctx,
		`SELECT count(*) FROM information_schema.tables WHERE table_name = 'schema_version'`).Scan(&n)
	if err != nil {
		return fmt.Errorf("schema: %w", err)
	}
	if n > 0 {
		var v sql.NullInt64
		if err := conn.QueryRowContext(ctx, `SELECT max(version) FROM schema_version`).Scan(&v); err != nil {
			return fmt.Errorf("schema: read version: %w", err)
		}
		if v.Valid && v.Int64 > Version {
			return fmt.Errorf("schema: the file has layout version %d; this topostate reads up to %d: upgrade topostate", v.Int64, Version)
		}
		if v.Valid && v.Int64 == Version {
			return nil
		}
	}
	if _, err := conn.ExecContext(ctx, ddlV1); err != nil {
		return fmt.Errorf("schema: create tables: %w", err)
	}
	if _, err := conn.ExecContext(ctx, `INSERT INTO schema_version VALUES (?, now())`, Version); err != nil {
		return fmt.Errorf("schema: record version: %w", err)
	}
	return nil
}

// CheckLayout reports whether a file opened read-only carries a layout this
// build understands.
func CheckLayout(ctx context.Context, db *sql.DB) error {
	var tables int
	if err := db.QueryRowContext(ctx, `SELECT count(*) FROM information_schema.tables WHERE table_schema = 'main'`).Scan(&tables); err == nil && tables == 0 {
		return errors.New("schema: the file holds no tables yet (it is new, or its first ingest stopped before committing); 'topostate ingest' fills it")
	}
	var v sql.NullInt64
	err := db.QueryRowContext(ctx, `SELECT max(version) FROM schema_version`).Scan(&v)
	if err != nil {
		return fmt.Errorf("schema: not a topostate warehouse (no schema_version table): %w", err)
	}
	if !v.Valid || v.Int64 > Version {
		return fmt.Errorf("schema: unsupported layout version %v (this build reads %d)", v.Int64, Version)
	}
	return nil
}

// Quote quotes an SQL identifier.
func Quote(ident string) string {
	return `"` + strings.ReplaceAll(ident, `"`, `""`) + `"`
}
