package ingest

import (
	"bytes"
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"codeberg.org/sbinet/npyio"
	"gonum.org/v1/gonum/mat"
)

// The .npy fixtures were written by numpy 1.24 (np.save) from
// testdata/nifti/make_fixture.py; expected_npy.tsv holds the values numpy
// reads back (np.load), one per (file, time point, column).
const npyDir = "../testdata/npy"

func TestNpyMatchesNumpy(t *testing.T) {
	_, rows := readExpected(t, filepath.Join(npyDir, "expected_npy.tsv"))
	files := map[string]*SeriesFile{}
	for _, r := range rows {
		sf := files[r[0]]
		if sf == nil {
			var err error
			sf, err = ReadNpyFile(filepath.Join(npyDir, r[0]))
			if err != nil {
				t.Fatal(err)
			}
			files[r[0]] = sf
			if got := strings.Join(sf.Regions, ","); got != "region_001,region_002,region_003" {
				t.Errorf("%s: generated names %s", r[0], got)
			}
		}
		tt, _ := strconv.Atoi(r[1])
		j, _ := strconv.Atoi(r[2])
		want := atof(t, r[3])
		// Exact: float32 widens to float64 exactly, and numpy printed the
		// float64 value with repr (shortest round-trip digits).
		if got := sf.Series.At(tt-1, j-1); got != want {
			t.Errorf("%s [%d,%d] = %v, numpy %v", r[0], tt, j, got, want)
		}
	}
	if len(files) != 3 {
		t.Errorf("%d files compared, want 3 (C float64, Fortran float32, big-endian float64)", len(files))
	}
	for name, sf := range files {
		if sf.Series.T != 7 || sf.Series.P != 3 {
			t.Errorf("%s: %d x %d, numpy wrote 7 x 3", name, sf.Series.T, sf.Series.P)
		}
	}
}

// npyBytes writes v with npyio (C order) and returns the file's bytes.
func npyBytes(t *testing.T, v any) []byte {
	t.Helper()
	var buf bytes.Buffer
	if err := npyio.Write(&buf, v); err != nil {
		t.Fatal(err)
	}
	return buf.Bytes()
}

