package main

import (
	"bufio"
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"strings"
	"time"

	"github.com/urfave/cli/v2"

	"github.com/topostate/topostate/queries"
	"github.com/topostate/topostate/schema"
)

func dropCommand() *cli.Command {
	return &cli.Command{
		Name:      "drop",
		Usage:     "remove one analysis from a warehouse: its rows in every table, nothing else",
		ArgsUsage: " ",
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "db", Value: "topostate.duckdb", Usage: "warehouse `FILE`"},
			analysisFlag("required (see 'topostate info')"),
			&cli.BoolFlag{Name: "yes", Aliases: []string{"y"}, Usage: "do not ask for confirmation"},
		},
		Action: func(c *cli.Context) error {
			if c.NArg() > 0 {
				return usagef("drop takes no arguments (got %q); name the analysis with --analysis", c.Args().First())
			}
			given, path := c.String("analysis"), c.String("db")
			if given == "" {
				return usagef("drop: --analysis is required (an id, a name or latest); 'topostate info --db %s' lists the analyses", path)
			}
			if _, err := os.Stat(path); errors.Is(err, fs.ErrNotExist) {
				return fmt.Errorf("drop: %s does not exist", path)
			}
			// drop writes the file, so it upgrades an older layout first
			// (as ingest does); the read-only look below needs the layout.
			if err := upgradeIfOld(c, path); err != nil {
				return err
			}
			// Look first with a read-only handle, so the write lock is not
			// held while a person reads the question.
			id, name, series, err := findAnalysis(c.Context, path, given)
			if err != nil {
				return err
			}
			if !c.Bool("yes") {
				fmt.Fprintf(c.App.ErrWriter, "drop analysis %d (%q, %d series) from %s? [y/N] ", id, name, series, path)
				if !confirmed(c.App.Reader) {
					fmt.Fprintln(c.App.ErrWriter)
					return errors.New("drop: not confirmed; nothing was removed (answer y, or pass --yes)")
				}
			}
			rows, tables, err := dropAnalysis(c.Context, path, id, name)
			if err != nil {
				return err
			}
			fmt.Fprintf(c.App.Writer, "dropped analysis %q (id %d): %d rows from %d tables of %s\n", name, id, rows, tables, path)
			// DuckDB does not shrink a file when rows are deleted: the
			// checkpoint frees their blocks for later ingests, and VACUUM
			// does not return them to the file system; a copy does.
			if st, err := os.Stat(path); err == nil {
				fmt.Fprintf(c.App.Writer, "the file keeps its size (%s): DuckDB reuses the freed space for later ingests but does not shrink the file;\n"+
					"to shrink it, copy the warehouse into a new file with DuckDB's COPY FROM DATABASE:\n"+
					"  duckdb -c \"ATTACH %s AS old (READ_ONLY); ATTACH %s AS new; COPY FROM DATABASE old TO new\"\n",
					byteSize(st.Size()), sqlString(path), sqlString(path+".compact.duckdb"))
			}
			return nil
		},
	}
}

// confirmed reads one answer line; only y or yes (any case) agrees.
func confirmed(r io.Reader) bool {
	line, _ := bufio.NewReader(r).ReadString('\n')
	a := strings.ToLower(strings.TrimSpace(line))
	return a == "y" || a == "yes"
}

// findAnalysis resolves v (an id, a name or latest: queries.FindAnalysis)
// and returns the analysis's id, name and series count.
func findAnalysis(ctx context.Context, path, v string) (id int, name string, series int, err error) {
	db, err := openRead(ctx, path)
	if err != nil {
		return 0, "", 0, err
	}
	defer db.Close()
	a, err := queries.FindAnalysis(ctx, db, v)
	if errors.Is(err, queries.ErrNoAnalysis) {
		return 0, "", 0, usageError{fmt.Errorf("drop: %s: %w", path, err)}
	}
	if err != nil {
		return 0, "", 0, fmt.Errorf("drop: %w", err)
	}
	if err := db.QueryRowContext(ctx, `SELECT n_subjects FROM analyses WHERE analysis_id = ?`, a.ID).Scan(&series); err != nil {
		return 0, "", 0, fmt.Errorf("drop: %w", err)
	}
	return int(a.ID), a.Name, series, nil
}

// dropAnalysis deletes every row carrying analysis_id = id, from every table
// that has that column, in one transaction. It checks again inside the
// transaction that id still names the analysis.
func dropAnalysis(ctx context.Context, path string, id int, name string) (rows int64, tables int, err error) {
	db, err := schema.Open(path, false, nil)
	if err != nil {
		return 0, 0, err
	}
	defer db.Close()
	tx, err := db.BeginTx(ctx, nil)
	if err != nil {
		return 0, 0, fmt.Errorf("drop: %w", err)
	}
	defer tx.Rollback()
	var still string
	if err := tx.QueryRowContext(ctx, `SELECT name FROM analyses WHERE analysis_id = ?`, id).Scan(&still); err != nil || still != name {
		return 0, 0, fmt.Errorf("drop: analysis %q changed while asking; nothing was removed, run again", name)
	}
	// Only topostate's own tables (the fixed list of its DDL), never a
	// user's table or view that happens to have an analysis_id column.
	var names []string
	for _, t := range schema.DDLColumns() {
		if t.Table == "analyses" || t.Table == "dropped_analyses" {
			continue
		}
		for _, col := range t.Columns {
			if col.Name == "analysis_id" {
				names = append(names, t.Table)
				break
			}
		}
	}
	names = append(names, "analyses") // last: the analysis disappears with its rows
	for _, t := range names {
		res, err := tx.ExecContext(ctx, fmt.Sprintf("DELETE FROM %s WHERE analysis_id = ?", schema.Quote(t)), id)
		if err != nil {
			return 0, 0, fmt.Errorf("drop: delete from %s: %w", t, err)
		}
		n, err := res.RowsAffected()
		if err != nil {
			return 0, 0, fmt.Errorf("drop: %w", err)
		}
		rows += n
	}
	if _, err := tx.ExecContext(ctx, `INSERT INTO dropped_analyses VALUES (?, ?, ?, ?)`, id, name, time.Now().UTC(), rows); err != nil {
		return 0, 0, fmt.Errorf("drop: record the drop: %w", err)
	}
	if err := tx.Commit(); err != nil {
		return 0, 0, fmt.Errorf("drop: commit: %w", err)
	}
	conn, err := db.Conn(ctx)
	if err != nil {
		return 0, 0, fmt.Errorf("drop: %w", err)
	}
	defer conn.Close()
	if err := schema.Checkpoint(ctx, conn, fmt.Sprintf("the drop of analysis %q", name)); err != nil {
		return 0, 0, err
	}
	return rows, len(names), nil
}

// upgradeIfOld upgrades a file of an older layout in place (a writing
// command's right; read-only commands only explain).
func upgradeIfOld(c *cli.Context, path string) error {
	db, err := schema.Open(path, true, nil)
	if err != nil {
		return err
	}
	err = schema.CheckLayout(c.Context, db)
	db.Close()
	if !errors.Is(err, schema.ErrOldLayout) {
		return nil // other problems are reported by the command's own open
	}
	_, err = upgradeFile(c, path)
	return err
}

// byteSize writes a file size in MiB (or bytes when small).
func byteSize(n int64) string {
	if n < 1<<20 {
		return fmt.Sprintf("%d bytes", n)
	}
	return fmt.Sprintf("%.1f MiB", float64(n)/(1<<20))
}

// sqlString quotes s as an SQL string literal.
func sqlString(s string) string { return "'" + strings.ReplaceAll(s, "'", "''") + "'" }
