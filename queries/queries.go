package queries

import (
	"embed"
	"errors"
	"fmt"
	"io/fs"
	"regexp"
	"slices"
	"strings"
)

// FS holds the bundled query files and macros.sql.
//
//go:embed *.sql
var FS embed.FS

// MacrosFile is the file of FS that holds the SQL macros; it is not a query.
const MacrosFile = "macros.sql"

// Param is one parameter declared in a query header.
type Param struct {
	Name        string
	Type        ParamType
	Default     string // text of the default; "" with HasDefault false means required
	HasDefault  bool
	Description string
}

// ParamType says how a parameter's text is checked and bound.
type ParamType string

// Parameter types. Every value is bound with SET VARIABLE name = ? and read
// in SQL with getvariable('name').
const (
	// TypeText binds the text as VARCHAR.
	TypeText ParamType = "text"
	// TypeInteger binds a BIGINT.
	TypeInteger ParamType = "integer"
	// TypeNumber binds a DOUBLE.
	TypeNumber ParamType = "number"
	// TypeAnalysis accepts an analysis id, an analysis name, or "latest"
	// (the highest analysis_id) and binds the id as INTEGER.
	TypeAnalysis ParamType = "analysis"
	// TypeColumn names a covariate column of the subjects table; the name
	// is checked against the table and bound as VARCHAR (queries look the
	// values up with the subject_covariate macro, never by pasting the
	// name into SQL).
	TypeColumn ParamType = "column"
	// TypeNumericColumn is a TypeColumn whose type must be numeric.
	TypeNumericColumn ParamType = "numeric_column"
	// TypeColumns is a comma-separated list of covariate columns of the
	// subjects table (possibly empty), each checked as a TypeColumn; bound
	// as VARCHAR, the stored spellings joined by commas (queries split it
	// with string_split). A name may appear once.
	TypeColumns ParamType = "columns"
)

var paramTypes = []ParamType{TypeText, TypeInteger, TypeNumber, TypeAnalysis, TypeColumn, TypeNumericColumn, TypeColumns}

// Query is one bundled (or user) query file.
type Query struct {
	Name        string
	Description string
	Params      []Param
	Notes       []string // further comment lines of the header
	File        string   // file name within its fs.FS, or the path given
	SQL         string   // the whole file, header included
}

// Param returns the declared parameter called name.
func (q *Query) Param(name string) (Param, bool) {
	for _, p := range q.Params {
		if p.Name == name {
			return p, true
		}
	}
	return Param{}, false
}

// HeaderError reports a malformed query header at a line of a file.
type HeaderError struct {
	File string
	Line int
	Err  error
}

func (e *HeaderError) Error() string {
	return fmt.Sprintf("queries: %s:%d: %v", e.File, e.Line, e.Err)
}

func (e *HeaderError) Unwrap() error { return e.Err }

var (
	nameRe  = regexp.MustCompile(`^[a-z_][a-z0-9_]*$`)
	paramRe = regexp.MustCompile(`^([A-Za-z_][A-Za-z0-9_]*)\s+([a-z_]+)\s*(?:=\s*('(?:[^']|'')*'|[^\s']+))?\s*(?:--\s*(.*))?$`)
)

