package queries

import (
	"context"
	"database/sql"
	"database/sql/driver"
	"errors"
	"fmt"
	"regexp"
	"strings"

	"github.com/marcboeker/go-duckdb"
)

// ErrWrites is wrapped by the error for a statement that could write a
// file, refused on topostate's read-only connections.
var ErrWrites = errors.New("statement not allowed on a read-only warehouse")

// The warehouse is opened read-only, so DuckDB itself refuses changes to
// it; but a statement can still write other files (COPY ... TO, EXPORT
// DATABASE, ATTACH ... (READ_WRITE), INSTALL, a persistent secret,
// PREPARE/EXECUTE of any of these). The guard lets through what reads:
// queries (SELECT, WITH, FROM, VALUES, PIVOT with its IN list, SUMMARIZE,
// DESCRIBE, SHOW, PRAGMA table_info and the like, which DuckDB rewrites
// into queries), EXPLAIN, SET/RESET VARIABLE, temporary macros, views and
// tables (in memory), ATTACH ... (READ_ONLY), DETACH and transaction
// statements. The configuration is locked on these connections
// (schema.Open), so no SET can point a setting at a file either. Reading a
// user's own files (read_csv, read_parquet) is a query and stays allowed.
var (
	setVariableRe = regexp.MustCompile(`(?is)^\s*(SET|RESET)\s+VARIABLE\b`)
	createTempRe  = regexp.MustCompile(`(?is)^\s*CREATE\s+(OR\s+REPLACE\s+)?(TEMP|TEMPORARY)\s+(MACRO|FUNCTION|VIEW|TABLE|SEQUENCE)\b`)
	dropRe        = regexp.MustCompile(`(?is)^\s*DROP\s+(MACRO|FUNCTION|VIEW|TABLE|SEQUENCE)\b`)
	explainAnaRe  = regexp.MustCompile(`(?is)^\s*EXPLAIN\s+ANALY[SZ]E\s+`)
	pivotWordRe   = regexp.MustCompile(`(?i)\b(UN)?PIVOT\b`)
	queryStartRe  = regexp.MustCompile(`(?i)^[\s(]*(SELECT|WITH|FROM|PIVOT|UNPIVOT|VALUES)\b`)
	readOnlyRe    = regexp.MustCompile(`(?i)\bREAD_ONLY\b`)
	readWriteRe   = regexp.MustCompile(`(?i)\bREAD_WRITE\b|\bACCESS_MODE\b`)
)

// checkStatement prepares one statement (go-duckdb's Prepare without a
// context refuses text holding more than one statement, so nothing runs)
// and refuses it unless its type reads only.
func checkStatement(conn *sql.Conn, stmt string) error {
	var typ duckdb.StmtType
	err := conn.Raw(func(dc any) error {
		s, err := dc.(driver.Conn).Prepare(stmt)
		if err != nil {
			return err
		}
		defer s.Close()
		ds, ok := s.(*duckdb.Stmt)
		if !ok {
			return errors.New("not a DuckDB statement")
		}
		typ, err = ds.StatementType()
		return err
	})
	if err != nil && pivotWordRe.MatchString(stripSQLComments(stmt)) && queryStartRe.MatchString(stripSQLComments(stmt)) &&
		!strings.ContainsAny(stmt, "$\\") {
		// A PIVOT without an IN list is one statement that DuckDB's parser
		// expands into several (it first collects the pivoted values), so
		// Prepare reports "multi-statement". Without '$' and '\' the text's
		// quotes and comments are lexed the same by splitSQL and DuckDB, so
		// splitSQL's "one statement" is DuckDB's too; one statement that
		// starts as a query (SELECT, WITH, FROM, PIVOT, ...) only reads.
		return nil
	}
	if err != nil {
		return err
	}
	refuse := func(hint string) error {
		return fmt.Errorf("queries: %w: %s; %s", ErrWrites, firstWords(stmt), hint)
	}
	switch typ {
	case duckdb.STATEMENT_TYPE_SELECT, duckdb.STATEMENT_TYPE_TRANSACTION, duckdb.STATEMENT_TYPE_DETACH:
		return nil
	case duckdb.STATEMENT_TYPE_EXPLAIN:
		if loc := explainAnaRe.FindStringIndex(stmt); loc != nil { // EXPLAIN ANALYZE runs its statement
			return checkStatement(conn, stmt[loc[1]:])
		}
		return nil
	case duckdb.STATEMENT_TYPE_SET, duckdb.STATEMENT_TYPE_VARIABLE_SET:
		if setVariableRe.MatchString(stmt) {
			return nil
		}
		return refuse("settings cannot be changed on a read-only warehouse (SET VARIABLE name = value sets a variable)")
	case duckdb.STATEMENT_TYPE_CREATE:
		if createTempRe.MatchString(stmt) {
			return nil
		}
		return refuse("only CREATE TEMP MACRO/VIEW/TABLE (kept in memory) is allowed")
	case duckdb.STATEMENT_TYPE_DROP:
		if dropRe.MatchString(stmt) {
			return nil
		}
		return refuse("only temporary macros, views and tables can be dropped")
	case duckdb.STATEMENT_TYPE_ATTACH:
		if readOnlyRe.MatchString(stmt) && !readWriteRe.MatchString(stmt) {
			return nil
		}
		return refuse("attach other files read-only: ATTACH 'file' AS name (READ_ONLY)")
	case duckdb.STATEMENT_TYPE_COPY, duckdb.STATEMENT_TYPE_EXPORT:
		return refuse("write results with 'topostate query --format csv|parquet --out FILE' or 'topostate export'")
	case duckdb.STATEMENT_TYPE_CALL:
		return refuse("call a table function with SELECT * FROM name(...)")
	}
	return refuse("topostate query only reads (SELECT, WITH, EXPLAIN, SET VARIABLE, CREATE TEMP ...)")
}

