package ingest

import (
	"errors"
	"io/fs"
	"os"
	"path/filepath"
	"testing"

	"github.com/topostate/topostate/compute"
)

// TestWriteCohortNeverReplaces (issue 13, class 3): WriteCohort creates
// every file exclusively. Where one of its files exists already (another
// run writing at the same moment, or an earlier cohort) it fails, the
// existing file keeps its bytes, and every file and folder it created is
// removed again.
func TestWriteCohortNeverReplaces(t *testing.T) {
	dir := t.TempDir()
	mine := filepath.Join(dir, "participants.tsv")
	if err := os.WriteFile(mine, []byte("participant_id\nsub-99\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	y := compute.NewSeries(4, 2)
	err := WriteCohort(dir, []string{"a", "b"}, 2, []string{"sub-01", "sub-02"}, []compute.Series{y, y}, nil,
		[]SyntheticParticipant{{ID: "sub-01"}, {ID: "sub-02"}})
	if !errors.Is(err, fs.ErrExist) {
		t.Fatalf("WriteCohort over participants.tsv: %v, want an error wrapping fs.ErrExist", err)
	}
	entries, _ := os.ReadDir(dir)
	if len(entries) != 1 || entries[0].Name() != "participants.tsv" {
		t.Errorf("left behind: %v", entries)
	}
	if b, _ := os.ReadFile(mine); string(b) != "participant_id\nsub-99\n" {
		t.Errorf("participants.tsv was changed: %q", b)
	}
}
