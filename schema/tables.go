package schema

import (
	"fmt"

	"github.com/apache/arrow-go/v18/arrow"
	"github.com/apache/arrow-go/v18/arrow/array"
	"github.com/apache/arrow-go/v18/arrow/memory"
)

// Result tables written through Arrow, with their column types. The order and
// names match v1.sql; TestArrowSchemasMatchDDL keeps the two in step.
var tableSchemas = map[string]*arrow.Schema{}

func def(name string, fields ...arrow.Field) {
	tableSchemas[name] = arrow.NewSchema(fields, nil)
}

func f(name string, t arrow.DataType) arrow.Field { return arrow.Field{Name: name, Type: t} }
func nullable(name string, t arrow.DataType) arrow.Field {
	return arrow.Field{Name: name, Type: t, Nullable: true}
}

var (
	i8  = arrow.PrimitiveTypes.Int8
	i16 = arrow.PrimitiveTypes.Int16
	i32 = arrow.PrimitiveTypes.Int32
	f64 = arrow.PrimitiveTypes.Float64
	str = arrow.BinaryTypes.String
	bln = arrow.FixedWidthTypes.Boolean
)

// Table names, for callers.
const (
	Inputs          = "inputs"
	ExcludedInputs  = "excluded_inputs"
	Regions         = "regions"
	Elbow           = "elbow"
	StateCentroids  = "state_centroids"
	StateSequence   = "state_sequence"
	StateMetrics    = "state_metrics"
	SubjectDynamics = "subject_dynamics"
	Transitions     = "transitions"
	BettiCurves     = "betti_curves"
	FiltrationEvts  = "filtration_events"
	StateNetworks   = "state_networks"
	CoreBettiCurves = "core_betti_curves"
	Subjects        = "subjects"
	Covariates      = "covariates"
	Analyses        = "analyses"
	SurrogateTests  = "surrogate_tests"
)

func init() {
	id := []arrow.Field{f("analysis_id", i32), f("subject_id", str), f("session_id", str)}
	def(Inputs, append(id[:3:3], f("path", str), f("sha256", str), f("timepoints", i32),
		f("regions", i32), f("tr_seconds", f64), f("tr_source", str), nullable("window_points", i32), nullable("step_points", i32))...)
	def(ExcludedInputs, append(id[:3:3], f("path", str), f("reason", str))...)
	def(Covariates, f("analysis_id", i32), f("column_name", str), f("data_type", str), nullable("description", str), nullable("units", str), nullable("levels", str))
	def(Regions, f("analysis_id", i32), nullable("region_index", i32), f("column_index", i32), f("region_name", str), f("dropped", bln))
	def(Elbow, f("analysis_id", i32), f("k", i32), f("wcss", f64), f("chosen", bln),
		f("chord_pick", bln), f("second_diff_pick", bln), nullable("gap_log_wcss", f64), nullable("gap_ref_log_wcss", f64),
		nullable("gap", f64), nullable("gap_se", f64), nullable("gap_pick", bln),
		nullable("strength", f64), nullable("strength_se", f64), nullable("strength_pick", bln))
	def(StateCentroids, f("analysis_id", i32), f("state", i16), f("i", i16), f("j", i16), f("weight", f64))
	def(StateSequence, append(id[:3:3], f("window_index", i32), f("window_start", i32),
		f("center_seconds", f64), f("state", i16), f("distance", f64))...)
	def(StateMetrics, append(id[:3:3], f("state", i16), f("occupancy", f64), f("n_dwells", i32),
		nullable("mean_dwell_windows", f64), nullable("mean_dwell_seconds", f64),
		nullable("n_complete_dwells", i32), nullable("n_censored_dwells", i32),
		nullable("complete_dwell_windows", f64), nullable("complete_dwell_seconds", f64))...)
	def(SubjectDynamics, append(id[:3:3], f("n_windows", i32), f("n_transitions", i32),
		f("switch_rate", f64), f("states_visited", i32))...)
	def(Transitions, append(id[:3:3], f("from_state", i16), f("to_state", i16), f("count", i32),
		nullable("probability", f64))...)
	def(BettiCurves, append(id[:3:3], f("state", i16), f("dimension", i8), f("threshold", f64),
		f("betti", i32))...)
	def(FiltrationEvts, append(id[:3:3], f("state", i16), f("dimension", i8), f("value", f64))...)
	def(StateNetworks, append(id[:3:3], f("state", i16), f("n_windows", i32), f("mean_weight", f64),
		f("tree_weight", f64), nullable("core_timepoints", i32))...)
	def(CoreBettiCurves, append(id[:3:3], f("state", i16), f("dimension", i8), f("threshold", f64),
		f("betti", i32))...)
	def(SurrogateTests, f("analysis_id", i32), f("statistic", str), nullable("state", i16), f("observed", f64),
		nullable("null_mean", f64), nullable("null_sd", f64), f("n_surrogates", i32), f("n_exceed", i32), f("p", f64),
		f("direction", str), f("meaning", str), f("fit_windows", i32), f("restarts", i32))
}

