package ingest

import (
	"fmt"
	"math"
	"slices"
	"strings"
)

// Plausible repetition times, in seconds. Resting-state fMRI sequences run
// from fast multiband acquisitions of a few hundred milliseconds to
// conventional ones of a few seconds; 0.1 s and 10 s bound that with room
// on both sides (common practice, no source). A value outside is refused:
// a TR of 800 is almost surely milliseconds, and windows, dwell times and
// every time axis would be off by a factor of 1000 without a word.
const (
	MinTR = 0.1
	MaxTR = 10.0
)

// CheckTR checks one repetition time in seconds: a finite positive number
// within [MinTR, MaxTR]. what names its origin for the message ("--tr",
// a sidecar path, a header). A value that reads as milliseconds (its
// thousandth is plausible) gets the value in seconds suggested.
func CheckTR(tr float64, what string) error {
	switch {
	case math.IsNaN(tr) || math.IsInf(tr, 0):
		return fmt.Errorf("%s: repetition time %v is not a finite number of seconds", what, tr)
	case tr <= 0:
		return fmt.Errorf("%s: repetition time %v is not a positive number of seconds", what, tr)
	case tr > MaxTR && tr/1000 >= MinTR && tr/1000 <= MaxTR:
		return fmt.Errorf("%s: repetition time %g s is outside the plausible %g-%g s; it looks like milliseconds: did you mean %g (seconds)?", what, tr, MinTR, MaxTR, tr/1000)
	case tr < MinTR || tr > MaxTR:
		return fmt.Errorf("%s: repetition time %g s is outside the plausible %g-%g s; give it in seconds", what, tr, MinTR, MaxTR)
	}
	return nil
}

// sameTR reports whether two repetition times are equal up to the
// rounding of a sidecar or header (one part in 10^4).
func sameTR(a, b float64) bool { return math.Abs(a-b) <= 1e-4*math.Max(a, b) }

// windowPoints is the window and step of one series, in its own time
// points: --window and --step as given, or, with --window-seconds (and
// --step-seconds), the seconds divided by the series' TR and rounded to the
// nearest point (a step at least 1 point).
func windowPoints(o Options, tr float64) (window, step int) {
	window, step = o.Window, o.Step
	if o.WindowSeconds > 0 && tr > 0 {
		window = int(math.Round(o.WindowSeconds / tr))
		if o.StepSeconds > 0 {
			step = max(1, int(math.Round(o.StepSeconds/tr)))
		}
	}
	return window, step
}

// mixedTR returns a refusal listing the distinct repetition times of the
// cohort with their files, or nil when every series has one TR (or the
// windows are given in seconds, which makes a mixed cohort comparable).
func mixedTR(o Options, window int, inputs []SubjectInput) error {
	if o.WindowSeconds > 0 || len(inputs) == 0 {
		return nil
	}
	var trs []float64
	files := map[int][]string{}
	for _, in := range inputs {
		i := slices.IndexFunc(trs, func(t float64) bool { return sameTR(t, in.TR) })
		if i < 0 {
			trs = append(trs, in.TR)
			i = len(trs) - 1
		}
		files[i] = append(files[i], in.Rel)
	}
	if len(trs) < 2 {
		return nil
	}
	var b strings.Builder
	what := fmt.Sprintf("--window %d counts", o.Window)
	if o.Window == 0 { // the default window: no --window was given
		what = fmt.Sprintf("the default window (%d time points: 1/--min-freq at the shortest TR) counts", window)
	}
	fmt.Fprintf(&b, "the series have %d different repetition times, and %s time points, so windows would last different times at different TRs (states and dwell times would differ by site, not by subject):", len(trs), what)
	for i, tr := range trs {
		f := files[i]
		more := ""
		if len(f) > 3 {
			more = fmt.Sprintf(" and %d more", len(f)-3)
			f = f[:3]
		}
		fmt.Fprintf(&b, "\n  TR %g s: %d series: %s%s", tr, len(files[i]), strings.Join(f, ", "), more)
	}
	fmt.Fprintf(&b, "\ngive the window in seconds instead (--window-seconds S, and --step-seconds S for the step): each series then gets round(S / TR) of its own time points, recorded per series in the inputs table")
	return &UsageError{Err: fmt.Errorf("%s", b.String())}
}

// windowDurations warns, under --window-seconds, when rounding to whole
// time points leaves the windows or steps of different series lasting
// different times (by more than 5%): transition probabilities are per
// step, so steps of different lengths are not comparable.
func windowDurations(o Options, inputs []SubjectInput) []string {
	if o.WindowSeconds <= 0 || len(inputs) == 0 {
		return nil
	}
	var out []string
	for _, part := range []struct {
		name string
		dur  func(SubjectInput) float64
	}{
		{"window", func(in SubjectInput) float64 { return float64(in.Window) * in.TR }},
		{"step", func(in SubjectInput) float64 { return float64(in.Step) * in.TR }},
	} {
		lo, hi := inputs[0], inputs[0]
		for _, in := range inputs {
			if part.dur(in) < part.dur(lo) {
				lo = in
			}
			if part.dur(in) > part.dur(hi) {
				hi = in
			}
		}
		if part.dur(hi) > 1.05*part.dur(lo) {
			out = append(out, fmt.Sprintf("the %s lasts %g s in %s (TR %g s) but %g s in %s (TR %g s) after rounding to whole time points; choose seconds that are a multiple of every TR to make them equal",
				part.name, roundMicro(part.dur(lo)), lo.Rel, lo.TR, roundMicro(part.dur(hi)), hi.Rel, hi.TR))
		}
	}
	return out
}

// roundMicro rounds seconds to microseconds for messages (8 x 0.8 prints
// 6.4, not 6.4000000000000004).
func roundMicro(s float64) float64 { return math.Round(s*1e6) / 1e6 }
