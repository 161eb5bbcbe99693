package ingest

import (
	"context"
	"time"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
	"github.com/topostate/topostate/schema"
)

// writeSubjects writes every participants.tsv row with its covariates,
// adding covariate columns to the subjects table where missing.
func (s *stages) writeSubjects(ctx context.Context, w *schema.Writer) error {
	p := s.c.Participants
	cols := make([]schema.Column, len(p.Covariates))
	fields := []arrow.Field{{Name: "analysis_id", Type: arrow.PrimitiveTypes.Int32}, {Name: "subject_id", Type: arrow.BinaryTypes.String}}
	for i, cv := range p.Covariates {
		cols[i] = schema.Column{Name: cv.Name, Type: cv.Type}
		var t arrow.DataType = arrow.BinaryTypes.String
		switch cv.Type {
		case "BIGINT":
			t = arrow.PrimitiveTypes.Int64
		case "DOUBLE":
			t = arrow.PrimitiveTypes.Float64
		case "BOOLEAN":
			t = arrow.FixedWidthTypes.Boolean
		case "DATE":
			t = arrow.FixedWidthTypes.Date32
		}
		fields = append(fields, arrow.Field{Name: cv.Name, Type: t, Nullable: true})
	}
	if err := w.EnsureSubjectColumns(ctx, cols); err != nil {
		return err
	}
	rb := array.NewRecordBuilder(memory.DefaultAllocator, arrow.NewSchema(fields, nil))
	defer rb.Release()
	for _, id := range p.IDs {
		rb.Field(0).(*array.Int32Builder).Append(int32(w.ID))
		rb.Field(1).(*array.StringBuilder).Append(id)
		for c, v := range p.Values[id] {
			fb := rb.Field(c + 2)
			switch x := v.(type) {
			case nil:
				fb.AppendNull()
			case int64:
				fb.(*array.Int64Builder).Append(x)
			case float64:
				fb.(*array.Float64Builder).Append(x)
			case string:
				fb.(*array.StringBuilder).Append(x)
			case bool:
				fb.(*array.BooleanBuilder).Append(x)
			case time.Time:
				fb.(*array.Date32Builder).Append(arrow.Date32FromTime(x))
			}
		}
	}
	rec := rb.NewRecord()
	defer rec.Release()
	if err := w.AppendRecord(ctx, schema.Subjects, rec); err != nil {
		return err
	}
	// What participants.json says of each column, for the data dictionary
	// and codebook of export.
	cb := schema.NewBatch(schema.Covariates)
	defer cb.Release()
	orNil := func(s string) any {
		if s == "" {
			return nil
		}
		return s
	}
	for _, cv := range p.Covariates {
		cb.Row(w.ID, cv.Name, cv.Type, orNil(cv.Doc.Description), orNil(cv.Doc.Units), orNil(cv.Doc.LevelsJSON()))
	}
	return w.Append(ctx, cb)
}
