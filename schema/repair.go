package schema

import (
	"context"
	"database/sql"
	"fmt"
	"strings"
	"unicode/utf8"

	"golang.org/x/text/encoding/charmap"
)

// hintNotUTF8 is added to DuckDB's error when a stored name is not UTF-8
// text: an earlier topostate stored a participants.tsv header cell saved
// in Latin-1 as it was, after which DuckDB cannot list the file's columns
// (information_schema, and so every command) until it is renamed.
const hintNotUTF8 = "the warehouse holds a column name that is not UTF-8 text (an earlier topostate stored a Latin-1 " +
	"participants.tsv header as it was); run 'topostate upgrade --db FILE' once: it renames such a column to the " +
	"same characters in UTF-8 and changes nothing else"

// withNameHint adds what to do to an error caused by such a name.
func withNameHint(err error) error {
	if err != nil && strings.Contains(err.Error(), "Invalid unicode") {
		return fmt.Errorf("%w; %s", err, hintNotUTF8)
	}
	return err
}

// RepairNames renames every column of topostate's own tables whose name
// is not valid UTF-8 to its bytes read as Windows-1252 (the superset of
// Latin-1 that spreadsheets write), with "_latin1" added when that name is
// taken, and checkpoints. Column names are read through a query's result
// header, which DuckDB hands over without checking them (its catalog views
// fail on such a name). It returns one line per rename; no rename, no
// change to the file.
func RepairNames(ctx context.Context, db *sql.DB) ([]string, error) {
	conn, err := db.Conn(ctx)
	if err != nil {
		return nil, fmt.Errorf("schema: %w", classify(err))
	}
	defer conn.Close()
	var done []string
	for _, t := range Tables() {
		rows, err := conn.QueryContext(ctx, "SELECT * FROM "+Quote(t)+" LIMIT 0")
		if err != nil {
			continue // a table the file does not have
		}
		cols, err := rows.Columns()
		rows.Close()
		if err != nil {
			return done, fmt.Errorf("schema: %s: %w", t, err)
		}
		taken := map[string]bool{}
		for _, c := range cols {
			taken[strings.ToLower(c)] = true
		}
		for _, c := range cols {
			if utf8.ValidString(c) {
				continue
			}
			to, err := charmap.Windows1252.NewDecoder().String(c)
			if err != nil || !utf8.ValidString(to) {
				to = strings.ToValidUTF8(c, "_")
			}
			for taken[strings.ToLower(to)] {
				to += "_latin1"
			}
			if _, err := conn.ExecContext(ctx, fmt.Sprintf("ALTER TABLE %s RENAME COLUMN %s TO %s", Quote(t), Quote(c), Quote(to))); err != nil {
				return done, fmt.Errorf("schema: rename %s column %s: %w", t, Printable(c), err)
			}
			taken[strings.ToLower(to)] = true
			done = append(done, fmt.Sprintf("%s column \"%s\" renamed to %q (its bytes read as Latin-1)", t, Printable(c), to))
		}
	}
	if len(done) > 0 {
		if err := Checkpoint(ctx, conn, "the renamed columns"); err != nil {
			return done, err
		}
	}
	return done, nil
}