func firstWords(s string) string {
	f := strings.Fields(stripSQLComments(s))
	if len(f) > 4 {
		f = f[:4]
	}
	return strings.Join(f, " ")
}

// Prepare checks and runs every statement of text but the last, checks
// the last and returns its text for the caller to run (as rows or as
// Arrow). Statements are split by splitSQL and each is checked just before
// it runs, so a query may use the temporary macro an earlier statement
// made.
func Prepare(ctx context.Context, conn *sql.Conn, text string) (string, error) {
	stmts := splitSQL(text)
	if len(stmts) == 0 {
		return "", errors.New("queries: the SQL holds no statement")
	}
	for i, s := range stmts {
		if err := checkStatement(conn, s); err != nil {
			if errors.Is(err, ErrWrites) {
				return "", err
			}
			return "", fmt.Errorf("queries: statement %d: %w", i+1, err)
		}
		if i == len(stmts)-1 {
			return s, nil
		}
		if _, err := conn.ExecContext(ctx, s); err != nil {
			return "", fmt.Errorf("queries: statement %d: %w", i+1, err)
		}
	}
	return "", nil // not reached
}

// splitSQL splits text at semicolons outside quotes ('...', "...",
// $tag$...$tag$) and comments (-- to the end of the line, /* */, nested),
// and drops pieces that hold only blanks and comments. A piece split
// wrongly cannot run unchecked: checkStatement refuses text that is not
// exactly one statement.
func splitSQL(text string) []string {
	var out []string
	start := 0
	emit := func(end int) {
		p := text[start:end]
		if strings.TrimSpace(stripSQLComments(p)) != "" {
			out = append(out, p)
		}
		start = end + 1
	}
	for i := 0; i < len(text); i++ {
		switch c := text[i]; {
		case c == '\'' || c == '"':
			j := i + 1
			for j < len(text) {
				if text[j] == c {
					if j+1 < len(text) && text[j+1] == c {
						j += 2
						continue
					}
					break
				}
				j++
			}
			i = j
		case c == '-' && i+1 < len(text) && text[i+1] == '-':
			for i < len(text) && text[i] != '\n' {
				i++
			}
		case c == '/' && i+1 < len(text) && text[i+1] == '*':
			depth := 1
			i += 2
			for i < len(text) && depth > 0 {
				switch {
				case strings.HasPrefix(text[i:], "/*"):
					depth++
					i += 2
				case strings.HasPrefix(text[i:], "*/"):
					depth--
					i += 2
				default:
					i++
				}
			}
			i--
		case c == '$':
			if m := dollarTagRe.FindString(text[i:]); m != "" {
				if k := strings.Index(text[i+len(m):], m); k >= 0 {
					i += len(m) + k + len(m) - 1
				} else {
					i = len(text)
				}
			}
		case c == ';':
			emit(i)
		}
	}
	if start < len(text) {
		emit(len(text))
	}
	return out
}

var dollarTagRe = regexp.MustCompile(`^\$[A-Za-z_]*\$`)

// stripSQLComments removes -- and /* */ comments outside quotes (for the
// emptiness test and messages only).
func stripSQLComments(s string) string {
	var b strings.Builder
	for i := 0; i < len(s); i++ {
		switch {
		case s[i] == '\'' || s[i] == '"':
			q := s[i]
			j := i + 1
			for j < len(s) && s[j] != q {
				j++
			}
			b.WriteString(s[i:min(j+1, len(s))])
			i = j
		case strings.HasPrefix(s[i:], "--"):
			for i < len(s) && s[i] != '\n' {
				i++
			}
			b.WriteByte(' ')
		case strings.HasPrefix(s[i:], "/*"):
			k := strings.Index(s[i+2:], "*/")
			if k < 0 {
				return b.String()
			}
			i += k + 3
			b.WriteByte(' ')
		default:
			b.WriteByte(s[i])
		}
	}
	return b.String()
}
