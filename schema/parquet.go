package schema

import (
	"context"
	"errors"
	"fmt"
	"io"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/apache/arrow-go/v18/parquet/file"
	"github.com/apache/arrow-go/v18/parquet/pqarrow"
)

// ReadParquet hands the rows of a Parquet file to fn as Arrow records of at
// most batch rows (0: 65,536), in file order. Each record is released when
// fn returns; fn must retain what it keeps.
func ReadParquet(ctx context.Context, path string, batch int64, fn func(arrow.Record) error) error {
	rdr, err := file.OpenParquetFile(path, false)
	if err != nil {
		return fmt.Errorf("schema: %s: %w", path, err)
	}
	defer rdr.Close()
	if batch <= 0 {
		batch = 1 << 16
	}
	fr, err := pqarrow.NewFileReader(rdr, pqarrow.ArrowReadProperties{BatchSize: batch}, memory.DefaultAllocator)
	if err != nil {
		return fmt.Errorf("schema: %s: %w", path, err)
	}
	rr, err := fr.GetRecordReader(ctx, nil, nil)
	if err != nil {
		return fmt.Errorf("schema: %s: %w", path, err)
	}
	defer rr.Release()
	for rr.Next() {
		if err := fn(rr.Record()); err != nil {
			return err
		}
	}
	if err := rr.Err(); err != nil && !errors.Is(err, io.EOF) {
		return fmt.Errorf("schema: %s: %w", path, err)
	}
	return nil
}

// WithAnalysisID returns rec with its analysis_id column (an INTEGER that
// must be there) set to id in every row; the caller releases the result.
func WithAnalysisID(rec arrow.Record, id int) (arrow.Record, error) {
	sc := rec.Schema()
	idx := sc.FieldIndices("analysis_id")
	if len(idx) != 1 || sc.Field(idx[0]).Type.ID() != arrow.INT32 {
		return nil, fmt.Errorf("schema: record has no INTEGER analysis_id column (%s)", sc)
	}
	b := array.NewInt32Builder(memory.DefaultAllocator)
	defer b.Release()
	n := int(rec.NumRows())
	b.Reserve(n)
	for range n {
		b.UnsafeAppend(int32(id))
	}
	ids := b.NewArray()
	defer ids.Release()
	cols := make([]arrow.Array, rec.NumCols())
	copy(cols, rec.Columns())
	cols[idx[0]] = ids
	return array.NewRecord(sc, cols, rec.NumRows()), nil
}

// ColumnType is the DuckDB type of a covariate column read back from
// Parquet (see EnsureSubjectColumns): BIGINT, DOUBLE or VARCHAR.
func ColumnType(t arrow.DataType) (string, error) {
	switch t.ID() {
	case arrow.INT64:
		return "BIGINT", nil
	case arrow.FLOAT64:
		return "DOUBLE", nil
	case arrow.STRING:
		return "VARCHAR", nil
	}
	return "", fmt.Errorf("schema: covariate column type %s is not BIGINT, DOUBLE or VARCHAR", t)
}
