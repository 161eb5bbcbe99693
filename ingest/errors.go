package ingest

import (
	"errors"
	"fmt"
)

// ParseError is a problem at a position in an input file, in the manner of
// encoding/csv's ParseError. Line and Column count from 1; 0 means "not at
// a particular line or column".
type ParseError struct {
	Path   string
	Line   int
	Column int
	Err    error
}

func (e *ParseError) Error() string {
	switch {
	case e.Line > 0 && e.Column > 0:
		return fmt.Sprintf("%s:%d:%d: %v", e.Path, e.Line, e.Column, e.Err)
	case e.Line > 0:
		return fmt.Sprintf("%s:%d: %v", e.Path, e.Line, e.Err)
	default:
		return fmt.Sprintf("%s: %v", e.Path, e.Err)
	}
}

func (e *ParseError) Unwrap() error { return e.Err }

func perr(path string, line, col int, format string, args ...any) *ParseError {
	return &ParseError{Path: path, Line: line, Column: col, Err: fmt.Errorf(format, args...)}
}

// Problems is every problem found while validating a cohort. Its message
// lists them one per line.
type Problems []error

func (p Problems) Error() string {
	s := fmt.Sprintf("ingest: the cohort has %d problem(s); nothing was written:", len(p))
	for _, e := range p {
		s += "\n  - " + e.Error()
	}
	return s
}

// Unwrap lets errors.Is and errors.As look at each problem.
func (p Problems) Unwrap() []error { return p }

// Sentinel kinds, for callers and tests that match with errors.Is.
var (
	ErrNoSeries          = errors.New("no time series files found")
	ErrNonNumeric        = errors.New("cell is not a finite number")
	ErrRagged            = errors.New("row has a different number of cells than the header")
	ErrEmpty             = errors.New("file is empty")
	ErrNoRows            = errors.New("file has a header but no data rows")
	ErrEncoding          = errors.New("file is not UTF-8 text")
	ErrLineTooLong       = errors.New("line is too long")
	ErrConstantRegion    = errors.New("region has a constant series")
	ErrRegionMismatch    = errors.New("regions differ from the first series")
	ErrTooShort          = errors.New("fewer time points than the window")
	ErrDuplicate         = errors.New("duplicate subject and session")
	ErrNoParticipant     = errors.New("subject has no row in participants.tsv")
	ErrNoParticipantsCol = errors.New("participants.tsv has no participant_id column")
	ErrNoTR              = errors.New("no repetition time")
)
