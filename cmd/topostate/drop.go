package main

import (
	"bufio"
	"context"
	"database/sql"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"strings"
	"time"

	"github.com/urfave/cli/v2"

	"github.com/topostate/topostate/schema"
)

func dropCommand() *cli.Command {
	return &cli.Command{
		Name:      "drop",
		Usage:     "remove one analysis from a warehouse: its rows in every table, nothing else",
		ArgsUsage: " ",
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "db", Value: "topostate.duckdb", Usage: "warehouse `FILE`"},
			&cli.StringFlag{Name: "analysis", Usage: "`NAME` of the analysis to remove (see 'topostate info')"},
			&cli.BoolFlag{Name: "yes", Aliases: []string{"y"}, Usage: "do not ask for confirmation"},
		},
		Action: func(c *cli.Context) error {
			if c.NArg() > 0 {
				return usagef("drop takes no arguments (got %q); name the analysis with --analysis", c.Args().First())
			}
			name, path := c.String("analysis"), c.String("db")
			if name == "" {
				return usagef("drop: --analysis NAME is required; 'topostate info --db %s' lists the analyses", path)
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
			id, series, err := findAnalysis(c.Context, path, name)
			if err != nil {
				return err
			}
			if !c.Bool("yes") {
				fmt.Fprintf(c.App.ErrWriter, "drop analysis %q (%d series) from %s? [y/N] ", name, series, path)
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

// findAnalysis returns the id and series count of the analysis called name.
func findAnalysis(ctx context.Context, path, name string) (id, series int, err error) {
	db, err := openRead(ctx, path)
	if err != nil {
		return 0, 0, err
	}
	defer db.Close()
	err = db.QueryRowContext(ctx, `SELECT analysis_id, n_subjects FROM analyses WHERE name = ?`, name).Scan(&id, &series)
	if errors.Is(err, sql.ErrNoRows) {
		var names []string
		rows, qerr := db.QueryContext(ctx, `SELECT name FROM analyses ORDER BY analysis_id`)
		if qerr != nil {
			return 0, 0, fmt.Errorf("drop: %w", qerr)
		}
		defer rows.Close()
		for rows.Next() {
			var n string
			if err := rows.Scan(&n); err != nil {
				return 0, 0, fmt.Errorf("drop: %w", err)
			}
			names = append(names, fmt.Sprintf("%q", n))
		}
		if len(names) == 0 {
			return 0, 0, fmt.Errorf("drop: %s holds no analyses; nothing to remove", path)
		}
		return 0, 0, fmt.Errorf("drop: no analysis named %q in %s; it holds %s", name, path, strings.Join(names, ", "))
	}
	if err != nil {
		return 0, 0, fmt.Errorf("drop: %w", err)
	}
	return id, series, nil
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
