// Package schema owns the warehouse layout: the versioned DDL (embedded .sql
// files), the Arrow schema of every result table, and the Writer that moves
// Arrow record batches into DuckDB inside one transaction per analysis (and,
// on request, into Parquet files through pqarrow).
//
// It computes nothing and reads no cohort files; callers hand it rows.
package schema
