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

// Version is the warehouse layout this build writes and reads. Layout 2
// is layout 1 with the tables and nullable columns added since (all in
// v1.sql); Upgrade brings a layout-1 file to it in place. Layout 3 adds
// core_betti_curves and state_networks.core_timepoints (docs/methods.md §7);
// Upgrade brings a layout-1 or -2 file to it the same way.
const Version = 3

//go:embed v1.sql
var ddlV1 string

// DDL returns the embedded DDL of the current version.
func DDL() string { return ddlV1 }

// ErrInUse reports that another process holds the database file.
var ErrInUse = errors.New("database is in use by another process")

// Open opens (creating when missing and not read-only) a warehouse file.
// Read-only opening never creates or changes the file, and its connections
// cannot write any file (see readOnlyGuard and CheckSQL). connInit, when
// not nil, runs on every new connection (the SQL functions are registered
// there).
//
// The path is never read as DuckDB options: go-duckdb cuts a connection
// string at its first '?' and parses the rest as settings, so a path that
// holds '?' or '%' is refused with a clear message rather than opened as
// another file (see checkPath).
func Open(path string, readOnly bool, connInit func(driver.ExecerContext) error) (*sql.DB, error) {
	if err := checkPath(path); err != nil {
		return nil, err
	}
	if readOnly {
		if _, err := os.Stat(path); err != nil {
			return nil, fmt.Errorf("schema: %w", err)
		}
	}
	dsn := path
	init := connInit
	if readOnly {
		dsn += "?access_mode=read_only&autoinstall_known_extensions=false&allow_community_extensions=false&allow_persistent_secrets=false"
		init = func(ex driver.ExecerContext) error {
			if connInit != nil {
				if err := connInit(ex); err != nil {
					return err
				}
			}
			return readOnlyGuard(ex)
		}
	}
	c, err := duckdb.NewConnector(dsn, init)
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

// checkPath refuses a database path that DuckDB's Go driver would not open
// as the file named: the driver cuts the string at the first '?' and reads
// the rest as settings (access_mode=..., a different file, ...), and a '%'
// is decoded as a URL escape. An empty path would open an in-memory
// database, and ":memory:" is not a file.
func checkPath(path string) error {
	switch {
	case path == "":
		return errors.New("schema: no database file given (--db FILE)")
	case strings.HasPrefix(path, ":memory:"):
		return fmt.Errorf("schema: %q is not a file; give a warehouse file with --db", path)
	case strings.ContainsAny(path, "?%"):
		return fmt.Errorf("schema: database path %q holds '?' or '%%', which DuckDB's driver reads as connection settings, not as part of the name; rename the file or its folder (or reach it through a symbolic link without those characters)", path)
	}
	return nil
}

// readOnlyGuard runs on every connection of a read-only warehouse: it
// locks the configuration, so no SET can later point a setting at a file
// (profiling_output, temp_directory, secret_directory, extension_directory,
// enable_external_access, ...). Extension installs and persistent secrets
// are already off through the connection string. What statements may run
// is CheckSQL's job.
func readOnlyGuard(ex driver.ExecerContext) error {
	// The setting belongs to the database, not the connection: on the
	// second connection it is already locked, which is what we want.
	if _, err := ex.ExecContext(context.Background(), "SET lock_configuration = true", nil); err != nil &&
		!strings.Contains(err.Error(), "configuration has been locked") {
		return fmt.Errorf("schema: lock the configuration: %w", err)
	}
	return nil
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
// records the version; run it inside the writing transaction. A file of an
// older layout is upgraded in place (Upgrade). A file written by a newer
// layout is refused.
func Migrate(ctx context.Context, conn *sql.Conn) error {
	v, err := layoutVersion(ctx, conn)
	if err != nil {
		return err
	}
	switch {
	case v > Version:
		return fmt.Errorf("schema: the file has layout version %d; this topostate reads up to %d: upgrade topostate", v, Version)
	case v == Version:
		return nil
	case v > 0:
		return upgrade(ctx, conn, v)
	}
	if _, err := conn.ExecContext(ctx, ddlV1); err != nil {
		return fmt.Errorf("schema: create tables: %w", err)
	}
	if _, err := conn.ExecContext(ctx, `INSERT INTO schema_version VALUES (?, now())`, Version); err != nil {
		return fmt.Errorf("schema: record version: %w", err)
	}
	return nil
}

type queryer interface {
	QueryRowContext(ctx context.Context, query string, args ...any) *sql.Row
}

// layoutVersion returns the file's recorded layout version, 0 when it has
// no schema_version table (a new file).
func layoutVersion(ctx context.Context, q queryer) (int64, error) {
	var n int
	err := q.QueryRowContext(ctx,
		`SELECT count(*) FROM information_schema.tables WHERE table_schema = 'main' AND table_name = 'schema_version'`).Scan(&n)
	if err != nil {
		return 0, fmt.Errorf("schema: %w", err)
	}
	if n == 0 {
		return 0, nil
	}
	var v sql.NullInt64
	if err := q.QueryRowContext(ctx, `SELECT max(version) FROM schema_version`).Scan(&v); err != nil {
		return 0, fmt.Errorf("schema: read version: %w", err)
	}
	if !v.Valid {
		return 0, errors.New("schema: the file's schema_version table is empty: not a topostate warehouse, or damaged")
	}
	return v.Int64, nil
}

// upgrade brings a file of layout from (older than Version) to Version
// inside the caller's transaction: it creates the tables the file lacks and
// adds every column of v1.sql a table lacks as a nullable column (older
// analyses read NULL there), then records the version. The columns are
// derived from the DDL itself (DDLColumns), so a column added to v1.sql is
// covered without a hand-written ALTER.
func upgrade(ctx context.Context, conn *sql.Conn, from int64) error {
	if _, err := conn.ExecContext(ctx, ddlV1); err != nil { // CREATE TABLE IF NOT EXISTS: only the missing ones
		return fmt.Errorf("schema: upgrade layout %d to %d: create tables: %w", from, Version, err)
	}
	for _, t := range DDLColumns() {
		have, err := tableColumns(ctx, conn, t.Table)
		if err != nil {
			return err
		}
		for _, c := range t.Columns {
			if have[strings.ToLower(c.Name)] {
				continue
			}
			stmt := fmt.Sprintf("ALTER TABLE %s ADD COLUMN %s %s", Quote(t.Table), Quote(c.Name), c.Type)
			if _, err := conn.ExecContext(ctx, stmt); err != nil {
				return fmt.Errorf("schema: upgrade layout %d to %d: add %s.%s: %w", from, Version, t.Table, c.Name, err)
			}
		}
	}
	if _, err := conn.ExecContext(ctx, `INSERT INTO schema_version VALUES (?, now())`, Version); err != nil {
		return fmt.Errorf("schema: record version: %w", err)
	}
	return nil
}

func tableColumns(ctx context.Context, conn *sql.Conn, table string) (map[string]bool, error) {
	rows, err := conn.QueryContext(ctx, `SELECT column_name FROM information_schema.columns WHERE table_schema = 'main' AND table_name = ?`, table)
	if err != nil {
		return nil, fmt.Errorf("schema: %w", err)
	}
	defer rows.Close()
	have := map[string]bool{}
	for rows.Next() {
		var n string
		if err := rows.Scan(&n); err != nil {
			return nil, fmt.Errorf("schema: %w", err)
		}
		have[strings.ToLower(n)] = true
	}
	return have, rows.Err()
}

// DDLTable is one table of v1.sql with its columns' full types.
type DDLTable struct {
	Table   string
	Columns []DDLColumn
}

// DDLColumn is one column of v1.sql: its name and its type as written
// (DOUBLE, VARCHAR[], DECIMAL(9,3), ...), without constraints.
type DDLColumn struct{ Name, Type string }

// DDLColumns lists the CREATE TABLE blocks of the embedded DDL in order,
// from the same parse as Dictionary. These are the only tables
// topostate owns: drop and upgrade touch nothing else.
func DDLColumns() []DDLTable {
	var out []DDLTable
	for _, t := range Dictionary() {
		d := DDLTable{Table: t.Name}
		for _, c := range t.Columns {
			d.Columns = append(d.Columns, DDLColumn{Name: c.Column, Type: c.Type})
		}
		out = append(out, d)
	}
	return out
}

// Tables returns the names of topostate's own tables, in DDL order.
func Tables() []string {
	var out []string
	for _, t := range DDLColumns() {
		out = append(out, t.Table)
	}
	return out
}

// ErrOldLayout is wrapped by CheckLayout's error for a file of an older
// layout: a writing command (or 'topostate upgrade') upgrades it.
var ErrOldLayout = errors.New("older warehouse layout")

// CheckLayout reports whether a file opened read-only carries a layout this
// build understands. A file of an older layout is refused with what to do
// (wrapping ErrOldLayout): read-only commands never change a file.
func CheckLayout(ctx context.Context, db *sql.DB) error {
	var tables int
	if err := db.QueryRowContext(ctx, `SELECT count(*) FROM information_schema.tables WHERE table_schema = 'main'`).Scan(&tables); err == nil && tables == 0 {
		return errors.New("schema: the file holds no tables yet (it is new, or its first ingest stopped before committing); 'topostate ingest' fills it")
	}
	v, err := layoutVersion(ctx, db)
	if err != nil {
		return err
	}
	switch {
	case v == 0:
		return errors.New("schema: not a topostate warehouse (no schema_version table)")
	case v > Version:
		return fmt.Errorf("schema: the file has layout version %d; this topostate reads up to %d: upgrade topostate", v, Version)
	case v < Version:
		return fmt.Errorf("schema: %w: the file has layout version %d and this topostate reads version %d; "+
			"read-only commands do not change a file, so upgrade it once with 'topostate upgrade --db FILE' "+
			"(any writing command, such as ingest or drop, also upgrades it; older topostate builds cannot read it afterwards)", ErrOldLayout, v, Version)
	}
	return nil
}

// Quote quotes an SQL identifier.
func Quote(ident string) string {
	return `"` + strings.ReplaceAll(ident, `"`, `""`) + `"`
}

// Upgrade brings the file behind db (opened for writing) to the current
// layout in one transaction and checkpoints it, so the upgraded layout is in
// the file itself. It returns the version the file had (Version when there
// was nothing to do).
func Upgrade(ctx context.Context, db *sql.DB) (from int64, err error) {
	conn, err := db.Conn(ctx)
	if err != nil {
		return 0, fmt.Errorf("schema: %w", classify(err))
	}
	defer conn.Close()
	if from, err = layoutVersion(ctx, conn); err != nil {
		return 0, err
	}
	if from == 0 {
		return 0, errors.New("schema: not a topostate warehouse (no schema_version table); nothing upgraded")
	}
	if from >= Version {
		if err := Migrate(ctx, conn); err != nil { // refuses a newer layout
			return from, err
		}
		return from, Checkpoint(ctx, conn, "")
	}
	if _, err := conn.ExecContext(ctx, "BEGIN TRANSACTION"); err != nil {
		return from, fmt.Errorf("schema: begin: %w", classify(err))
	}
	if err := Migrate(ctx, conn); err != nil {
		conn.ExecContext(context.Background(), "ROLLBACK")
		return from, err
	}
	if _, err := conn.ExecContext(context.Background(), "COMMIT"); err != nil {
		conn.ExecContext(context.Background(), "ROLLBACK")
		return from, fmt.Errorf("schema: commit the upgrade: %w", err)
	}
	return from, Checkpoint(ctx, conn, "")
}

// checkpointFailEnv is a test hook, not a user setting (undocumented on
// purpose): when set, Checkpoint fails as a full disk would make it fail,
// after the COMMIT, so cmd/topostate's storage-fault tests can check that
// success is never reported for data that is only in the .wal file.
const checkpointFailEnv = "TOPOSTATE_TEST_FAIL_CHECKPOINT"

// ErrNotDurable is wrapped by Checkpoint's error: the transaction was
// committed into the write-ahead log but could not be copied into the
// database file itself.
var ErrNotDurable = errors.New("committed to the write-ahead log but not written into the database file")

// Checkpoint copies committed transactions from the write-ahead log
// (FILE.wal) into the database file and reports a failure (a full disk, a
// read-only medium). what names the committed work in the message.
func Checkpoint(ctx context.Context, conn *sql.Conn, what string) error {
	var err error
	if os.Getenv(checkpointFailEnv) != "" {
		err = errors.New("IO Error: could not write to the file: No space left on device (simulated by a test hook)")
	} else {
		_, err = conn.ExecContext(context.Background(), "CHECKPOINT")
	}
	if err != nil {
		if what == "" {
			what = "the change"
		}
		return fmt.Errorf("schema: %w: %s is in the .wal file beside the warehouse; keep both files together, free disk space, "+
			"then run 'topostate upgrade --db FILE' (or any command that writes the file) to complete it: %v", ErrNotDurable, what, err)
	}
	return nil
}
