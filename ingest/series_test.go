package ingest

import (
	"errors"
	"io"
	"strings"
	"testing"
)

// Cases follow the shape of encoding/csv's reader tests: input text, what
// must be read, or the error kind and position that must be reported.
func TestParseSeries(t *testing.T) {
	tests := []struct {
		name      string
		in        string
		delim     byte
		wantT     int
		wantP     int
		wantFirst []float64
		wantErr   error
		wantLine  int
		wantCol   int
	}{
		{name: "tsv", in: "a\tb\tc\n1\t2\t3\n4\t5\t6\n", delim: '\t', wantT: 2, wantP: 3, wantFirst: []float64{1, 2, 3}},
		{name: "csv", in: "a,b\n1.5,-2e-3\n", delim: ',', wantT: 1, wantP: 2, wantFirst: []float64{1.5, -0.002}},
		{name: "crlf and bom", in: "\xEF\xBB\xBFa\tb\r\n1\t2\r\n3\t4\r\n", delim: '\t', wantT: 2, wantP: 2, wantFirst: []float64{1, 2}},
		{name: "no final newline", in: "a\tb\n1\t2\n3\t4", delim: '\t', wantT: 2, wantP: 2, wantFirst: []float64{1, 2}},
		{name: "trailing blank lines", in: "a\tb\n1\t2\n\n\n", delim: '\t', wantT: 1, wantP: 2, wantFirst: []float64{1, 2}},
		{name: "spaces around numbers", in: "a\tb\n 1 \t 2\n", delim: '\t', wantT: 1, wantP: 2, wantFirst: []float64{1, 2}},
		{name: "empty", in: "", delim: '\t', wantErr: ErrEmpty},
		{name: "header only", in: "a\tb\n", delim: '\t', wantErr: ErrNoRows, wantLine: 2},
		{name: "ragged", in: "a\tb\tc\n1\t2\t3\n4\t5\n", delim: '\t', wantErr: ErrRagged, wantLine: 3},
		{name: "non numeric", in: "a\tb\n1\tx\n", delim: '\t', wantErr: ErrNonNumeric, wantLine: 2, wantCol: 2},
		{name: "n/a cell", in: "a\tb\n1\t2\nn/a\t3\n", delim: '\t', wantErr: ErrNonNumeric, wantLine: 3, wantCol: 1},
		{name: "NaN cell", in: "a\tb\n1\tNaN\n", delim: '\t', wantErr: ErrNonNumeric, wantLine: 2, wantCol: 2},
		{name: "Inf cell", in: "a\tb\n1\t2\n3\t-Inf\n", delim: '\t', wantErr: ErrNonNumeric, wantLine: 3, wantCol: 2},
		{name: "empty cell", in: "a\tb\n1\t\n", delim: '\t', wantErr: ErrNonNumeric, wantLine: 2, wantCol: 2},
		{name: "utf16", in: "\xFF\xFEa\x00\t\x00b\x00", delim: '\t', wantErr: ErrEncoding, wantLine: 1},
		{name: "wrong separator", in: "a,b,c\n1,2,3\n", delim: '\t', wantErr: nil, wantLine: 1},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			sf, err := ParseSeries("x.tsv", strings.NewReader(tc.in), tc.delim)
			if tc.wantErr == nil && tc.wantLine == 0 {
				if err != nil {
					t.Fatalf("unexpected error: %v", err)
				}
				if sf.Series.T != tc.wantT || sf.Series.P != tc.wantP {
					t.Fatalf("got %dx%d, want %dx%d", sf.Series.T, sf.Series.P, tc.wantT, tc.wantP)
				}
				for j, v := range tc.wantFirst {
					if sf.Series.At(0, j) != v {
						t.Errorf("first row col %d = %v, want %v", j, sf.Series.At(0, j), v)
					}
				}
				return
			}
			if err == nil {
				t.Fatalf("no error, want one at line %d", tc.wantLine)
			}
			if tc.wantErr != nil && !errors.Is(err, tc.wantErr) {
				t.Fatalf("error %v, want kind %v", err, tc.wantErr)
			}
			var pe *ParseError
			if !errors.As(err, &pe) {
				t.Fatalf("error %T carries no position", err)
			}
			if pe.Path != "x.tsv" || pe.Line != tc.wantLine || (tc.wantCol != 0 && pe.Column != tc.wantCol) {
				t.Fatalf("position %s:%d:%d, want x.tsv:%d:%d (%v)", pe.Path, pe.Line, pe.Column, tc.wantLine, tc.wantCol, err)
			}
		})
	}
}

