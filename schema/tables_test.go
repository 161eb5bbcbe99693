package schema

import (
	"strings"
	"testing"

	"github.com/apache/arrow-go/v18/arrow/array"
)

// AppendEvents builds the same Arrow record as appending each event with
// the generic Row, compared with arrow-go's array.RecordEqual: over many
// calls (so the buffers grow several times), subjects of several lengths,
// an empty session, a value-less call and a string longer than the data
// buffer so far.
func TestAppendEventsMatchesRow(t *testing.T) {
	fast, slow := NewBatch(FiltrationEvts), NewBatch(FiltrationEvts)
	defer fast.Release()
	defer slow.Release()
	subjects := []string{"sub-01", "sub-ünï", "", strings.Repeat("x", 5000), "sub-0002"}
	for i := range 300 {
		sub, ses := subjects[i%len(subjects)], []string{"ses-1", ""}[i%2]
		vals := benchValues(i%37, i)
		fast.AppendEvents(7, sub, ses, 1+i%5, i%2, vals)
		for _, v := range vals {
			slow.Row(7, sub, ses, 1+i%5, i%2, v)
		}
	}
	if fast.Len() != slow.Len() || fast.Len() == 0 {
		t.Fatalf("AppendEvents gave %d rows, Row %d", fast.Len(), slow.Len())
	}
	a, b := fast.Record(), slow.Record()
	defer a.Release()
	defer b.Release()
	if !array.RecordEqual(a, b) {
		t.Fatalf("AppendEvents and Row built different records:\n%v\n%v", a, b)
	}
}
