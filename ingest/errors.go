package ingest

import (
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"syscall"
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
	case e.Column > 0:
		return fmt.Sprintf("%s: column %d: %v", e.Path, e.Column, e.Err)
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
	ErrUndefinedWindow   = errors.New("a window's correlations are undefined")
	ErrRegionMismatch    = errors.New("regions differ from the first series")
	ErrTooShort          = errors.New("fewer time points than the window")
	ErrDuplicate         = errors.New("listed twice")
	ErrNoParticipant     = errors.New("subject has no row in participants.tsv")
	ErrNoParticipantsCol = errors.New("participants.tsv has no participant_id column")
	ErrNoTR              = errors.New("no repetition time")
	ErrUnreadable        = errors.New("cannot read the file")
)

// openFile opens path for reading. It refuses anything but a regular file
// (after following symbolic links) before opening it: opening a named pipe
// would wait for a writer forever, and a folder or device is not a table.
func openFile(path string) (*os.File, error) {
	st, err := os.Stat(path)
	if err != nil {
		return nil, &ParseError{Path: path, Err: fileError(path, err)}
	}
	if !st.Mode().IsRegular() {
		return nil, &ParseError{Path: path, Err: fmt.Errorf("%w: it is %s, not a regular file", ErrUnreadable, modeName(st.Mode()))}
	}
	f, err := os.Open(path)
	if err != nil {
		return nil, &ParseError{Path: path, Err: fileError(path, err)}
	}
	return f, nil
}

// readFile reads a whole regular file (see openFile).
func readFile(path string) ([]byte, error) {
	f, err := openFile(path)
	if err != nil {
		return nil, err
	}
	defer f.Close()
	b, err := io.ReadAll(f)
	if err != nil {
		return nil, &ParseError{Path: path, Err: readError(err)}
	}
	return b, nil
}

// fileError says why path cannot be opened, without repeating the path
// (the ParseError around it names the file once).
func fileError(path string, err error) error {
	var pe *fs.PathError
	if errors.As(err, &pe) {
		err = pe.Err
	}
	switch {
	case errors.Is(err, fs.ErrNotExist):
		if st, lerr := os.Lstat(path); lerr == nil && st.Mode()&fs.ModeSymlink != 0 {
			target, _ := os.Readlink(path)
			return fmt.Errorf("%w: it is a symbolic link to %q, which does not exist", ErrUnreadable, target)
		}
		return fmt.Errorf("%w: no such file", ErrUnreadable)
	case errors.Is(err, syscall.ELOOP):
		return fmt.Errorf("%w: symbolic link loop (the link leads back to itself); replace it with the file it should name", ErrUnreadable)
	case errors.Is(err, fs.ErrPermission):
		return fmt.Errorf("%w: permission denied; make it readable for this user (for example chmod a+r)", ErrUnreadable)
	}
	return fmt.Errorf("%w: %v", ErrUnreadable, err)
}

// readError is an error met while reading an open file, without the path.
func readError(err error) error {
	var pe *fs.PathError
	if errors.As(err, &pe) {
		return fmt.Errorf("%w: %v", ErrUnreadable, pe.Err)
	}
	return fmt.Errorf("%w: %v", ErrUnreadable, err)
}

func modeName(m fs.FileMode) string {
	switch {
	case m.IsDir():
		return "a folder"
	case m&fs.ModeNamedPipe != 0:
		return "a named pipe (FIFO)"
	case m&fs.ModeSocket != 0:
		return "a socket"
	case m&fs.ModeDevice != 0:
		return "a device"
	}
	return "a special file"
}
