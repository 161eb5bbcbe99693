package ingest

import (
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"time"
)

// Covariate is one column of participants.tsv with the type inferred from
// its values: BIGINT when every value is an integer, DOUBLE when every value
// is a number, BOOLEAN when every value is true or false (any case), DATE
// when every value is an ISO 8601 date (YYYY-MM-DD), VARCHAR otherwise.
// "n/a" and empty cells are NULL (BIDS).
type Covariate struct {
	Name string
	Type string // BIGINT, DOUBLE, BOOLEAN, DATE or VARCHAR
	// Doc is the column's entry in participants.json (zero without one).
	Doc CovariateDoc
}

// Participants is the parsed participants sheet.
type Participants struct {
	Path       string
	Covariates []Covariate
	IDs        []string         // participant_id in file order, normalised to sub-<label>
	Values     map[string][]any // per ID: one value per covariate (int64, float64, bool, time.Time, string or nil)
	Lines      map[string]int   // per ID: its line in the file
	// DocPath is the participants.json read beside the sheet ("" when
	// none); Warnings are its entries for columns the sheet lacks.
	DocPath  string
	Warnings []string
}

// ReadParticipants reads a participants.tsv (or .csv) file.
func ReadParticipants(path string) (*Participants, error) {
	if _, err := os.Lstat(path); errors.Is(err, fs.ErrNotExist) {
		return nil, &ParseError{Path: path, Err: fmt.Errorf("%w: not found; the cohort folder needs a participants.tsv (BIDS) whose first column is participant_id, one row per subject", ErrUnreadable)}
	}
	f, err := openFile(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	p, err := ParseParticipants(path, f, Delimiter(path))
	if err != nil {
		return nil, err
	}
	names := make([]string, len(p.Covariates))
	for i, c := range p.Covariates {
		names[i] = c.Name
	}
	docs, warnings, err := readParticipantsJSON(path, names)
	if err != nil {
		return nil, err
	}
	if docs != nil || warnings != nil {
		p.DocPath = filepath.Join(filepath.Dir(path), "participants.json")
	}
	for i, c := range p.Covariates {
		p.Covariates[i].Doc = docs[c.Name]
	}
	p.Warnings = warnings
	return p, nil
}

// NormaliseSubject returns the participant label with its "sub-" prefix,
// the form every table uses.
func NormaliseSubject(id string) string {
	if strings.HasPrefix(id, "sub-") {
		return id
	}
	return "sub-" + id
}

func isNull(s string) bool { return s == "" || s == "n/a" || s == "N/A" || s == "NA" }

// ParseParticipants parses a participants sheet: a header whose first
// column is participant_id, then one row per participant.
func ParseParticipants(path string, r io.Reader, delim byte) (*Participants, error) {
	lr := newLineReader(path, r)
	header := lr.next()
	if header == nil {
		if err := lr.fatal(); err != nil {
			return nil, err
		}
		return nil, &ParseError{Path: path, Err: fmt.Errorf("%w: expected a header starting with participant_id", ErrEmpty)}
	}
	cols := strings.Split(string(header), string(delim))
	for i := range cols {
		cols[i] = strings.TrimSpace(cols[i])
	}
	if cols[0] != "participant_id" {
		// The right sheet with the other separator: say so.
		if delim == '\t' && len(cols) == 1 && strings.HasPrefix(cols[0], "participant_id,") {
			return nil, perr(path, 1, 0, "the header has commas but no tabs: this sheet is comma-separated, and a .tsv file is split at tabs; save it tab-separated (BIDS) or name it participants.csv")
		}
		if delim == ',' && len(cols) == 1 && strings.HasPrefix(cols[0], "participant_id\t") {
			return nil, perr(path, 1, 0, "the header has tabs but no commas: this sheet is tab-separated, and a .csv file is split at commas; name it participants.tsv")
		}
		for i, c := range cols {
			if c == "participant_id" {
				return nil, perr(path, 1, i+1, "participant_id must be the first column (BIDS); move it to the front")
			}
		}
		return nil, &ParseError{Path: path, Line: 1, Column: 1, Err: fmt.Errorf("%w: the first header cell is %q", ErrNoParticipantsCol, truncate(cols[0], 40))}
	}
	seen := map[string]int{}
	for i, c := range cols {
		if c == "" {
			return nil, perr(path, 1, i+1, "empty column name in the header")
		}
		lc := strings.ToLower(c)
		if j, dup := seen[lc]; dup {
			return nil, perr(path, 1, i+1, "column name %q repeats column %d", c, j+1)
		}
		if i > 0 && (lc == "subject_id" || lc == "analysis_id") {
			return nil, perr(path, 1, i+1, "column name %q is reserved by the warehouse; rename it", c)
		}
		seen[lc] = i
	}
	p := &Participants{Path: path, Values: map[string][]any{}, Lines: map[string]int{}}
	raw := map[string][]string{}
	var problems Problems
	for {
		line := lr.next()
		if line == nil {
			break
		}
		if strings.TrimSpace(string(line)) == "" {
			continue
		}
		cells := strings.Split(string(line), string(delim))
		if len(cells) != len(cols) {
			problems = append(problems, &ParseError{Path: path, Line: lr.line, Err: fmt.Errorf("%w: %d cells, header has %d", ErrRagged, len(cells), len(cols))})
			continue
		}
		id := strings.TrimSpace(cells[0])
		if id == "" || isNull(id) {
			problems = append(problems, perr(path, lr.line, 1, "empty participant_id"))
			continue
		}
		id = NormaliseSubject(id)
		if prev, dup := p.Lines[id]; dup {
			problems = append(problems, &ParseError{Path: path, Line: lr.line, Column: 1, Err: fmt.Errorf("%s is %w (first on line %d); keep one row per participant", id, ErrDuplicate, prev)})
			continue
		}
		p.Lines[id] = lr.line
		p.IDs = append(p.IDs, id)
		vals := make([]string, len(cols)-1)
		for i := range vals {
			vals[i] = strings.TrimSpace(cells[i+1])
		}
		raw[id] = vals
	}
	if err := lr.fatal(); err != nil {
		return nil, err
	}
	if len(problems) > 0 {
		return nil, problems
	}
	if len(p.IDs) == 0 {
		return nil, &ParseError{Path: path, Line: 2, Err: fmt.Errorf("%w: expected one row per participant", ErrNoRows)}
	}
	for c := 1; c < len(cols); c++ {
		typ := inferType(p.IDs, raw, c-1)
		p.Covariates = append(p.Covariates, Covariate{Name: cols[c], Type: typ})
	}
	for _, id := range p.IDs {
		vals := make([]any, len(p.Covariates))
		for c, cv := range p.Covariates {
			s := raw[id][c]
			if isNull(s) {
				continue
			}
			switch cv.Type {
			case "BIGINT":
				vals[c], _ = strconv.ParseInt(s, 10, 64)
			case "DOUBLE":
				vals[c], _ = strconv.ParseFloat(s, 64)
			case "BOOLEAN":
				vals[c] = strings.EqualFold(s, "true")
			case "DATE":
				vals[c], _ = time.Parse(time.DateOnly, s)
			default:
				vals[c] = s
			}
		}
		p.Values[id] = vals
	}
	return p, nil
}

func inferType(ids []string, raw map[string][]string, c int) string {
	isInt, isNum, isBool, isDate, seen := true, true, true, true, false
	for _, id := range ids {
		s := raw[id][c]
		if isNull(s) {
			continue
		}
		seen = true
		if !strings.EqualFold(s, "true") && !strings.EqualFold(s, "false") {
			isBool = false
		}
		if _, err := time.Parse(time.DateOnly, s); err != nil || len(s) != len(time.DateOnly) {
			isDate = false
		}
		if _, err := strconv.ParseInt(s, 10, 64); err != nil {
			isInt = false
		}
		if v, err := strconv.ParseFloat(s, 64); err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
			isNum = false
		}
	}
	switch {
	case !seen:
		return "VARCHAR"
	case isInt:
		return "BIGINT"
	case isNum:
		return "DOUBLE"
	case isBool:
		return "BOOLEAN"
	case isDate:
		return "DATE"
	}
	return "VARCHAR"
}
