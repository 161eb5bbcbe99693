package queries

import (
	"errors"
	"slices"
	"strings"
	"testing"
	"testing/fstest"
)

func TestParseHeader(t *testing.T) {
	good := "-- name: q1\n-- description: does a thing\n-- a note line\n" +
		"-- param: analysis analysis = latest -- which analysis\n" +
		"-- param: label text = 'it''s here' -- quoted default\n" +
		"-- param: empty text = ''\n" +
		"-- param: n integer -- required, no default\n" +
		"\nSELECT 1;\n-- param: late text -- after the header: not a parameter\n"
	q, err := ParseHeader("q1.sql", good, true)
	if err != nil {
		t.Fatal(err)
	}
	want := []Param{
		{Name: "analysis", Type: TypeAnalysis, Default: "latest", HasDefault: true, Description: "which analysis"},
		{Name: "label", Type: TypeText, Default: "it's here", HasDefault: true, Description: "quoted default"},
		{Name: "empty", Type: TypeText, Default: "", HasDefault: true},
		{Name: "n", Type: TypeInteger, Description: "required, no default"},
	}
	if q.Name != "q1" || q.Description != "does a thing" || !slices.Equal(q.Params, want) || !slices.Equal(q.Notes, []string{"a note line"}) {
		t.Errorf("parsed %+v", q)
	}
	for _, c := range []struct {
		name, text string
		line       int
		want       string
	}{
		{"no name", "-- description: x\nSELECT 1", 1, "no '-- name:' line"},
		{"no description", "-- name: x\nSELECT 1", 1, "no '-- description:' line"},
		{"bad name", "-- name: Bad-Name\n-- description: x", 1, "lower case"},
		{"two names", "-- name: a\n-- name: b\n-- description: x", 2, "a second name"},
		{"bad type", "-- name: a\n-- description: x\n-- param: p float = 1", 3, `unknown type "float"`},
		{"bad param", "-- name: a\n-- description: x\n\n-- param: = 3", 4, "want NAME TYPE"},
		{"upper-case param", "-- name: a\n-- description: x\n-- param: Group text", 3, "lower case"},
		{"twice", "-- name: a\n-- description: x\n-- param: p text\n-- param: p integer", 4, "declared twice"},
	} {
		_, err := ParseHeader("f.sql", c.text, true)
		var he *HeaderError
		if !errors.As(err, &he) || he.Line != c.line || he.File != "f.sql" || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: %v; want line %d and %q", c.name, err, c.line, c.want)
		}
	}
	// A user's SQL needs no header.
	if q, err := ParseHeader("mine.sql", "SELECT 42", false); err != nil || q.Name != "" || len(q.Params) != 0 {
		t.Errorf("headerless SQL: %+v %v", q, err)
	}
}

func TestListAndLookup(t *testing.T) {
	fsys := fstest.MapFS{
		"b.sql":      {Data: []byte("-- name: bee\n-- description: B\nSELECT 2")},
		"a.sql":      {Data: []byte("-- name: ay\n-- description: A\nSELECT 1")},
		"macros.sql": {Data: []byte("CREATE TEMP MACRO m() AS 1;")},
		"notes.txt":  {Data: []byte("not SQL")},
	}
	all, err := List(fsys)
	if err != nil || len(all) != 2 || all[0].Name != "ay" || all[1].Name != "bee" {
		t.Fatalf("List: %v %v", all, err)
	}
	if _, err := Lookup(fsys, "cee"); !errors.Is(err, ErrNoQuery) || !strings.Contains(err.Error(), "bundled: ay, bee") {
		t.Errorf("Lookup of a missing query: %v", err)
	}
	fsys["c.sql"] = &fstest.MapFile{Data: []byte("-- name: ay\n-- description: again\nSELECT 3")}
	if _, err := List(fsys); err == nil || !strings.Contains(err.Error(), `both named "ay"`) {
		t.Errorf("duplicate names: %v", err)
	}
	if got := Variables("SELECT getvariable('a'), getvariable( 'b' ) + getvariable('a')"); !slices.Equal(got, []string{"a", "b"}) {
		t.Errorf("Variables: %v", got)
	}
}

// The header parser never panics, and whatever it accepts has parameter
// names and types the runner can bind.
func FuzzParseHeader(f *testing.F) {
	for _, s := range []string{
		"-- name: a\n-- description: x\n-- param: p text = 'q''r' -- d\nSELECT 1",
		"-- param: n integer\n", "--\n--:\n-- param:", "-- param: a analysis = '' -- ",
	} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		q, err := ParseHeader("f.sql", s, false)
		if err != nil {
			return
		}
		for _, p := range q.Params {
			if !nameRe.MatchString(p.Name) || !slices.Contains(paramTypes, p.Type) {
				t.Errorf("accepted parameter %+v", p)
			}
		}
	})
}
