// Package queries makes the warehouse answer cohort questions in SQL. It
// owns the bundled query files (embedded *.sql, each with a comment header
// naming it, describing it and declaring its parameters), the runner that
// binds parameter values as DuckDB variables (never pasting them into SQL
// text), the SQL functions registered on every connection the tool opens
// (thin adapters over package compute: KS tests, permutation tests, Welch's
// t-test, curve distances, Pearson's correlation test), the SQL macros
// (Benjamini-Hochberg adjustment, covariate lookup), the output formats
// (table, CSV, TSV, JSON, Parquet) and the export of whole tables with a
// data dictionary.
//
// It holds no statistics of its own (those live in compute) and never
// writes to a warehouse: every connection it opens is read-only.
package queries
