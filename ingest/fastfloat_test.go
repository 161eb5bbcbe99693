package ingest

import (
	"math"
	"math/rand/v2"
	"strconv"
	"testing"
)

// parseDecimal must return exactly what strconv.ParseFloat returns (the
// standard library's correctly rounded parser is the reference) whenever it
// accepts a cell, and must decline anything ParseFloat rejects.
func checkParseDecimal(t *testing.T, s string) {
	t.Helper()
	got, ok := parseDecimal([]byte(s))
	want, err := strconv.ParseFloat(s, 64)
	if !ok {
		return
	}
	if err != nil {
		t.Fatalf("parseDecimal(%q) = %v, but ParseFloat rejects it: %v", s, got, err)
	}
	if math.Float64bits(got) != math.Float64bits(want) {
		t.Fatalf("parseDecimal(%q) = %v (%x), ParseFloat %v (%x)", s, got, math.Float64bits(got), want, math.Float64bits(want))
	}
}

func TestParseDecimal(t *testing.T) {
	for _, tc := range []struct {
		s  string
		ok bool // whether the fast path should take it
	}{
		{"0", true}, {"-0", true}, {"+7", true}, {"1000.123", true}, {"-999.8765", true},
		{".5", true}, {"5.", true}, {"1e5", true}, {"1.5E-7", true}, {"-3.14159e+02", true},
		{"0.000000000000000001234", true}, {"123456789012345", true},
		{"1234567890123456", false}, // 16 significant digits: left to strconv
		{"1e23", false}, {"1e-23", false}, {"0.1e-22", false},
		{"", false}, {"-", false}, {".", false}, {"e5", false}, {"1e", false}, {"1e+", false},
		{"NaN", false}, {"Inf", false}, {"0x1p3", false}, {"1_000", false}, {"1.2.3", false}, {"12a", false},
	} {
		_, ok := parseDecimal([]byte(tc.s))
		if ok != tc.ok {
			t.Errorf("parseDecimal(%q) ok = %v, want %v", tc.s, ok, tc.ok)
		}
		checkParseDecimal(t, tc.s)
	}
	// Values as series writers print them: shortest representation, 'g'
	// with 7 significant digits (WriteCohort), fixed and exponent forms.
	r := rand.New(rand.NewPCG(8, 8))
	for range 200000 {
		v := r.NormFloat64() * math.Pow(10, float64(r.IntN(12)-6))
		if r.IntN(4) == 0 {
			v += 1000
		}
		for _, s := range []string{
			strconv.FormatFloat(v, 'g', -1, 64), strconv.FormatFloat(v, 'g', 7, 64),
			strconv.FormatFloat(v, 'f', r.IntN(10), 64), strconv.FormatFloat(v, 'e', r.IntN(16), 64),
			strconv.FormatFloat(float64(float32(v)), 'g', -1, 32),
		} {
			checkParseDecimal(t, s)
		}
	}
}

func FuzzParseDecimal(f *testing.F) {
	for _, s := range []string{"1000.123", "-1.5e-7", ".5", "1e22", "0.000001", "12345678901234567890"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		checkParseDecimal(t, s)
	})
}