func TestNpyErrors(t *testing.T) {
	tmp := t.TempDir()
	good, err := os.ReadFile(filepath.Join(npyDir, "c_f64.npy"))
	if err != nil {
		t.Fatal(err)
	}
	nan := mat.NewDense(3, 2, []float64{1, 2, 3, math.NaN(), 5, 6})
	huge := bytes.Clone(good)
	huge[6] = 2
	huge = append(huge[:8], append(binary.LittleEndian.AppendUint32(nil, 1<<30), huge[10:]...)...)
	noNewline := bytes.Clone(good)
	noNewline[9+int(binary.LittleEndian.Uint16(good[8:]))] = ' '
	cases := []struct {
		name string
		b    []byte
		want error
		msg  string
	}{
		{"empty", nil, ErrNpy, "magic"},
		{"text", []byte("a,b\n1,2\n"), ErrNpy, "magic"},
		{"cut in the data", good[:len(good)-5], ErrTruncated, "needs 168 data bytes, the file has 163"},
		{"extra bytes", append(bytes.Clone(good), 0, 0, 0, 0, 0, 0, 0, 0), ErrNpy, "8 bytes follow"},
		{"cut in the header", good[:40], ErrNpy, "damaged or cut short"},
		{"header length 1 GiB", huge, ErrNpy, "damaged or cut short"},
		{"header without newline", noNewline, ErrNpy, "damaged or cut short"},
		{"version 9", append(append([]byte{}, good[:6]...), append([]byte{9, 0}, good[8:]...)...), ErrNpy, "version 9.0"},
		{"int64 values", npyBytes(t, []int64{1, 2, 3, 4}), ErrNpy, "dtype <i8"},
		{"one dimension", npyBytes(t, []float64{1, 2, 3}), ErrNpy, "shape [3]"},
		{"one column", npyBytes(t, mat.NewDense(4, 1, []float64{1, 2, 3, 4})), ErrNpy, "two regions"},
		{"NaN", npyBytes(t, nan), ErrNonNumeric, "row 1, column 1 (both from 0): cell is not a finite number: NaN"},
		{"1e308", npyBytes(t, mat.NewDense(2, 2, []float64{1, 2, 1e308, 4})), ErrNonNumeric, "row 1, column 0 (both from 0): cell is not a finite number: 1e+308 is larger in magnitude than 1e+100"},
		// Crafted shapes (issue 13, class 5): products that overflow int64
		// (2^62 x 4 x 8 wraps to 0), negative and huge dimensions.
		{"shape overflows", npyHeader("<f8", "(4611686018427387904, 4)", 168), ErrNpy, "larger than any file can hold (this one has 168 data bytes)"},
		{"shape overflows to the file size", npyHeader("<f8", "(2305843009213693954, 2)", 32), ErrNpy, "larger than any file can hold"},
		{"shape wraps negative", npyHeader("<f4", "(3074457345618258603, 3)", 36), ErrNpy, "larger than any file can hold"},
		{"shape negative", npyHeader("<f8", "(-3, 2)", 48), ErrNpy, ""},
		{"shape huge", npyHeader("<f8", "(9223372036854775807, 9223372036854775807)", 64), ErrNpy, ""},
		{"shape beyond int64", npyHeader("<f8", "(99999999999999999999999, 2)", 64), ErrNpy, ""},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			p := filepath.Join(tmp, strings.ReplaceAll(c.name, " ", "_")+".npy")
			if err := os.WriteFile(p, c.b, 0o644); err != nil {
				t.Fatal(err)
			}
			_, err := ReadNpyFile(p)
			if err == nil {
				t.Fatal("accepted")
			}
			if !errors.Is(err, c.want) || !strings.Contains(err.Error(), p) || !strings.Contains(err.Error(), c.msg) {
				t.Errorf("error %q: want %v naming the file and saying %q", err, c.want, c.msg)
			}
		})
	}
}

// npyHeader writes a version 1.0 .npy file with the header fields given
// as text (as a crafted file would hold them) and n zero data bytes.
func npyHeader(descr, shape string, n int) []byte {
	h := fmt.Sprintf("{'descr': '%s', 'fortran_order': False, 'shape': %s, }", descr, shape)
	for (10+len(h)+1)%64 != 0 {
		h += " "
	}
	h += "\n"
	b := append([]byte("\x93NUMPY\x01\x00"), byte(len(h)), byte(len(h)>>8))
	b = append(b, h...)
	return append(b, make([]byte, n)...)
}

// FuzzReadNpy: any bytes give a series or an error, never a crash, and a
// series has T x p finite values.
func FuzzReadNpy(f *testing.F) {
	for _, name := range []string{"c_f64.npy", "fortran_f32.npy", "be_f8.npy"} {
		b, err := os.ReadFile(filepath.Join(npyDir, name))
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
	// Crafted shapes whose sizes overflow (issue 13, class 5).
	f.Add(npyHeader("<f8", "(2305843009213693954, 2)", 32))
	f.Add(npyHeader("<f4", "(3074457345618258603, 3)", 36))
	f.Add(npyHeader("<f8", "(-3, 2)", 48))
	f.Add(npyHeader(">f8", "(9223372036854775807, 9223372036854775807)", 64))
	dir := f.TempDir()
	f.Fuzz(func(t *testing.T, b []byte) {
		p := filepath.Join(dir, "x.npy")
		if err := os.WriteFile(p, b, 0o644); err != nil {
			t.Fatal(err)
		}
		sf, err := ReadNpyFile(p)
		if err != nil {
			return
		}
		if len(sf.Series.Data) != sf.Series.T*sf.Series.P || len(sf.Regions) != sf.Series.P {
			t.Fatalf("%d values for %d x %d", len(sf.Series.Data), sf.Series.T, sf.Series.P)
		}
		for _, v := range sf.Series.Data {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				t.Fatal("non-finite value accepted")
			}
		}
	})
}
