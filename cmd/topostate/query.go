package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"strings"
	"sync/atomic"
	"time"

	"github.com/urfave/cli/v2"

	"github.com/topostate/topostate/queries"
)

func queryCommand() *cli.Command {
	return &cli.Command{
		Name:      "query",
		Usage:     "run a bundled query or your own SQL on a warehouse (opened read-only)",
		ArgsUsage: "[NAME]",
		Description: "Runs the bundled query NAME (see --list), or the SQL of --sql or --file. Parameters are given\n" +
			"with --param key=value and bound as DuckDB variables: the SQL reads them with getvariable('key').\n" +
			"The topostate SQL functions (ks_test, welch_t_test, perm_test_mean, ...) and macros (bh_adjust, ...)\n" +
			"are available in every query.",
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "db", Value: "topostate.duckdb", Usage: "warehouse `FILE`"},
			// No short alias: urfave/cli copies a value to its aliases by
			// calling Set again, which would repeat every parameter.
			analysisFlag("left out: the only analysis in the warehouse (several: refused, listing them); same as --param analysis=ID"),
			&cli.GenericFlag{Name: "param", Value: &keyValues{}, Usage: "parameter `KEY=VALUE` (repeatable; the value is taken as it is, commas included)"},
			&cli.StringFlag{Name: "sql", Usage: "run this SQL `TEXT` instead of a bundled query"},
			&cli.StringFlag{Name: "file", Usage: "run the SQL in this `PATH` (a header as in the bundled files declares parameters)"},
			&cli.StringFlag{Name: "format", Aliases: []string{"f"}, Value: "table", Usage: "output `FORMAT`: table, csv, tsv, json or parquet"},
			&cli.StringFlag{Name: "out", Aliases: []string{"o"}, Usage: "write the result to `PATH` (default: standard output; required for parquet)"},
			&cli.BoolFlag{Name: "list", Usage: "list the bundled queries, the SQL functions and the macros"},
			&cli.StringFlag{Name: "show", Usage: "print the SQL of the bundled query `NAME`"},
			&cli.BoolFlag{Name: "macros", Usage: "print the CREATE MACRO statements, to use the macros in another DuckDB client"},
		},
		Action: func(c *cli.Context) error {
			o, err := readQueryOptions(c)
			if err == nil {
				err = queryAction(c, o)
			}
			var pe *queries.ParamError
			if errors.As(err, &pe) {
				return usageError{fmt.Errorf("query: %w", err)}
			}
			if errors.Is(err, queries.ErrNoQuery) {
				return usageError{err}
			}
			return err
		},
	}
}

// keyValues collects repeated --param flags without splitting at commas.
type keyValues []string

func (k *keyValues) Set(s string) error { *k = append(*k, s); return nil }
func (k *keyValues) String() string     { return strings.Join(*k, " ") }

// queryOptions are the query command's settings.
type queryOptions struct {
	db, sql, file, format, out, show string
	list, macros                     bool
	name                             string
	params                           map[string]string
}

// readQueryOptions reads the flags, also those given after NAME (as in
// "topostate query --db w.duckdb NAME --param k=v"), which the flag parser
// leaves among the arguments.
func readQueryOptions(c *cli.Context) (queryOptions, error) {
	args := c.Args().Slice()
	var name string
	if len(args) > 0 {
		name, args = args[0], args[1:]
	}
	get := func(n string) string { return c.String(n) }
	getBool := func(n string) bool { return c.Bool(n) }
	if len(args) > 0 {
		set := flag.NewFlagSet("query", flag.ContinueOnError)
		set.SetOutput(io.Discard)
		for _, f := range c.Command.Flags {
			if err := f.Apply(set); err != nil {
				return queryOptions{}, err
			}
		}
		if err := set.Parse(args); err != nil {
			return queryOptions{}, usagef("query: %v", err)
		}
		if set.NArg() > 0 {
			return queryOptions{}, usagef("query: unexpected %q after %s: give one query NAME", set.Arg(0), name)
		}
		seen := map[string]bool{}
		set.Visit(func(f *flag.Flag) { seen[f.Name] = true })
		get = func(n string) string {
			if v := lookupSet(c, set, seen, n); v != nil {
				return *v
			}
			return c.String(n)
		}
		getBool = func(n string) bool {
			if v := lookupSet(c, set, seen, n); v != nil {
				return *v == "true"
			}
			return c.Bool(n)
		}
	}
	o := queryOptions{db: get("db"), sql: get("sql"), file: get("file"), format: get("format"), out: get("out"),
		show: get("show"), list: getBool("list"), macros: getBool("macros"), name: name, params: map[string]string{}}
	// The --param value object is shared by both parses, so it holds
	// every --param given before and after NAME.
	for _, kv := range *c.Generic("param").(*keyValues) {
		k, v, ok := strings.Cut(kv, "=")
		k = strings.TrimSpace(k)
		if !ok || k == "" {
			return o, usagef("query: --param %q: want KEY=VALUE", kv)
		}
		if _, dup := o.params[k]; dup {
			return o, usagef("query: --param %s given twice", k)
		}
		o.params[k] = v
	}
	if a := get("analysis"); a != "" {
		if _, dup := o.params["analysis"]; dup {
			return o, usagef("query: give the analysis once, with --analysis or with --param analysis=")
		}
		o.params["analysis"] = a
	}
	return o, nil
}