// ParseHeader reads a query file's header: the leading "--" comment lines,
//
//	-- name: NAME
//	-- description: ONE LINE
//	-- param: NAME TYPE [= DEFAULT] [-- DESCRIPTION]
//	-- any other comment line is a note
//
// NAME is lower case letters, digits and underscores. TYPE is one of text,
// integer, number, analysis, column, numeric_column, columns. DEFAULT is a bare word
// or a single-quoted string (” for an empty one, doubled quotes inside); a
// parameter without a default is required. The header ends at the first
// line that is neither empty nor a comment. A file without a name line is
// accepted when requireName is false (a user's own SQL), with Name "".
func ParseHeader(file, text string, requireName bool) (*Query, error) {
	q := &Query{File: file, SQL: text}
	lines := strings.Split(text, "\n")
	seen := map[string]bool{}
	for i, raw := range lines {
		line := strings.TrimSpace(strings.TrimSuffix(raw, "\r"))
		if line == "" {
			continue
		}
		if !strings.HasPrefix(line, "--") {
			break
		}
		body := strings.TrimSpace(strings.TrimPrefix(line, "--"))
		key, val, ok := strings.Cut(body, ":")
		key = strings.TrimSpace(key)
		val = strings.TrimSpace(val)
		herr := func(format string, a ...any) error {
			return &HeaderError{File: file, Line: i + 1, Err: fmt.Errorf(format, a...)}
		}
		switch {
		case ok && key == "name":
			if q.Name != "" {
				return nil, herr("a second name line")
			}
			if !nameRe.MatchString(val) {
				return nil, herr("query name %q: use lower case letters, digits and underscores", val)
			}
			q.Name = val
		case ok && key == "description":
			q.Description = val
		case ok && key == "param":
			m := paramRe.FindStringSubmatch(val)
			if m == nil {
				return nil, herr("parameter line %q: want NAME TYPE [= DEFAULT] [-- DESCRIPTION]", val)
			}
			p := Param{Name: m[1], Type: ParamType(m[2]), Description: strings.TrimSpace(m[4])}
			if !nameRe.MatchString(p.Name) {
				return nil, herr("parameter name %q: use lower case letters, digits and underscores", p.Name)
			}
			if !slices.Contains(paramTypes, p.Type) {
				return nil, herr("parameter %s: unknown type %q (want one of %s)", p.Name, m[2], typeList())
			}
			if seen[p.Name] {
				return nil, herr("parameter %s declared twice", p.Name)
			}
			seen[p.Name] = true
			if d := m[3]; d != "" {
				p.HasDefault = true
				if strings.HasPrefix(d, "'") {
					d = strings.ReplaceAll(d[1:len(d)-1], "''", "'")
				}
				p.Default = d
			}
			q.Params = append(q.Params, p)
		default:
			q.Notes = append(q.Notes, body)
		}
	}
	if requireName && q.Name == "" {
		return nil, &HeaderError{File: file, Line: 1, Err: errors.New("no '-- name:' line in the header")}
	}
	if q.Name != "" && q.Description == "" {
		return nil, &HeaderError{File: file, Line: 1, Err: errors.New("no '-- description:' line in the header")}
	}
	return q, nil
}

func typeList() string {
	s := make([]string, len(paramTypes))
	for i, t := range paramTypes {
		s[i] = string(t)
	}
	return strings.Join(s, ", ")
}

// List parses every query file (*.sql except MacrosFile) of fsys, sorted by
// name. Two files with one name are an error.
func List(fsys fs.FS) ([]*Query, error) {
	files, err := fs.Glob(fsys, "*.sql")
	if err != nil {
		return nil, fmt.Errorf("queries: %w", err)
	}
	var out []*Query
	byName := map[string]string{}
	for _, f := range files {
		if f == MacrosFile {
			continue
		}
		b, err := fs.ReadFile(fsys, f)
		if err != nil {
			return nil, fmt.Errorf("queries: %w", err)
		}
		q, err := ParseHeader(f, string(b), true)
		if err != nil {
			return nil, err
		}
		if prev, dup := byName[q.Name]; dup {
			return nil, fmt.Errorf("queries: %s and %s are both named %q", prev, f, q.Name)
		}
		byName[q.Name] = f
		out = append(out, q)
	}
	slices.SortFunc(out, func(a, b *Query) int { return strings.Compare(a.Name, b.Name) })
	return out, nil
}

// ErrNoQuery is returned by Lookup for an unknown name.
var ErrNoQuery = errors.New("no bundled query of that name")

// Lookup returns the query called name from fsys.
func Lookup(fsys fs.FS, name string) (*Query, error) {
	all, err := List(fsys)
	if err != nil {
		return nil, err
	}
	names := make([]string, len(all))
	for i, q := range all {
		if q.Name == name {
			return q, nil
		}
		names[i] = q.Name
	}
	return nil, fmt.Errorf("queries: %q: %w (bundled: %s)", name, ErrNoQuery, strings.Join(names, ", "))
}

// Macros returns the SQL of MacrosFile in fsys: CREATE OR REPLACE TEMP
// MACRO statements run on every connection the tool opens.
func Macros(fsys fs.FS) (string, error) {
	b, err := fs.ReadFile(fsys, MacrosFile)
	if err != nil {
		return "", fmt.Errorf("queries: %w", err)
	}
	return string(b), nil
}

// variableRe finds getvariable('name') calls, for checking that a query
// reads only parameters it declares.
var variableRe = regexp.MustCompile(`getvariable\(\s*'([^']*)'\s*\)`)

// Variables returns the names a query reads with getvariable, in order of
// first use.
func Variables(sql string) []string {
	var out []string
	for _, m := range variableRe.FindAllStringSubmatch(sql, -1) {
		if !slices.Contains(out, m[1]) {
			out = append(out, m[1])
		}
	}
	return out
}
