package ingest

import (
	"bytes"
	"errors"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

// Fuzz targets for the two parsers, in the manner of encoding/csv's
// fuzz_test.go: whatever the bytes, no panic; every error is positioned;
// what is accepted round-trips; and positions and values agree with a
// plain reference reading of the same bytes (bytes.Split at newlines,
// strings split at the separator, strconv.ParseFloat per cell).
// scripts/fuzz runs them for a bounded time; `go test` runs the seeds.

// corpusFiles returns the committed tables of testdata/good and
// testdata/bad (the bad-input corpus) whose names match keep.
func corpusFiles(f *testing.F, keep func(name string) bool) map[string][]byte {
	f.Helper()
	out := map[string][]byte{}
	root := filepath.Join("..", "testdata")
	filepath.WalkDir(root, func(p string, d fs.DirEntry, err error) error {
		if err != nil || d.IsDir() || !d.Type().IsRegular() || !keep(d.Name()) {
			return nil
		}
		if b, err := os.ReadFile(p); err == nil {
			out[p] = b
		}
		return nil
	})
	if len(out) == 0 {
		f.Fatal("no seed files under ../testdata")
	}
	return out
}

// refLines splits data at '\n' after a leading UTF-8 byte-order mark,
// dropping one '\r' before each '\n': the reference for line numbers.
func refLines(data []byte) [][]byte {
	data = bytes.TrimPrefix(data, []byte{0xEF, 0xBB, 0xBF})
	lines := bytes.Split(data, []byte{'\n'})
	for i := range lines {
		lines[i] = bytes.TrimSuffix(lines[i], []byte{'\r'})
	}
	return lines
}

func refCellOK(cell []byte) bool {
	v, err := strconv.ParseFloat(string(bytes.TrimSpace(cell)), 64)
	return err == nil && !math.IsNaN(v) && !math.IsInf(v, 0) && math.Abs(v) <= MaxValue // MaxValue: see checkValue
}

// checkPositioned fails unless every leaf of err is a *ParseError naming
// path, with a line within the input (or 0).
func checkPositioned(t *testing.T, err error, path string, nLines int) []*ParseError {
	t.Helper()
	var out []*ParseError
	for _, e := range flatten(err) {
		pe, ok := e.(*ParseError)
		if !ok {
			t.Fatalf("error without a position: %T %v", e, e)
		}
		if pe.Path != path || pe.Line < 0 || pe.Column < 0 || pe.Line > nLines+1 {
			t.Fatalf("bad position %s:%d:%d (input has %d lines): %v", pe.Path, pe.Line, pe.Column, nLines, pe)
		}
		if !strings.HasPrefix(pe.Error(), path) {
			t.Fatalf("message does not start with the file: %q", pe.Error())
		}
		out = append(out, pe)
	}
	return out
}

func FuzzParseSeries(f *testing.F) {
	for p, b := range corpusFiles(f, func(n string) bool {
		return strings.HasSuffix(n, "_timeseries.tsv") || strings.HasSuffix(n, "_timeseries.csv")
	}) {
		f.Add(b, strings.HasSuffix(p, ".csv"))
	}
	for _, s := range []string{"", "a\tb\n", "a\tb\n1\t2\n", "a,b\n1,2\r\n3,4", "\xEF\xBB\xBFa\tb\r\n1\t2\r\n",
		"\xFF\xFEa\x00", "a\tb\n1\t2\n\n3\t4\n", "a\tb\n1e400\t-0\n", " a \t b \n 0x1p-2 \t 1_0\n", "1\t2\n3\t4\n"} {
		f.Add([]byte(s), false)
	}
	f.Fuzz(func(t *testing.T, data []byte, comma bool) {
		delim := byte('\t')
		if comma {
			delim = ','
		}
		const path = "sub-x_timeseries.tsv"
		sf, err := ParseSeries(path, bytes.NewReader(data), delim)
		lines := refLines(data)
		if err != nil {
			if sf != nil {
				t.Fatal("a series and an error together")
			}
			pes := checkPositioned(t, err, path, len(lines))
			if len(pes) > maxProblemsPerFile+1 {
				t.Fatalf("%d problems reported, at most %d expected", len(pes), maxProblemsPerFile+1)
			}
			// Positions agree with the reference reading.
			header := strings.Split(string(lines[0]), string(delim))
			for _, pe := range pes {
				if pe.Line < 2 || pe.Line > len(lines) {
					continue
				}
				cells := bytes.Split(lines[pe.Line-1], []byte{delim})
				switch {
				case errors.Is(pe, ErrNonNumeric):
					if pe.Column < 1 || pe.Column > len(cells) || refCellOK(cells[pe.Column-1]) {
						t.Fatalf("%v: the reference reads cell %d of %q as a finite number", pe, pe.Column, lines[pe.Line-1])
					}
				case errors.Is(pe, ErrRagged):
					if len(cells) == len(header) {
						t.Fatalf("%v: the reference counts %d cells, as many as the header", pe, len(cells))
					}
				}
			}
			return
		}
		y := sf.Series
		if y.P < 2 || y.T < 1 || len(y.Data) != y.T*y.P || len(sf.Regions) != y.P {
			t.Fatalf("accepted a %dx%d series with %d values and %d regions", y.T, y.P, len(y.Data), len(sf.Regions))
		}
		seen := map[string]bool{}
		for _, r := range sf.Regions {
			if r == "" || r != strings.TrimSpace(r) || seen[r] {
				t.Fatalf("region name %q empty, untrimmed or repeated", r)
			}
			seen[r] = true
		}
		// The reference: the header, then every non-blank line one time
		// point, cells parsed by strconv.ParseFloat.
		var ref []float64
		for _, l := range lines[1:] {
			if len(bytes.TrimSpace(l)) == 0 {
				continue
			}
			for _, c := range bytes.Split(l, []byte{delim}) {
				v, err := strconv.ParseFloat(string(bytes.TrimSpace(c)), 64)
				if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
					t.Fatalf("accepted cell %q that the reference refuses", c)
				}
				ref = append(ref, v)
			}
		}
		if len(ref) != len(y.Data) {
			t.Fatalf("%d values, the reference reads %d", len(y.Data), len(ref))
		}
		for i := range ref {
			if math.Float64bits(ref[i]) != math.Float64bits(y.Data[i]) {
				t.Fatalf("value %d = %v, the reference reads %v", i, y.Data[i], ref[i])
			}
		}
		// Round trip: written back out, the table reads the same.
		var buf bytes.Buffer
		buf.WriteString(strings.Join(sf.Regions, string(delim)) + "\n")
		for i := 0; i < y.T; i++ {
			for j := 0; j < y.P; j++ {
				if j > 0 {
					buf.WriteByte(delim)
				}
				buf.WriteString(strconv.FormatFloat(y.At(i, j), 'g', -1, 64))
			}
			buf.WriteByte('\n')
		}
		again, err := ParseSeries(path, &buf, delim)
		if err != nil {
			t.Fatalf("round trip refused: %v", err)
		}
		if strings.Join(again.Regions, "\x00") != strings.Join(sf.Regions, "\x00") || len(again.Series.Data) != len(y.Data) {
			t.Fatal("round trip changed the table's shape")
		}
		for i, v := range again.Series.Data {
			if math.Float64bits(v) != math.Float64bits(y.Data[i]) {
				t.Fatalf("round trip changed value %d: %v -> %v", i, y.Data[i], v)
			}
		}
	})
}

