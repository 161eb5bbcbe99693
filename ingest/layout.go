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
//
// It never replaces a file: every file is created exclusively, so a name
// that exists already (an earlier cohort, real or simulated, or another
// run writing at the same moment) is an error, and on any error the files
// and folders this call created are removed again.
func WriteCohort(dir string, regions []string, tr float64, ids []string, series []compute.Series,
	covariates []string, rows []SyntheticParticipant) (err error) {
	var made []string // files and folders this call created, in order
	defer func() {
		if err != nil {
			for i := len(made) - 1; i >= 0; i-- {
				os.Remove(made[i]) // a folder only when empty: never another run's files
			}
		}
	}()
	mkdir := func(d string) error {
		var todo []string
		for p := d; ; p = filepath.Dir(p) {
			if _, err := os.Lstat(p); err == nil || p == filepath.Dir(p) {
				break
			}
			todo = append(todo, p)
		}
		for i := len(todo) - 1; i >= 0; i-- {
			if err := os.Mkdir(todo[i], 0o755); err != nil {
				return fmt.Errorf("ingest: %w", err)
			}
			made = append(made, todo[i])
		}
		return nil
	}
	create := func(p string) (*os.File, error) {
		f, err := os.OpenFile(p, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o644)
		if err != nil {
			return nil, fmt.Errorf("ingest: %w (a cohort is written only where none of its files exist)", err)
		}
		made = append(made, p)
		return f, nil
	}
	if err := mkdir(dir); err != nil {
		return err
	}
	for i, id := range ids {
		sub := filepath.Join(dir, id, "func")
		if err := mkdir(sub); err != nil {
			return err
		}
		base := filepath.Join(sub, id+"_task-rest_timeseries")
		f, err := create(base + ".tsv")
		if err != nil {
			return err
		}
		if err := writeSeries(f, regions, series[i]); err != nil {
			return err
		}
		side, _ := json.MarshalIndent(map[string]any{"RepetitionTime": tr, "TaskName": "rest"}, "", "  ")
		if f, err = create(base + ".json"); err != nil {
			return err
		}
		_, err = f.Write(append(side, '\n'))
		if cerr := f.Close(); err == nil {
			err = cerr
		}
		if err != nil {
			return fmt.Errorf("ingest: %w", err)
		}
	}
	f, err := create(filepath.Join(dir, "participants.tsv"))
	if err != nil {
		return err
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

// writeSeries writes a series table into f and closes it.
func writeSeries(f *os.File, regions []string, y compute.Series) error {
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
