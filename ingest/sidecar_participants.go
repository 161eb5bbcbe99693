package ingest

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path/filepath"
	"slices"
	"strings"
)

// CovariateDoc is what a BIDS participants.json says about one column of
// participants.tsv: its Description (or LongName), Units, and Levels (the
// meaning of each coded value, as code -> label).
type CovariateDoc struct {
	Description string
	Units       string
	Levels      map[string]string
}

// LevelsJSON is d.Levels as a JSON object with sorted keys ("" when none),
// the form the covariates table stores.
func (d CovariateDoc) LevelsJSON() string {
	if len(d.Levels) == 0 {
		return ""
	}
	b, _ := json.Marshal(d.Levels) // map keys are sorted by encoding/json
	return string(b)
}

// readParticipantsJSON reads the participants.json beside a participants
// sheet, when there is one: the data dictionary of its columns (BIDS). It
// returns nil without one. A file that is not a JSON object of objects is
// an error naming the file and line; a described column the sheet lacks
// is a warning.
func readParticipantsJSON(sheet string, columns []string) (map[string]CovariateDoc, []string, error) {
	path := filepath.Join(filepath.Dir(sheet), "participants.json")
	if _, err := os.Lstat(path); errors.Is(err, fs.ErrNotExist) {
		return nil, nil, nil
	}
	f, err := openFile(path)
	if err != nil {
		return nil, nil, err
	}
	defer f.Close()
	b, err := io.ReadAll(io.LimitReader(f, MaxLine+1))
	if err != nil {
		return nil, nil, &ParseError{Path: path, Err: readError(err)}
	}
	if len(b) > MaxLine {
		return nil, nil, perr(path, 0, 0, "a participants.json larger than 16 MiB is not a data dictionary")
	}
	var raw map[string]json.RawMessage
	if err := json.Unmarshal(b, &raw); err != nil {
		return nil, nil, jsonError(path, b, err, "a JSON object with one entry per participants.tsv column")
	}
	docs := map[string]CovariateDoc{}
	var warnings []string
	for _, col := range slices.Sorted(func(yield func(string) bool) {
		for k := range raw {
			if !yield(k) {
				return
			}
		}
	}) {
		var entry struct {
			Description string
			LongName    string
			Units       string
			Levels      map[string]json.RawMessage
		}
		if err := json.Unmarshal(raw[col], &entry); err != nil {
			line := 1 + bytes.Count(b[:max(0, bytes.Index(b, []byte(`"`+col+`"`)))], []byte("\n"))
			return nil, nil, perr(path, line, 0, "entry %q: want an object with Description, Units and Levels (strings): %v", col, err)
		}
		if col == "participant_id" {
			continue
		}
		if !slices.Contains(columns, col) {
			warnings = append(warnings, fmt.Sprintf("%s describes column %q, which %s does not have", path, col, filepath.Base(sheet)))
			continue
		}
		d := CovariateDoc{Description: strings.TrimSpace(entry.Description), Units: strings.TrimSpace(entry.Units)}
		if d.Description == "" {
			d.Description = strings.TrimSpace(entry.LongName)
		}
		for code, v := range entry.Levels {
			if d.Levels == nil {
				d.Levels = map[string]string{}
			}
			var s string
			if json.Unmarshal(v, &s) != nil {
				// A level may be an object (a term with a description and
				// a URL); its Description, else its JSON text, is the label.
				var obj struct{ Description, LongName string }
				if json.Unmarshal(v, &obj) == nil && (obj.Description != "" || obj.LongName != "") {
					s = obj.Description
					if s == "" {
						s = obj.LongName
					}
				} else {
					s = string(bytes.TrimSpace(v))
				}
			}
			d.Levels[code] = s
		}
		docs[col] = d
	}
	return docs, warnings, nil
}

// jsonError turns a JSON decoding error into a ParseError at its line.
func jsonError(path string, b []byte, err error, want string) error {
	var se *json.SyntaxError
	var te *json.UnmarshalTypeError
	switch {
	case errors.As(err, &se):
		return perr(path, 1+bytes.Count(b[:se.Offset], []byte("\n")), 0, "not valid JSON: %v", err)
	case errors.As(err, &te):
		return perr(path, 1+bytes.Count(b[:te.Offset], []byte("\n")), 0, "want %s: %v", want, err)
	}
	return perr(path, 0, 0, "want %s: %v", want, err)
}