func FuzzParseParticipants(f *testing.F) {
	for p, b := range corpusFiles(f, func(n string) bool { return strings.HasPrefix(n, "participants.") }) {
		f.Add(b, strings.HasSuffix(p, ".csv"))
	}
	for _, s := range []string{"", "participant_id\n", "participant_id\tage\nsub-1\t2\n01\tn/a\n", "participant_id,group\r\n1,A\r\n2,\r\n",
		"participant_id\tx\tX\n", "participant_id\tsubject_id\na\tb\n", "\xEF\xBB\xBFparticipant_id\tscore\nsub-a\t1.5\nsub-b\t2\nsub-c\tNaN\n",
		"participant_id\tage\nsub-1\t2\nsub-1\t3\n", "participant_id\tage\n1\t2\n1\t3\t4\n\n"} {
		f.Add([]byte(s), false)
	}
	f.Fuzz(func(t *testing.T, data []byte, comma bool) {
		delim := byte('\t')
		if comma {
			delim = ','
		}
		const path = "participants.tsv"
		p, err := ParseParticipants(path, bytes.NewReader(data), delim)
		lines := refLines(data)
		if err != nil {
			if p != nil {
				t.Fatal("participants and an error together")
			}
			checkPositioned(t, err, path, len(lines))
			return
		}
		rows := 0
		for _, l := range lines[1:] {
			if len(bytes.TrimSpace(l)) > 0 {
				rows++
			}
		}
		if len(p.IDs) != rows || rows == 0 {
			t.Fatalf("%d participants accepted, the reference counts %d non-blank rows", len(p.IDs), rows)
		}
		names := map[string]bool{"participant_id": true}
		for _, c := range p.Covariates {
			lc := strings.ToLower(c.Name)
			if c.Name == "" || names[lc] || lc == "subject_id" || lc == "analysis_id" {
				t.Fatalf("covariate name %q empty, repeated or reserved", c.Name)
			}
			names[lc] = true
		}
		seen := map[string]bool{}
		for _, id := range p.IDs {
			if seen[id] || !strings.HasPrefix(id, "sub-") || p.Lines[id] < 2 || p.Lines[id] > len(lines) {
				t.Fatalf("participant %q repeated, unprefixed or at line %d", id, p.Lines[id])
			}
			seen[id] = true
			vals := p.Values[id]
			if len(vals) != len(p.Covariates) {
				t.Fatalf("%s has %d values for %d covariates", id, len(vals), len(p.Covariates))
			}
			for c, v := range vals {
				ok := v == nil
				switch p.Covariates[c].Type {
				case "BIGINT":
					_, ok2 := v.(int64)
					ok = ok || ok2
				case "DOUBLE":
					x, ok2 := v.(float64)
					ok = ok || (ok2 && !math.IsNaN(x) && !math.IsInf(x, 0))
				case "VARCHAR":
					_, ok2 := v.(string)
					ok = ok || ok2
				}
				if !ok {
					t.Fatalf("%s column %s (%s) holds %T %v", id, p.Covariates[c].Name, p.Covariates[c].Type, v, v)
				}
			}
		}
		// Round trip: written back out, the sheet reads the same.
		var buf bytes.Buffer
		buf.WriteString("participant_id")
		for _, c := range p.Covariates {
			buf.WriteString(string(delim) + c.Name)
		}
		buf.WriteByte('\n')
		for _, id := range p.IDs {
			buf.WriteString(id)
			for _, v := range p.Values[id] {
				buf.WriteByte(delim)
				switch x := v.(type) {
				case nil:
					buf.WriteString("n/a")
				case int64:
					buf.WriteString(strconv.FormatInt(x, 10))
				case float64:
					buf.WriteString(strconv.FormatFloat(x, 'e', -1, 64)) // keeps DOUBLE: never reads as an integer
				case string:
					buf.WriteString(x)
				}
			}
			buf.WriteByte('\n')
		}
		again, err := ParseParticipants(path, &buf, delim)
		if err != nil {
			t.Fatalf("round trip refused: %v\n%q", err, buf.String())
		}
		if strings.Join(again.IDs, "\x00") != strings.Join(p.IDs, "\x00") || len(again.Covariates) != len(p.Covariates) {
			t.Fatal("round trip changed the participants or the columns")
		}
		for c := range p.Covariates {
			if again.Covariates[c] != p.Covariates[c] {
				t.Fatalf("round trip changed column %d: %+v -> %+v", c, p.Covariates[c], again.Covariates[c])
			}
		}
		for _, id := range p.IDs {
			for c, v := range p.Values[id] {
				if w := again.Values[id][c]; w != v {
					t.Fatalf("round trip changed %s column %d: %#v -> %#v", id, c, v, w)
				}
			}
		}
	})
}
