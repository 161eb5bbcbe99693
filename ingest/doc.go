// Package ingest finds a cohort on disk (BIDS-style series files: TSV/CSV
// tables, NumPy .npy arrays, or NIfTI-1 images averaged over a label atlas;
// a participants.tsv sheet, JSON sidecars), reads and validates all of it
// before anything is written, and runs the analysis stages: sample windows,
// fit the states, compute every subject's results, and hand them to the
// schema writer in a fixed order.
//
// Errors carry the file, line and column where they apply. Numerics live in
// package compute; ingest only moves data between files, compute and schema.
package ingest