// A line longer than MaxLine is refused without being held in memory.
func TestParseSeriesLongLine(t *testing.T) {
	r := &repeatReader{prefix: "a\tb\n", fill: '1', n: MaxLine + 10}
	_, err := ParseSeries("big.tsv", r, '\t')
	if !errors.Is(err, ErrLineTooLong) {
		t.Fatalf("err = %v, want ErrLineTooLong", err)
	}
	var pe *ParseError
	if !errors.As(err, &pe) || pe.Line != 2 {
		t.Fatalf("want the error at line 2, got %v", err)
	}
}

type repeatReader struct {
	prefix string
	fill   byte
	n      int
}

func (r *repeatReader) Read(p []byte) (int, error) {
	if r.prefix != "" {
		n := copy(p, r.prefix)
		r.prefix = r.prefix[n:]
		return n, nil
	}
	if r.n == 0 {
		return 0, io.EOF
	}
	n := min(len(p), r.n)
	for i := range n {
		p[i] = r.fill
	}
	r.n -= n
	return n, nil
}

func TestParseParticipants(t *testing.T) {
	in := "\xEF\xBB\xBFparticipant_id\tgroup\tage\tscore\r\n" +
		"sub-01\tA\t34\t1.5\r\n" +
		"02\tB\tn/a\t2\r\n" +
		"sub-03\tn/a\t51\t\r\n"
	p, err := ParseParticipants("participants.tsv", strings.NewReader(in), '\t')
	if err != nil {
		t.Fatal(err)
	}
	wantCols := []Covariate{{Name: "group", Type: "VARCHAR"}, {Name: "age", Type: "BIGINT"}, {Name: "score", Type: "DOUBLE"}}
	for i, c := range wantCols {
		if p.Covariates[i].Name != c.Name || p.Covariates[i].Type != c.Type {
			t.Errorf("column %d = %+v, want %+v", i, p.Covariates[i], c)
		}
	}
	if strings.Join(p.IDs, ",") != "sub-01,sub-02,sub-03" {
		t.Errorf("IDs = %v (the sub- prefix must be added where missing)", p.IDs)
	}
	if p.Values["sub-02"][1] != nil || p.Values["sub-03"][0] != nil || p.Values["sub-03"][2] != nil {
		t.Errorf("n/a and empty cells must be NULL: %v %v", p.Values["sub-02"], p.Values["sub-03"])
	}
	if p.Values["sub-01"][1] != int64(34) || p.Values["sub-02"][2] != 2.0 {
		t.Errorf("typed values wrong: %#v %#v", p.Values["sub-01"], p.Values["sub-02"])
	}

	bad := []struct {
		name, in string
		want     error
		line     int
	}{
		{"no participant_id", "id\tage\n1\t2\n", ErrNoParticipantsCol, 1},
		{"duplicate", "participant_id\tage\nsub-1\t2\nsub-1\t3\n", ErrDuplicate, 3},
		{"ragged", "participant_id\tage\nsub-1\t2\t9\n", ErrRagged, 2},
		{"empty", "", ErrEmpty, 0},
	}
	for _, tc := range bad {
		t.Run(tc.name, func(t *testing.T) {
			_, err := ParseParticipants("participants.tsv", strings.NewReader(tc.in), '\t')
			if !errors.Is(err, tc.want) {
				t.Fatalf("err = %v, want %v", err, tc.want)
			}
			var pe *ParseError
			if !errors.As(err, &pe) || pe.Line != tc.line {
				t.Fatalf("want line %d, got %v", tc.line, err)
			}
		})
	}
}

// Byte-order marks (EF BB BF, the UTF-8 encoding of U+FEFF: Unicode
// Standard, section 23.8) at the start are not part of the first region's
// name, even when a file was saved with the mark twice; binary after a mark
// is still binary (found by FuzzParseSeries, kept in testdata/fuzz).
func TestParseSeriesByteOrderMarks(t *testing.T) {
	sf, err := ParseSeries("x.tsv", strings.NewReader("\xEF\xBB\xBF\xEF\xBB\xBFa\tb\n1\t2\n"), '\t')
	if err != nil {
		t.Fatal(err)
	}
	if sf.Regions[0] != "a" {
		t.Errorf("first region %q, want \"a\"", sf.Regions[0])
	}
	if _, err := ParseSeries("x.tsv", strings.NewReader("\xEF\xBB\xBF\x00\tA\n0\t0"), '\t'); !errors.Is(err, ErrEncoding) {
		t.Errorf("NUL bytes after a byte-order mark: err = %v, want ErrEncoding", err)
	}
}
