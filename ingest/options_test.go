package ingest

import (
	"encoding/json"
	"strings"
	"testing"
)

// Parameters stored by older analyses use the earlier names of two
// settings: the boolean fitting-sample key and the distances "sqeuclidean"
// and "cityblock". They must read as the current fit_sample and distance
// names, so that --states-from compares like with like.
func TestOptionsReadOlderParameters(t *testing.T) {
	for _, tc := range []struct {
		stored           string
		distance, sample string
	}{
		{`{"distance":"sqeuclidean","` + olderPeakKey + `":true}`, "euclidean", "peaks"},
		{`{"distance":"cityblock","` + olderPeakKey + `":false}`, "manhattan", "all"},
		{`{"distance":"manhattan","fit_sample":"all"}`, "manhattan", "all"},
		{`{"distance":"euclidean","fit_sample":"peaks"}`, "euclidean", "peaks"},
	} {
		var o Options
		if err := json.Unmarshal([]byte(tc.stored), &o); err != nil {
			t.Fatalf("%s: %v", tc.stored, err)
		}
		if o.Distance != tc.distance || o.FitSample != tc.sample {
			t.Errorf("%s: distance %q fit_sample %q, want %q %q", tc.stored, o.Distance, o.FitSample, tc.distance, tc.sample)
		}
	}
	var o Options
	if err := json.Unmarshal([]byte(`{"`+olderPeakKey+`":"yes"}`), &o); err == nil {
		t.Error("a non-boolean older fitting-sample value was accepted")
	}
}

// The current parameters JSON carries fit_sample and never the older key.
func TestOptionsWriteCurrentNames(t *testing.T) {
	b, err := json.Marshal(Defaults())
	if err != nil {
		t.Fatal(err)
	}
	s := string(b)
	if !strings.Contains(s, `"fit_sample":"peaks"`) || !strings.Contains(s, `"distance":"euclidean"`) || strings.Contains(s, olderPeakKey) {
		t.Errorf("stored parameters %s", s)
	}
}

// The older distance names are refused on the command line with the
// current name; an unknown fitting sample is refused with the choices.
func TestOptionsCheckNames(t *testing.T) {
	o := Defaults()
	o.Input = "x"
	o.Distance = "cityblock"
	if err := o.Check(); err == nil || !strings.Contains(err.Error(), "now manhattan") {
		t.Errorf("--distance cityblock: %v", err)
	}
	o.Distance = "euclidean"
	o.FitSample = "some"
	if err := o.Check(); err == nil || !strings.Contains(err.Error(), "want peaks") {
		t.Errorf("--fit-sample: %v", err)
	}
}

// TestWindowFor checks the default window rule w = ceil(1/(f_min TR))
// (Leonardi and Van De Ville, 2015; docs/methods.md §2) on values worked by
// hand, including a TR at which 1/(f_min TR) is a whole number.
func TestWindowFor(t *testing.T) {
	for _, c := range []struct {
		tr, fmin float64
		want     int
	}{
		{2, 0.01, 50}, {1.4, 0.01, 72}, {1, 0.01, 100}, {0.8, 0.01, 125}, {1.5, 0.01, 67}, {3, 0.01, 34}, {2, 0.008, 63}, {50, 0.1, 2},
	} {
		if got := WindowFor(c.tr, c.fmin); got != c.want {
			t.Errorf("TR %v f_min %v: window %d, want %d", c.tr, c.fmin, got, c.want)
		}
	}
	if got := TaperSigmaFor(72); got != 7.2 {
		t.Errorf("taper sigma for 72 points: %v, want 7.2", got)
	}
}