// lookupSet returns the value of flag n (under any of its names) when the
// arguments after NAME set it.
func lookupSet(c *cli.Context, set *flag.FlagSet, seen map[string]bool, n string) *string {
	for _, f := range c.Command.Flags {
		names := f.Names()
		if names[0] != n {
			continue
		}
		for _, alias := range names {
			if seen[alias] {
				v := set.Lookup(alias).Value.String()
				return &v
			}
		}
	}
	return nil
}

func queryAction(c *cli.Context, o queryOptions) error {
	out := c.App.Writer
	switch {
	case o.list:
		return listQueries(out)
	case o.macros:
		m, err := queries.Macros(queries.FS)
		if err != nil {
			return err
		}
		_, err = io.WriteString(out, m)
		return err
	case o.show != "":
		q, err := queries.Lookup(queries.FS, o.show)
		if err != nil {
			return err
		}
		_, err = io.WriteString(out, q.SQL)
		return err
	}
	sources := 0
	for _, set := range []bool{o.name != "", o.sql != "", o.file != ""} {
		if set {
			sources++
		}
	}
	if sources != 1 {
		return usagef("query: give one bundled query NAME, or --sql TEXT, or --file PATH (see 'topostate query --list')")
	}
	format, err := queries.ParseFormat(o.format)
	if err != nil {
		return usageError{err}
	}
	outPath := o.out
	if format == queries.FormatParquet && outPath == "" {
		return usagef("query: --format parquet needs --out PATH")
	}
	var q *queries.Query
	switch {
	case o.name != "":
		if q, err = queries.Lookup(queries.FS, o.name); err != nil {
			return err
		}
	case o.sql != "":
		q = &queries.Query{SQL: o.sql}
	default:
		b, err := os.ReadFile(o.file)
		if err != nil {
			return fmt.Errorf("query: %w", err)
		}
		if q, err = queries.ParseHeader(o.file, string(b), false); err != nil {
			return err
		}
	}
	params := o.params
	if err := refuseClobber("query", "--out", outPath, o.db); err != nil {
		return err
	}

	db, err := queries.Open(c.Context, o.db)
	if err != nil {
		return err
	}
	defer db.Close()
	var partial atomic.Pointer[string] // the temporary of --out, while it is written
	finished := make(chan struct{})
	defer close(finished)
	context.AfterFunc(c.Context, func() { stopQuery(c.App.ErrWriter, finished, &partial, queryStopGrace) })

	if outPath == "" {
		_, err = runQuery(c, db, q, params, format, out)
		return err
	}
	// The result goes to a temporary beside --out and replaces it only
	// when the query succeeded: a failed query leaves an existing file.
	var n int64
	if err := writeAtomic("query", outPath, func(w io.Writer) error {
		if f, ok := w.(*os.File); ok {
			name := f.Name()
			partial.Store(&name)
			defer partial.Store(nil)
		}
		var err error
		n, err = runQuery(c, db, q, params, format, w)
		return err
	}); err != nil {
		return err
	}
	fmt.Fprintf(c.App.ErrWriter, "wrote %d rows to %s\n", n, outPath)
	return nil
}

// queryStopGrace is how long a stop request (Ctrl-C, SIGTERM) waits for
// DuckDB to honour its interrupt before the query process ends itself.
const queryStopGrace = 2 * time.Second

// stopQuery runs when a stop is requested during a query. The context
// already interrupts DuckDB (go-duckdb calls duckdb_interrupt when the
// QueryContext context ends), but DuckDB checks that flag only between
// pieces of work: one expression over a large chunk (a list lambda, a SQL
// function written in Go, a wide cross product) can run for minutes, and a
// SIGTERM from a scheduler would seem ignored. A query opens the warehouse
// read-only, so when the query has not returned within grace the process
// removes the partial --out temporary and exits: nothing else is lost.
func stopQuery(stderr io.Writer, finished <-chan struct{}, partial *atomic.Pointer[string], grace time.Duration) {
	select {
	case <-finished:
		return
	case <-time.After(grace):
	}
	if p := partial.Load(); p != nil {
		os.Remove(*p)
	}
	fmt.Fprintf(stderr, "topostate: the query did not stop within %v of the request; ended it (the warehouse was open read-only: nothing in it changed)\n", grace)
	os.Exit(exitFailure)
}

