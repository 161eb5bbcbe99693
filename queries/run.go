package queries

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"maps"
	"math"
	"slices"
	"strconv"
	"strings"

	"github.com/topostate/topostate/schema"
)

// DB is a warehouse opened read-only for queries: one connection carrying
// the SQL functions and macros (they are registered per connection, so
// every statement runs on Conn).
type DB struct {
	Conn *sql.Conn
	db   *sql.DB
}

// Open opens the warehouse at path read-only, checks its layout and
// registers the SQL functions and macros on one connection. A file another
// process is writing gives an error wrapping schema.ErrInUse.
func Open(ctx context.Context, path string) (*DB, error) {
	db, err := schema.Open(path, true, nil)
	if err != nil {
		return nil, err
	}
	if err := schema.CheckLayout(ctx, db); err != nil {
		db.Close()
		return nil, err
	}
	conn, err := db.Conn(ctx)
	if err != nil {
		db.Close()
		return nil, fmt.Errorf("queries: %w", err)
	}
	if err := Register(ctx, conn, FS); err != nil {
		conn.Close()
		db.Close()
		return nil, err
	}
	return &DB{Conn: conn, db: db}, nil
}

// Close releases the connection and the file.
func (d *DB) Close() error {
	return errors.Join(d.Conn.Close(), d.db.Close())
}

// ParamError reports a parameter value that cannot be used: a usage error
// of the caller rather than a failure of the query. Its text has no package
// prefix: the command that reports it names itself.
type ParamError struct {
	Param string
	Err   error
}

func (e *ParamError) Error() string {
	if e.Param == "" {
		return e.Err.Error()
	}
	return fmt.Sprintf("parameter %s: %v", e.Param, e.Err)
}

func (e *ParamError) Unwrap() error { return e.Err }

// ErrNoAnalysis is wrapped by the error for an analysis that is not there.
var ErrNoAnalysis = errors.New("no such analysis")

// Bind checks the values given for q's parameters, fills in defaults, and
// sets each parameter as a DuckDB variable on conn with a bound
// "SET VARIABLE name = ?": queries read them with getvariable('name'), so a
// value never becomes SQL text. It returns the values bound, by name.
//
// When q declares no parameters (a user's SQL without a header) every given
// key is bound as text. Otherwise a key q does not declare, or a declared
// parameter without a default and without a value, is a *ParamError.
func Bind(ctx context.Context, conn *sql.Conn, q *Query, values map[string]string) (map[string]any, error) {
	params := EffectiveParams(q, values)
	declared := make([]string, len(params))
	for i, p := range params {
		declared[i] = p.Name
	}
	for k := range values {
		if !nameRe.MatchString(k) {
			return nil, &ParamError{Param: k, Err: errors.New("a parameter name is lower case letters, digits and underscores")}
		}
		if !slices.Contains(declared, k) {
			return nil, &ParamError{Param: k, Err: fmt.Errorf("%s takes no such parameter (it takes: %s)", queryLabel(q), strings.Join(declared, ", "))}
		}
	}
	bound := map[string]any{}
	for _, p := range params {
		text, ok := values[p.Name]
		if !ok {
			// An analysis left out is the warehouse's only analysis
			// (FindAnalysis refuses when there are several).
			if !p.HasDefault && p.Type != TypeAnalysis {
				return nil, &ParamError{Param: p.Name, Err: fmt.Errorf("required by %s: give --param %s=VALUE (%s)", queryLabel(q), p.Name, p.Description)}
			}
			text = p.Default
		}
		v, err := convert(ctx, conn, p, text)
		if err != nil {
			return nil, err
		}
		// The name is checked by nameRe (header parser or above), so it is
		// a plain identifier; only the value is a parameter.
		set := "SET VARIABLE " + p.Name + " = ?"
		if p.Type == TypeAnalysis {
			set = "SET VARIABLE " + p.Name + " = CAST(? AS INTEGER)" // analysis_id's type
		}
		if _, err := conn.ExecContext(ctx, set, v); err != nil {
			return nil, fmt.Errorf("queries: set %s: %w", p.Name, err)
		}
		bound[p.Name] = v
	}
	return bound, nil
}

// EffectiveParams returns the parameters Bind binds for q given values:
// q's declared parameters; or, for SQL without a header, every given key as
// text, except that "analysis" is always TypeAnalysis (an id, a name or
// latest, bound as the INTEGER id) and is added when the SQL reads
// getvariable('analysis') without it being given (then it is the only
// analysis of the warehouse, or a refusal listing them).
func EffectiveParams(q *Query, values map[string]string) []Param {
	if len(q.Params) > 0 {
		return q.Params
	}
	var params []Param
	for _, k := range slices.Sorted(maps.Keys(values)) {
		t := TypeText
		if k == "analysis" {
			t = TypeAnalysis
		}
		params = append(params, Param{Name: k, Type: t})
	}
	if _, given := values["analysis"]; !given && slices.Contains(Variables(q.SQL), "analysis") {
		params = append(params, Param{Name: "analysis", Type: TypeAnalysis})
	}
	return params
}

func queryLabel(q *Query) string {
	if q.Name != "" {
		return "query " + q.Name
	}
	return "this SQL"
}

