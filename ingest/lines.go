package ingest

import (
	"bufio"
	"bytes"
	"fmt"
	"io"
)

// MaxLine is the longest line the readers accept. A longer one is almost
// certainly not a series row (a 2 GB line is a binary or a broken export)
// and is refused without reading it into memory.
const MaxLine = 16 << 20

// lineReader yields lines without their end (LF or CRLF), counting from 1.
// UTF-8 byte-order marks at the start are skipped; UTF-16 and a start of
// NUL bytes (after any mark) are refused.
type lineReader struct {
	path string
	r    *bufio.Reader
	line int
	buf  []byte
	err  error
}

func newLineReader(path string, r io.Reader) *lineReader {
	return &lineReader{path: path, r: bufio.NewReaderSize(r, 1<<16)}
}

// next returns the next line, or nil at the end or on error (see err).
// The slice is valid until the following call.
func (lr *lineReader) next() []byte {
	if lr.err != nil {
		return nil
	}
	if lr.line == 0 {
		head, _ := lr.r.Peek(4)
		for bytes.HasPrefix(head, []byte{0xEF, 0xBB, 0xBF}) { // a mark saved twice is still only a mark
			lr.r.Discard(3)
			head, _ = lr.r.Peek(4) // what follows the mark is checked the same way
		}
		switch {
		case bytes.HasPrefix(head, []byte{0xFF, 0xFE}), bytes.HasPrefix(head, []byte{0xFE, 0xFF}):
			lr.err = &ParseError{Path: lr.path, Line: 1, Err: fmt.Errorf("%w: it is UTF-16; save it as UTF-8 (plain text) and try again", ErrEncoding)}
			return nil
		case len(head) >= 2 && (head[0] == 0 || head[1] == 0):
			lr.err = &ParseError{Path: lr.path, Line: 1, Err: fmt.Errorf("%w: it holds NUL bytes (UTF-16 or binary); save it as UTF-8 text", ErrEncoding)}
			return nil
		}
	}
	lr.line++
	lr.buf = lr.buf[:0]
	for {
		chunk, err := lr.r.ReadSlice('\n')
		if len(lr.buf)+len(chunk) > MaxLine {
			lr.err = &ParseError{Path: lr.path, Line: lr.line, Err: fmt.Errorf("%w: longer than 16 MiB; is this really a text table with one time point per line?", ErrLineTooLong)}
			return nil
		}
		if err == bufio.ErrBufferFull {
			lr.buf = append(lr.buf, chunk...)
			continue
		}
		if err == io.EOF {
			if len(lr.buf)+len(chunk) == 0 {
				lr.line--
				lr.err = io.EOF
				return nil
			}
			lr.buf = append(lr.buf, chunk...)
			lr.err = io.EOF // last line without a newline; returned now, EOF next call
			return trimEOL(lr.buf)
		}
		if err != nil {
			lr.err = &ParseError{Path: lr.path, Line: lr.line, Err: readError(err)}
			return nil
		}
		if len(lr.buf) == 0 {
			return trimEOL(chunk)
		}
		lr.buf = append(lr.buf, chunk...)
		return trimEOL(lr.buf)
	}
}

// fatal returns the reader's error, nil at a clean end.
func (lr *lineReader) fatal() error {
	if lr.err == io.EOF {
		return nil
	}
	return lr.err
}

func trimEOL(b []byte) []byte {
	b = bytes.TrimSuffix(b, []byte{'\n'})
	return bytes.TrimSuffix(b, []byte{'\r'})
}
