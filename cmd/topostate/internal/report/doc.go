// Package report writes one analysis of a topostate warehouse as a single
// self-contained HTML page: the analysis settings, a summary of the cohort,
// the choice of the number of states, the figures of package figures inlined
// as SVG, and the group contrasts of the bundled queries (package queries)
// with their Benjamini-Hochberg adjusted p-values, under the research-use
// caution.
//
// Build reads everything on a read-only warehouse (plain SQL, the bundled
// queries through the queries runner, figures.Load); Render only lays it out
// with html/template, so every value taken from the warehouse is escaped.
// The page refers to nothing outside itself: no scripts, style sheets,
// fonts or images are fetched. It must not write to the warehouse.
package report
