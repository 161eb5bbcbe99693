package ingest

import (
	"context"

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
			}
		}
	}
	rec := rb.NewRecord()
	defer rec.Release()
	return w.AppendRecord(ctx, schema.Subjects, rec)
}