// ArrowSchema returns the Arrow schema of a result table.
func ArrowSchema(table string) (*arrow.Schema, error) {
	s, ok := tableSchemas[table]
	if !ok {
		return nil, fmt.Errorf("schema: no Arrow schema for table %q", table)
	}
	return s, nil
}

// Batch accumulates rows of one table as Arrow columns.
type Batch struct {
	Table string
	b     *array.RecordBuilder
	n     int
}

// NewBatch starts an empty batch for a result table.
func NewBatch(table string) *Batch {
	s, ok := tableSchemas[table]
	if !ok {
		panic(fmt.Sprintf("schema: no Arrow schema for table %q", table))
	}
	return &Batch{Table: table, b: array.NewRecordBuilder(memory.DefaultAllocator, s)}
}

// NewBatchSchema starts an empty batch with a caller-made schema (the
// subjects table, whose covariate columns come from the cohort).
func NewBatchSchema(table string, s *arrow.Schema) *Batch {
	return &Batch{Table: table, b: array.NewRecordBuilder(memory.DefaultAllocator, s)}
}

// Len is the number of rows appended.
func (b *Batch) Len() int { return b.n }

// Row appends one row. Values follow the column order; each must be an int
// (for any integer column), a string, a float64, a bool, or nil for NULL in
// a nullable column. A *float64 is a nullable DOUBLE. A wrong type panics:
// it is a programming error, not bad data.
func (b *Batch) Row(vals ...any) {
	if len(vals) != len(b.b.Fields()) {
		panic(fmt.Sprintf("schema: %s row has %d values, table has %d columns", b.Table, len(vals), len(b.b.Fields())))
	}
	for c, v := range vals {
		fb := b.b.Field(c)
		if v == nil {
			fb.AppendNull()
			continue
		}
		switch x := fb.(type) {
		case *array.Int8Builder:
			x.Append(int8(v.(int)))
		case *array.Int16Builder:
			x.Append(int16(v.(int)))
		case *array.Int32Builder:
			x.Append(int32(v.(int)))
		case *array.Int64Builder:
			switch y := v.(type) {
			case int:
				x.Append(int64(y))
			case int64:
				x.Append(y)
			default:
				panic(fmt.Sprintf("schema: %s column %d: %T for BIGINT", b.Table, c, v))
			}
		case *array.Float64Builder:
			switch y := v.(type) {
			case float64:
				x.Append(y)
			case *float64:
				if y == nil {
					x.AppendNull()
				} else {
					x.Append(*y)
				}
			default:
				panic(fmt.Sprintf("schema: %s column %d: %T for DOUBLE", b.Table, c, v))
			}
		case *array.StringBuilder:
			x.Append(v.(string))
		case *array.BooleanBuilder:
			x.Append(v.(bool))
		default:
			panic(fmt.Sprintf("schema: %s column %d: unsupported builder %T", b.Table, c, fb))
		}
	}
	b.n++
}

// AppendEvents appends filtration events of one subject, state and
// dimension without a per-value interface conversion (the table is the
// warehouse's largest).
func (b *Batch) AppendEvents(analysisID int, subject, session string, state, dim int, values []float64) {
	if b.Table != FiltrationEvts {
		panic("schema: AppendEvents on " + b.Table)
	}
	n := len(values)
	b.b.Field(0).(*array.Int32Builder).AppendValues(repeat(int32(analysisID), n), nil)
	appendRepeated(b.b.Field(1).(*array.StringBuilder), subject, n)
	appendRepeated(b.b.Field(2).(*array.StringBuilder), session, n)
	b.b.Field(3).(*array.Int16Builder).AppendValues(repeat(int16(state), n), nil)
	b.b.Field(4).(*array.Int8Builder).AppendValues(repeat(int8(dim), n), nil)
	b.b.Field(5).(*array.Float64Builder).AppendValues(values, nil)
	b.n += n
}

// appendRepeated appends s n times, with the room for all of them
// reserved first (the data buffer at least doubled when it grows, as the
// builder's own Append would, so that many small calls stay linear).
func appendRepeated(sb *array.StringBuilder, s string, n int) {
	sb.Reserve(n)
	if need := n * len(s); sb.DataCap()-sb.DataLen() < need {
		sb.ReserveData(max(need, sb.DataCap()))
	}
	v := []byte(s)
	for range n {
		sb.UnsafeAppend(v)
	}
}

func repeat[T any](v T, n int) []T {
	s := make([]T, n)
	for i := range s {
		s[i] = v
	}
	return s
}

// Record returns the rows as an Arrow record and resets the batch. The
// caller releases the record.
func (b *Batch) Record() arrow.Record {
	b.n = 0
	return b.b.NewRecord()
}

// Release frees the builder.
func (b *Batch) Release() { b.b.Release() }
