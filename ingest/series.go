package ingest

import (
	"bytes"
	"crypto/sha256"
	"encoding/hex"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"unicode/utf8"
	"unsafe"

	"github.com/topostate/topostate/compute"
)

// maxProblemsPerFile bounds how many cell problems one file reports; the
// rest are counted.
const maxProblemsPerFile = 5

// SeriesFile is one parsed region time-series table.
type SeriesFile struct {
	Path    string
	Regions []string       // header names, in column order
	Series  compute.Series // T x p, row-major
	SHA256  string         // of the file's bytes
	TR      float64        // repetition time the file itself states (s); 0: it states none
}

// Delimiter returns the cell separator for a series or sheet file: comma
// for .csv, tab otherwise.
func Delimiter(path string) byte {
	if strings.HasSuffix(strings.ToLower(path), ".csv") {
		return ','
	}
	return '\t'
}

// ReadSeriesFile reads a series table from disk. See ParseSeries.
func ReadSeriesFile(path string) (*SeriesFile, error) {
	f, err := openFile(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	h := sha256.New()
	sf, err := ParseSeries(path, io.TeeReader(f, h), Delimiter(path))
	if err != nil {
		return nil, err
	}
	sf.SHA256 = hex.EncodeToString(h.Sum(nil))
	return sf, nil
}

// ParseSeries reads a table whose first line names the regions and whose
// every further line is one time point: one finite number per region,
// separated by delim. Empty lines at the end are ignored. Cell problems
// (up to a handful per file) are returned together as Problems, each with
// its line and column.
func ParseSeries(path string, r io.Reader, delim byte) (*SeriesFile, error) {
	lr := newLineReader(path, r)
	header := lr.next()
	if header == nil {
		if err := lr.fatal(); err != nil {
			return nil, err
		}
		return nil, &ParseError{Path: path, Err: fmt.Errorf("%w: expected a header line of region names", ErrEmpty)}
	}
	regions, err := parseHeader(path, header, delim)
	if err != nil {
		return nil, err
	}
	p := len(regions)
	data := make([]float64, 0, min(p*512, 1<<20)) // a guess at T; a huge header must not reserve gigabytes
	var problems Problems
	extra := 0
	note := func(e error) {
		if len(problems) < maxProblemsPerFile {
			problems = append(problems, e)
		} else {
			extra++
		}
	}
	blankRun := 0 // blank lines are allowed only at the end
	for {
		line := lr.next()
		if line == nil {
			break
		}
		if len(bytes.TrimSpace(line)) == 0 {
			blankRun++
			continue
		}
		if blankRun > 0 {
			note(perr(path, lr.line-blankRun, 0, "blank line inside the table; remove it"))
			blankRun = 0
		}
		row := len(data)
		data = append(data, make([]float64, p)...)
		col := 0
		rest := line
		for {
			var cell []byte
			i := bytes.IndexByte(rest, delim)
			if i < 0 {
				cell, rest = rest, nil
			} else {
				cell, rest = rest[:i], rest[i+1:]
			}
			col++
			if col <= p {
				v, ok := parseCell(cell)
				if !ok {
					note(&ParseError{Path: path, Line: lr.line, Column: col, Err: fmt.Errorf("%w: %q in region %q; series cells must be finite numbers (no n/a, NaN or Inf: interpolate or drop the time point before ingest)", ErrNonNumeric, truncate(string(cell), 40), regions[col-1])})
				} else if v > MaxValue || v < -MaxValue {
					note(&ParseError{Path: path, Line: lr.line, Column: col, Err: fmt.Errorf("region %q: %w", regions[col-1], checkValue(v))})
				}
				data[row+col-1] = v
			}
			if i < 0 {
				break
			}
		}
		if col != p {
			note(&ParseError{Path: path, Line: lr.line, Err: fmt.Errorf("%w: %d cells, header has %d (is the separator %s?)", ErrRagged, col, p, delimName(delim))})
		}
	}
	if err := lr.fatal(); err != nil {
		return nil, err
	}
	if len(problems) > 0 {
		if extra > 0 {
			problems = append(problems, perr(path, 0, 0, "and %d more problem(s) like these", extra))
		}
		return nil, problems
	}
	if len(data) == 0 {
		return nil, &ParseError{Path: path, Line: 2, Err: fmt.Errorf("%w: expected one line per time point after the header", ErrNoRows)}
	}
	return &SeriesFile{Path: path, Regions: regions, Series: compute.Series{T: len(data) / p, P: p, Data: data}}, nil
}

func parseHeader(path string, header []byte, delim byte) ([]string, error) {
	if !utf8.Valid(header) {
		return nil, notUTF8(path, 1, header, delim, "")
	}
	names := strings.Split(string(header), string(delim))
	seen := map[string]int{}
	for i, n := range names {
		n = strings.TrimSpace(n)
		names[i] = n
		if n == "" {
			return nil, perr(path, 1, i+1, "empty region name in the header")
		}
		if j, dup := seen[n]; dup {
			return nil, perr(path, 1, i+1, "region name %q repeats column %d", n, j+1)
		}
		if _, err := strconv.ParseFloat(n, 64); err == nil && len(names) > 1 {
			return nil, perr(path, 1, i+1, "header cell %q is a number; the first line must name the regions", n)
		}
		seen[n] = i
	}
	if len(names) < 2 {
		switch {
		case delim == '\t' && bytes.IndexByte(header, ',') >= 0:
			return nil, perr(path, 1, 0, "header has 1 column: a .tsv file is split at tabs, but this header has commas; name a comma-separated file .csv")
		case delim == ',' && bytes.IndexByte(header, '\t') >= 0:
			return nil, perr(path, 1, 0, "header has 1 column: a .csv file is split at commas, but this header has tabs; name a tab-separated file .tsv")
		}
		return nil, perr(path, 1, 0, "header has %d column; need at least two regions (is the separator %s?)", len(names), delimName(delim))
	}
	return names, nil
}

// parseCell parses one numeric cell without allocating. Surrounding
// spaces are allowed; NaN and infinities are refused.
func parseCell(b []byte) (float64, bool) {
	b = bytes.TrimSpace(b)
	if len(b) == 0 {
		return 0, false
	}
	if v, ok := parseDecimal(b); ok { // the common case, without strconv's generality
		return v, true
	}
	// The string aliases b only for the call; ParseFloat keeps it only in
	// its error, which is dropped here.
	v, err := strconv.ParseFloat(unsafe.String(&b[0], len(b)), 64)
	if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, false
	}
	return v, true
}

func delimName(d byte) string {
	if d == ',' {
		return "a comma (.csv)"
	}
	return "a tab (.tsv)"
}

func truncate(s string, n int) string {
	if len(s) <= n {
		return s
	}
	return s[:n] + "..."
}
