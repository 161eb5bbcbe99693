package ingest

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"os"
	"regexp"
	"strconv"
	"strings"
	"unicode"
	"unicode/utf8"

	"golang.org/x/text/encoding/charmap"
)

// Covariate is one column of participants.tsv with the type inferred from
// its values: BIGINT when every value is an integer, DOUBLE when every value
// is a number, VARCHAR otherwise. "n/a" and empty cells are NULL (BIDS).
type Covariate struct {
	Name string
	Type string // BIGINT, DOUBLE or VARCHAR
}

// Participants is the parsed participants sheet.
type Participants struct {
	Path       string
	Covariates []Covariate
	IDs        []string         // participant_id in file order, normalised to sub-<label>
	Values     map[string][]any // per ID: one value per covariate (int64, float64, string or nil)
	Lines      map[string]int   // per ID: its line in the file
}

// ReadParticipants reads a participants.tsv (or .csv) file in UTF-8.
func ReadParticipants(path string) (*Participants, error) {
	return ReadParticipantsEncoding(path, "")
}

// Encodings are the values of Options.Encoding (--encoding): the text
// encoding of participants.tsv. "" and "utf-8" read UTF-8, where a byte
// that is not UTF-8 is an error naming file, line and column; "latin1"
// reads ISO-8859-1 as Windows-1252 (its superset for printable characters,
// which spreadsheets on Windows write) and converts it to UTF-8.
var Encodings = []string{"utf-8", "latin1"}

// ReadParticipantsEncoding reads a participants sheet in the encoding enc
// (see Encodings).
func ReadParticipantsEncoding(path, enc string) (*Participants, error) {
	if _, err := os.Lstat(path); errors.Is(err, fs.ErrNotExist) {
		return nil, &ParseError{Path: path, Err: fmt.Errorf("%w: not found; the cohort folder needs a participants.tsv (BIDS) whose first column is participant_id, one row per subject", ErrUnreadable)}
	}
	f, err := openFile(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	var r io.Reader = f
	if enc == "latin1" {
		r = charmap.Windows1252.NewDecoder().Reader(f)
	}
	return ParseParticipants(path, r, Delimiter(path))
}

// notUTF8 returns the error for a line that is not valid UTF-8: the first
// cell holding a byte that is not, with that byte as Windows-1252 would
// read it, and what to do. Every text the warehouse stores must be UTF-8:
// DuckDB accepts other bytes in a column name, after which reading the
// table fails.
func notUTF8(path string, n int, line []byte, delim byte, hint string) error {
	col := 1
	for i := 0; i < len(line); {
		r, size := utf8.DecodeRune(line[i:])
		if line[i] == delim {
			col++
		}
		if r == utf8.RuneError && size <= 1 {
			start := bytes.LastIndexByte(line[:i], delim) + 1
			end := bytes.IndexByte(line[i:], delim)
			if end < 0 {
				end = len(line)
			} else {
				end += i
			}
			as, _ := charmap.Windows1252.NewDecoder().Bytes(line[i : i+1])
			return perr(path, n, col, "%v: the cell %q holds the byte 0x%02X, which is not UTF-8 (in Latin-1/Windows-1252, as spreadsheets often save, it is %q); save the file as UTF-8 (\"CSV UTF-8\" or \"Unicode text\") and try again%s",
				ErrEncoding, truncate(string(line[start:end]), 60), line[i], string(as), hint)
		}
		i += size
	}
	return perr(path, n, 0, "%v", ErrEncoding)
}

const latin1Hint = ", or pass --encoding latin1"

// reservedCovariate reports whether a participants column would collide
// with a column the warehouse or a bundled query (subject_features) puts
// beside the covariates.
func reservedCovariate(name string) bool {
	lc := strings.ToLower(name)
	switch lc {
	case "subject_id", "analysis_id", "session_id", "n_windows", "n_transitions", "switch_rate", "states_visited":
		return true
	}
	return reservedFeature.MatchString(lc)
}

var reservedFeature = regexp.MustCompile(`^(dwell_seconds|n_dwells|occupancy|tree_weight)_s[0-9]+$`)

// ReservedCovariates names the reserved participants columns for messages.
const ReservedCovariates = "subject_id, analysis_id, session_id, n_windows, n_transitions, switch_rate, states_visited, " +
	"and dwell_seconds_sNN, n_dwells_sNN, occupancy_sNN, tree_weight_sNN for any number NN"

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
	if !utf8.Valid(header) {
		return nil, notUTF8(path, 1, header, delim, latin1Hint)
	}
	cols := strings.Split(string(header), string(delim))
	for i := range cols {
		cols[i] = strings.TrimSpace(cols[i])
	}
	if cols[0] != "participant_id" {
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
		if i > 0 && reservedCovariate(c) {
			return nil, perr(path, 1, i+1, "column name %q is reserved (the warehouse and the feature table subject_features use it); rename it; reserved are %s", c, ReservedCovariates)
		}
		if strings.IndexFunc(c, unicode.IsControl) >= 0 {
			return nil, perr(path, 1, i+1, "column name %q holds a control character; rename it", c)
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
		if !utf8.Valid(line) {
			problems = append(problems, notUTF8(path, lr.line, line, delim, latin1Hint))
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
			default:
				vals[c] = s
			}
		}
		p.Values[id] = vals
	}
	return p, nil
}

func inferType(ids []string, raw map[string][]string, c int) string {
	isInt, isNum, seen := true, true, false
	for _, id := range ids {
		s := raw[id][c]
		if isNull(s) {
			continue
		}
		seen = true
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
	}
	return "VARCHAR"
}