// convert checks one value against its type and returns the Go value to
// bind.
func convert(ctx context.Context, conn *sql.Conn, p Param, text string) (any, error) {
	perr := func(format string, a ...any) error { return &ParamError{Param: p.Name, Err: fmt.Errorf(format, a...)} }
	switch p.Type {
	case TypeText:
		return text, nil
	case TypeInteger:
		v, err := strconv.ParseInt(strings.TrimSpace(text), 10, 64)
		if err != nil {
			return nil, perr("%q is not an integer", text)
		}
		return v, nil
	case TypeNumber:
		v, err := strconv.ParseFloat(strings.TrimSpace(text), 64)
		if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, perr("%q is not a finite number", text)
		}
		return v, nil
	case TypeAnalysis:
		id, err := ResolveAnalysis(ctx, conn, text)
		if err != nil {
			return nil, &ParamError{Param: p.Name, Err: err}
		}
		return id, nil
	case TypeColumn, TypeNumericColumn:
		name, err := subjectColumn(ctx, conn, text, p.Type == TypeNumericColumn)
		if err != nil {
			return nil, &ParamError{Param: p.Name, Err: err}
		}
		return name, nil
	case TypeColumns:
		var names []string
		for _, part := range strings.Split(text, ",") {
			part = strings.TrimSpace(part)
			if part == "" {
				continue
			}
			name, err := subjectColumn(ctx, conn, part, false)
			if err != nil {
				return nil, &ParamError{Param: p.Name, Err: err}
			}
			if slices.Contains(names, name) {
				return nil, perr("column %q is listed twice", name)
			}
			names = append(names, name)
		}
		return strings.Join(names, ","), nil
	}
	return nil, perr("unknown type %q", p.Type)
}

// subjectColumn checks that the subjects table has a covariate column
// called name (exactly, or else ignoring case, as DuckDB does) and returns
// its stored spelling.
func subjectColumn(ctx context.Context, conn *sql.Conn, name string, numeric bool) (string, error) {
	rows, err := conn.QueryContext(ctx, `SELECT column_name, data_type FROM information_schema.columns
		WHERE table_name = 'subjects' AND column_name NOT IN ('analysis_id', 'subject_id') ORDER BY ordinal_position`)
	if err != nil {
		return "", fmt.Errorf("queries: %w", err)
	}
	defer rows.Close()
	var names, types []string
	for rows.Next() {
		var n, t string
		if err := rows.Scan(&n, &t); err != nil {
			return "", fmt.Errorf("queries: %w", err)
		}
		names, types = append(names, n), append(types, t)
	}
	if err := rows.Err(); err != nil {
		return "", fmt.Errorf("queries: %w", err)
	}
	if len(names) == 0 {
		return "", errors.New("the subjects table has no covariate columns (participants.tsv had only participant_id)")
	}
	i := slices.Index(names, name)
	if i < 0 {
		i = slices.IndexFunc(names, func(s string) bool { return strings.EqualFold(s, name) })
	}
	if i < 0 {
		return "", fmt.Errorf("the subjects table has no column %q; its covariates are: %s", name, strings.Join(names, ", "))
	}
	if numeric && !isNumericType(types[i]) {
		return "", fmt.Errorf("covariate %q is %s; this query needs a numeric column", names[i], types[i])
	}
	return names[i], nil
}

func isNumericType(t string) bool {
	switch strings.ToUpper(t) {
	case "TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT", "UTINYINT", "USMALLINT", "UINTEGER", "UBIGINT",
		"FLOAT", "DOUBLE", "REAL":
		return true
	}
	return strings.HasPrefix(strings.ToUpper(t), "DECIMAL")
}

// Run binds values to q's parameters (see Bind) and runs its SQL on conn,
// each statement checked by the read-only guard (Prepare). The caller
// closes the rows.
func Run(ctx context.Context, conn *sql.Conn, q *Query, values map[string]string) (*sql.Rows, error) {
	if _, err := Bind(ctx, conn, q, values); err != nil {
		return nil, err
	}
	last, err := Prepare(ctx, conn, q.SQL)
	if err != nil {
		return nil, err
	}
	rows, err := conn.QueryContext(ctx, last)
	if err != nil {
		if pe := MacroParamError(err); pe != nil {
			return nil, pe
		}
		return nil, fmt.Errorf("queries: %s: %w", queryLabel(q), err)
	}
	return rows, nil
}

// macroErrorPrefixes start the messages the macros of MacrosFile raise
// with error() for a parameter value that cannot be used (a group value no
// subject has, two equal groups).
var macroErrorPrefixes = []string{"subject_groups: "}

// MacroParamError returns err as a *ParamError when it is a macro's
// refusal of a parameter value (see macroErrorPrefixes), with DuckDB's
// "Invalid Input Error: " prefix removed; otherwise nil. The command
// reports such an error as a usage error.
func MacroParamError(err error) error {
	if err == nil {
		return nil
	}
	msg := err.Error()
	for _, p := range macroErrorPrefixes {
		if i := strings.Index(msg, p); i >= 0 {
			return &ParamError{Err: errors.New(msg[i:])}
		}
	}
	return nil
}
