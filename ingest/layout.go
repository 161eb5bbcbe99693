package ingest

import (
	"bufio"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strconv"

	"github.com/topostate/topostate/compute"
)

// SyntheticParticipant is one row of a generated participants sheet.
type SyntheticParticipant struct {
	ID    string
	Cells []string // one per covariate column, "n/a" for missing
}

// WriteCohort writes series in the input layout ingest reads: for each
// series sub-<label>/func/sub-<label>_task-rest_timeseries.tsv with a JSON
// sidecar giving RepetitionTime, and participants.tsv at the top. It is
// used for generated cohorts (simulate, demo, tests).
func WriteCohort(dir string, regions []string, tr float64, ids []string, series []compute.Series,
	covariates []string, rows []SyntheticParticipant) error {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return fmt.Errorf("ingest: %w", err)
	}
	for i, id := range ids {
		sub := filepath.Join(dir, id, "func")
		if err := os.MkdirAll(sub, 0o755); err != nil {
			return fmt.Errorf("ingest: %w", err)
		}
		base := filepath.Join(sub, id+"_task-rest_timeseries")
		if err := writeSeries(base+".tsv", regions, series[i]); err != nil {
			return err
		}
		side, _ := json.MarshalIndent(map[string]any{"RepetitionTime": tr, "TaskName": "rest"}, "", "  ")
		if err := os.WriteFile(base+".json", append(side, '\n'), 0o644); err != nil {
			return fmt.Errorf("ingest: %w", err)
		}
	}
	f, err := os.Create(filepath.Join(dir, "participants.tsv"))
	if err != nil {
		return fmt.Errorf("ingest: %w", err)
	}
	w := bufio.NewWriter(f)
	w.WriteString("participant_id")
	for _, c := range covariates {
		w.WriteString("\t" + c)
	}
	w.WriteByte('\n')
	for _, r := range rows {
		w.WriteString(r.ID)
		for _, c := range r.Cells {
			w.WriteString("\t" + c)
		}
		w.WriteByte('\n')
	}
	if err := w.Flush(); err != nil {
		f.Close()
		return fmt.Errorf("ingest: %w", err)
	}
	return f.Close()
}

func writeSeries(path string, regions []string, y compute.Series) error {
	f, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("ingest: %w", err)
	}
	w := bufio.NewWriterSize(f, 1<<16)
	for j, r := range regions {
		if j > 0 {
			w.WriteByte('\t')
		}
		w.WriteString(r)
	}
	w.WriteByte('\n')
	buf := make([]byte, 0, 32)
	for t := 0; t < y.T; t++ {
		for j := 0; j < y.P; j++ {
			if j > 0 {
				w.WriteByte('\t')
			}
			buf = strconv.AppendFloat(buf[:0], y.Data[t*y.P+j], 'g', 7, 64)
			w.Write(buf)
		}
		w.WriteByte('\n')
	}
	if err := w.Flush(); err != nil {
		f.Close()
		return fmt.Errorf("ingest: %w", err)
	}
	return f.Close()
}