func runQuery(c *cli.Context, db *queries.DB, q *queries.Query, params map[string]string, format queries.Format, w io.Writer) (int64, error) {
	bound, err := queries.Bind(c.Context, db.Conn, q, params)
	if err != nil {
		return 0, err
	}
	if err := nameAnalyses(c, db, q, params, bound); err != nil {
		return 0, err
	}
	last, err := queries.Prepare(c.Context, db.Conn, q.SQL)
	if err != nil {
		return 0, err
	}
	if format == queries.FormatParquet {
		n, err := queries.WriteParquet(c.Context, db.Conn, last, w)
		if pe := queries.MacroParamError(err); pe != nil {
			return n, pe
		}
		return n, err
	}
	rows, err := db.Conn.QueryContext(c.Context, last)
	if err != nil {
		if pe := queries.MacroParamError(err); pe != nil {
			return 0, pe
		}
		return 0, fmt.Errorf("queries: %s: %w", queryName(q), err)
	}
	defer rows.Close()
	n, err := queries.WriteRows(w, rows, format)
	if pe := queries.MacroParamError(err); pe != nil {
		return int64(n), pe
	}
	return int64(n), err
}

// nameAnalyses says on standard error which analysis each analysis
// parameter resolved to, so standard output stays plain CSV, TSV, JSON or
// a table: "query: analysis 2 ("rest-b"), 1 of 2 in the warehouse".
func nameAnalyses(c *cli.Context, db *queries.DB, q *queries.Query, params map[string]string, bound map[string]any) error {
	for _, p := range queries.EffectiveParams(q, params) {
		if p.Type != queries.TypeAnalysis {
			continue
		}
		a, err := queries.FindAnalysis(c.Context, db.Conn, fmt.Sprint(bound[p.Name]))
		if err != nil {
			return err
		}
		how := "the only analysis in the warehouse"
		if a.Count > 1 {
			how = fmt.Sprintf("one of %d in the warehouse", a.Count)
		}
		label := "analysis"
		if p.Name != "analysis" {
			label = p.Name + ": analysis"
		}
		fmt.Fprintf(c.App.ErrWriter, "query: %s %s, %s\n", label, a, how)
	}
	return nil
}

func queryName(q *queries.Query) string {
	if q.Name != "" {
		return "query " + q.Name
	}
	return "this SQL"
}

func listQueries(out io.Writer) error {
	all, err := queries.List(queries.FS)
	if err != nil {
		return err
	}
	fmt.Fprintln(out, "Bundled queries (topostate query --db FILE NAME --param key=value ...; --show NAME prints the SQL):")
	for _, q := range all {
		fmt.Fprintf(out, "\n  %s\n      %s\n", q.Name, q.Description)
		for _, p := range q.Params {
			def := "required"
			if p.Type == queries.TypeAnalysis && !p.HasDefault {
				def = "default: the only analysis"
			} else if p.HasDefault {
				def = "default " + p.Default
			}
			fmt.Fprintf(out, "      %s (%s, %s): %s\n", p.Name, p.Type, def, p.Description)
		}
	}
	fmt.Fprintln(out, "\nSQL functions (in every query):")
	for _, f := range queries.Functions() {
		fmt.Fprintf(out, "\n  %s\n", f.Signature)
		for _, l := range wrap(f.Doc, 96) {
			fmt.Fprintf(out, "      %s\n", l)
		}
	}
	fmt.Fprintln(out, "\nSQL macros (print them with --macros to use them in another DuckDB client):")
	fmt.Fprintln(out, "  bh_adjust(p, family)  Benjamini-Hochberg adjusted p; e.g. bh_adjust(p, list(p) OVER (PARTITION BY measure))")
	fmt.Fprintln(out, "  by_adjust(p, family)  Benjamini-Yekutieli adjusted p (any dependence), called like bh_adjust")
	fmt.Fprintln(out, "      both sort the family once per row: for thousands of tests use adjust_pvalues on a list aggregate")
	fmt.Fprintln(out, "  subject_covariate(analysis, column_name)  table of (subject_id, value) for one subjects column")
	fmt.Fprintln(out, "  subject_groups(analysis, column_name, group_a, group_b)  table of (subject_id, side 'a'/'b', group_value)")
	return nil
}

// wrap breaks text into lines of at most width characters at spaces.
func wrap(text string, width int) []string {
	var lines []string
	line := ""
	for _, w := range strings.Fields(text) {
		if line != "" && len(line)+1+len(w) > width {
			lines = append(lines, line)
			line = ""
		}
		if line != "" {
			line += " "
		}
		line += w
	}
	if line != "" {
		lines = append(lines, line)
	}
	return lines
}
