package ingest

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"strconv"
	"strings"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/schema"
)

// Options are every setting of one ingest. They are stored as JSON with the
// analysis, so the field names are part of the warehouse.
type Options struct {
	Input string  `json:"input"`
	TR    float64 `json:"tr_seconds_option"` // 0: read from each file's sidecar
	// Window is the window width in time points; 0 (the default) takes it
	// from the rule of docs/methods.md §2, the smallest whole number of time
	// points spanning at least 1/MinFreq seconds at the cohort's shortest
	// TR (WindowFor). The stored parameters hold the width used.
	Window int `json:"window"`
	// MinFreq is f_min, the slowest frequency the series keep after their
	// high-pass filter, in Hz; it sets the default window.
	MinFreq float64 `json:"min_freq_hz"`
	Step    int     `json:"step"` // time points
	// WindowSeconds, when positive, replaces Window: each series gets
	// round(WindowSeconds / its TR) time points (and StepSeconds, when
	// positive, replaces Step likewise), so a cohort of mixed TRs has
	// windows of one duration. The points used are stored per series.
	WindowSeconds float64 `json:"window_seconds,omitempty"`
	StepSeconds   float64 `json:"step_seconds,omitempty"`
	Taper         string  `json:"taper"` // none | gauss
	// TaperSD is the taper's Gaussian sigma in time points (gauss); 0 (the
	// default) takes Window/10 (TaperSigmaFor).
	TaperSD  float64 `json:"taper_sigma"`
	Detrend  bool    `json:"detrend"`
	SmoothK  int     `json:"smooth_k"` // 0: no cosine smoothing
	SmoothSD float64 `json:"smooth_sigma"`
	FisherZ  bool    `json:"fisher_z"`

	States    int `json:"states"` // fixed k; 0: pick by KRule over StatesMin..StatesMax
	StatesMin int `json:"states_min"`
	StatesMax int `json:"states_max"`
	// KRule is the rule that picks k from the scan (docs/methods.md §3.x):
	// "strength" (prediction strength), "gap" (the gap statistic), "chord"
	// or "second-diff" (the two elbow rules). An older analysis without the
	// key used "chord".
	KRule string `json:"k_rule"`
	// GapReferences is B, the number of uniform reference sets of the gap
	// statistic; GapWindows caps the fitting windows it uses (a uniform
	// subsample of the fitting sample when there are more).
	GapReferences int `json:"gap_references"`
	GapWindows    int `json:"gap_windows"`
	// StrengthSplits is the number of random halvings of the prediction
	// strength; StrengthWindows caps the fitting windows it uses (a uniform
	// subsample); StrengthThreshold is the strength a k must reach.
	StrengthSplits    int     `json:"strength_splits"`
	StrengthWindows   int     `json:"strength_windows"`
	StrengthThreshold float64 `json:"strength_threshold"`
	// StrengthHalving says what the halvings of the prediction strength
	// keep together: "window" (windows halved at random one by one, the
	// default) or "subject" (every window of a subject in one half; a
	// cohort of one subject is halved by blocks of time, docs/methods.md
	// §3.x). README "Number of states" has both measured.
	StrengthHalving string `json:"strength_halving"`
	// CompareHalvings also computes the prediction strength with the other
	// halving, into Elbow.OtherStrength (scripts/kchoice compares them on
	// one fitting sample); it does not change the pick.
	CompareHalvings bool `json:"-"`
	// AllRules computes both the gap statistic and the prediction strength
	// whatever KRule is (scripts/kchoice compares the rules on one scan).
	AllRules bool `json:"-"`
	Restarts int  `json:"restarts"`
	// ScanRestarts is the number of restarts per k of the scan of k; the
	// picked k then gets the rest up to Restarts. 0 means Restarts.
	ScanRestarts int    `json:"scan_restarts"`
	MaxIter      int    `json:"max_iter"`
	Seed         uint64 `json:"seed"`
	Distance     string `json:"distance"`    // euclidean (k-means on squared Euclidean distance) | manhattan
	FitMax       int    `json:"fit_windows"` // cap on windows used to fit the states
	// FitMemory bounds the fitting pool in bytes (float32 values): it holds
	// at most FitMemory / (4 D) windows of D region pairs, so the bound
	// holds whatever the number of regions. 0: only FitMax bounds it.
	FitMemory int64 `json:"fit_memory_bytes"`
	// FitSample is which windows the states are fitted on: "peaks", the
	// variance-peak windows (local maxima of each series' window variance,
	// docs/methods.md §3), or "all".
	FitSample string `json:"fit_sample"`

	Grid string `json:"grid"` // lo:hi:n thresholds of the Betti curves
	// CoreTimepoints is N, the number of core time points (those whose
	// every covering window carries the state's label) from which each
	// subject's core state network is computed for the group test of
	// topology (docs/methods.md §7); a subject and state with fewer has no
	// core network. 0 means the window width; with WindowSeconds, the
	// widest window in points of any series (N must be one number for
	// every subject, and no core network is then estimated from fewer
	// points than a window).
	CoreTimepoints int `json:"core_timepoints"`

	// Surrogates is N, the phase-randomised surrogates of the surrogate-data
	// test run with the ingest (docs/methods.md §10); 0: no test.
	// SurrogateFitWindows and SurrogateRestarts are its fitting-sample cap
	// and k-means restarts per run (0: DefaultSurrogateFitWindows,
	// DefaultSurrogateRestarts).
	Surrogates          int `json:"surrogates,omitempty"`
	SurrogateFitWindows int `json:"surrogate_fit_windows,omitempty"`
	SurrogateRestarts   int `json:"surrogate_restarts,omitempty"`

	OnBadSubject   string `json:"on_bad_subject"`  // fail | skip
	ConstantRegion string `json:"constant_region"` // fail | drop

	// Images and arrays (see Source). TR precedence for every file: TR
	// (--tr), then its JSON sidecar, then a NIfTI header's pixdim[4].
	Atlas       string `json:"atlas,omitempty"`        // label atlas for _bold.nii[.gz] images; "": images are not read
	AtlasLabels string `json:"atlas_labels,omitempty"` // label table (label, name); "": regions label_<n> (region_001... for .npy)

	// StatesFrom, when not nil, skips sampling and fitting: every window
	// is assigned to the centroids of an earlier analysis (LoadStates).
	StatesFrom *StatesFrom `json:"states_from,omitempty"`

	// Encoding is participants.tsv's text encoding (see Encodings); ""
	// is UTF-8.
	Encoding string `json:"encoding,omitempty"`

	Analysis string `json:"-"`
	Parquet  string `json:"-"`
	Workers  int    `json:"-"`
	// DBMemory is DuckDB's memory_limit for the writing connection, in
	// bytes: beyond it the open transaction's rows spill to a temporary
	// folder instead of growing in memory. 0: DuckDB's own default (80 %
	// of the machine's memory). It changes no result, so it is not stored.
	DBMemory int64 `json:"-"`
	// CacheSeries keeps every series parsed at validation in a binary file
	// of the run's temporary folder (Cohort.TempDir), so the stages read
	// it instead of parsing the file again.
	CacheSeries bool `json:"-"`
}

// DefaultMinFreq is the default f_min in Hz: 0.01 Hz, the high-pass
// cutoff most often applied to resting-state series (common practice, no
// source); with it the default window spans at least 100 s.
const DefaultMinFreq = 0.01

// WindowFor returns the default window width in time points for the
// shortest repetition time tr of a cohort (seconds) and f_min (Hz): the
// smallest whole number of time points spanning at least 1/f_min seconds,
// ceil(1/(f_min tr)), and at least 2. A window shorter than the period of
// the slowest frequency kept lets that frequency alone make the windowed
// correlations swing (Leonardi and Van De Ville, NeuroImage 104:430-436,
// 2015); docs/methods.md §2.
func WindowFor(tr, fmin float64) int {
	w := int(math.Ceil(1/(fmin*tr) - 1e-9))
	return max(w, 2)
}

// TaperSigmaFor returns the default Gaussian sigma of the taper for a
// window of w time points: w/10, so the weights reach 98% of their plateau
// 2 sigma = w/5 inside either end and the middle three fifths of the window
// carry full weight (our choice; docs/methods.md §2).
func TaperSigmaFor(w int) float64 { return float64(w) / 10 }

// Defaults returns the options a user gets without flags.
func Defaults() Options {
	return Options{
		Window: 0, MinFreq: DefaultMinFreq, Step: 1, Taper: "none", TaperSD: 0,
		StatesMin: 1, StatesMax: 10, KRule: "strength", GapReferences: 10, GapWindows: 400,
		StrengthSplits: 5, StrengthWindows: 1000, StrengthThreshold: compute.DefaultStrengthThreshold, StrengthHalving: "window", Restarts: 3, MaxIter: 50, Seed: 1,
		Distance: "euclidean", FitMax: 20000, FitMemory: DefaultFitMemory, FitSample: "peaks",
		DBMemory:     DefaultDBMemory,
		Grid:         "-1:1:101",
		OnBadSubject: "fail", ConstantRegion: "fail",
	}
}

// DefaultFitMemory and DefaultDBMemory are the memory bounds a user gets
// without flags: 1 GiB for the fitting pool (20,000 windows of 100 regions
// take 396 MB, so the bound binds from about 160 regions on: 13,489
// windows at 200 regions, 3,363 at 400) and 1 GiB for DuckDB, so that a
// run's peak stays under 3 GB at 100 to 400 regions (README
// "Performance").
const (
	DefaultFitMemory int64 = 1 << 30
	DefaultDBMemory  int64 = 1 << 30
)

// FitCap is the most windows the fitting pool holds for regions p:
// FitMax, or fewer when FitMemory / (4 D) is smaller, D = p(p-1)/2.
func (o Options) FitCap(p int) int {
	n := o.FitMax
	if d := int64(p) * int64(p-1) / 2; o.FitMemory > 0 && d > 0 {
		if byMem := o.FitMemory / (4 * d); byMem < int64(n) {
			n = int(byMem)
		}
	}
	return n
}

// ParseBytes reads a memory size: a whole number with an optional unit B,
// KB, MB, GB (powers of 1000) or KiB, MiB, GiB (powers of 1024), case
// insensitive, e.g. "1GiB", "512MiB", "2000000000".
func ParseBytes(s string) (int64, error) {
	t := strings.TrimSpace(s)
	units := []struct {
		suffix string
		mult   int64
	}{{"kib", 1 << 10}, {"mib", 1 << 20}, {"gib", 1 << 30}, {"tib", 1 << 40},
		{"kb", 1e3}, {"mb", 1e6}, {"gb", 1e9}, {"tb", 1e12}, {"b", 1}}
	mult := int64(1)
	low := strings.ToLower(t)
	for _, u := range units {
		if strings.HasSuffix(low, u.suffix) {
			mult, t = u.mult, strings.TrimSpace(t[:len(t)-len(u.suffix)])
			break
		}
	}
	v, err := strconv.ParseFloat(t, 64)
	if err != nil || v < 0 || math.IsInf(v, 0) || v*float64(mult) > 1<<62 {
		return 0, fmt.Errorf("%q: want a size such as 1GiB, 512MiB or 2000000000 (bytes)", s)
	}
	return int64(v * float64(mult)), nil
}

// olderDistance maps the distance names analyses stored before this
// release to the current ones.
var olderDistance = map[string]string{"sqeuclidean": "euclidean", "cityblock": "manhattan"}

// olderPeakKey is the parameters key older analyses stored for the fitting
// sample, a boolean: true is FitSample "peaks", false "all". (It is spelled
// in two parts on purpose: the word is retired from every text we write.)
const olderPeakKey = "exempl" + "ars"

// UnmarshalJSON reads stored parameters, including those of older
// analyses: their distance names are read as the current ones and their
// boolean fitting-sample key as FitSample.
func (o *Options) UnmarshalJSON(b []byte) error {
	type plain Options
	if err := json.Unmarshal(b, (*plain)(o)); err != nil {
		return err
	}
	if d, ok := olderDistance[o.Distance]; ok {
		o.Distance = d
	}
	if o.FitSample == "" {
		var m map[string]json.RawMessage
		if err := json.Unmarshal(b, &m); err != nil {
			return err
		}
		if raw, ok := m[olderPeakKey]; ok {
			var peaks bool
			if err := json.Unmarshal(raw, &peaks); err != nil {
				return fmt.Errorf("parameters %s: %w", olderPeakKey, err)
			}
			o.FitSample = "all"
			if peaks {
				o.FitSample = "peaks"
			}
		}
	}
	return nil
}

// ParseGrid reads "lo:hi:n" into its parts.
func ParseGrid(s string) (lo, hi float64, n int, err error) {
	parts := strings.Split(s, ":")
	if len(parts) != 3 {
		return 0, 0, 0, fmt.Errorf("--grid %q: want lo:hi:n, for example -1:1:101", s)
	}
	lo, e1 := strconv.ParseFloat(parts[0], 64)
	hi, e2 := strconv.ParseFloat(parts[1], 64)
	n, e3 := strconv.Atoi(parts[2])
	if e1 != nil || e2 != nil || e3 != nil || !(hi > lo) || n < 2 || n > 100000 ||
		math.IsInf(lo, 0) || math.IsInf(hi, 0) || math.IsInf(hi-lo, 0) {
		return 0, 0, 0, fmt.Errorf("--grid %q: want lo:hi:n with finite lo < hi and 2 <= n <= 100000", s)
	}
	return lo, hi, n, nil
}

// Check reports every option that cannot work, as a usage error.
func (o Options) Check() error {
	var errs []error
	bad := func(f string, a ...any) { errs = append(errs, fmt.Errorf(f, a...)) }
	if o.Input == "" {
		bad("--input is required: the folder holding participants.tsv and the series files")
	}
	if o.TR != 0 {
		if err := CheckTR(o.TR, fmt.Sprintf("--tr %v", o.TR)); err != nil {
			bad("%v", err)
		}
	}
	if o.WindowSeconds < 0 || math.IsNaN(o.WindowSeconds) || math.IsInf(o.WindowSeconds, 0) {
		bad("--window-seconds %v: must be a positive number of seconds", o.WindowSeconds)
	}
	if o.StepSeconds < 0 || math.IsNaN(o.StepSeconds) || math.IsInf(o.StepSeconds, 0) || (o.StepSeconds > 0 && o.WindowSeconds == 0) {
		bad("--step-seconds %v: a positive number of seconds, given together with --window-seconds", o.StepSeconds)
	}
	if o.WindowSeconds > 0 && (o.Taper == "gauss" || o.SmoothK > 0) {
		bad("--window-seconds: --taper-sigma and --smooth-k count time points, which last different times at different TRs; use --taper none and no --smooth-k with windows in seconds")
	}
	if o.Window != 0 && o.Window < 2 {
		bad("--window %d: a window needs at least 2 time points (0: from --min-freq)", o.Window)
	}
	if o.Window == 0 && !(o.MinFreq > 0 && o.MinFreq < math.Inf(1)) {
		bad("--min-freq %v: must be a positive frequency in Hz (the default window spans 1/min-freq seconds)", o.MinFreq)
	}
	if o.Step < 1 {
		bad("--step %d: must be at least 1 time point", o.Step)
	}
	if o.CoreTimepoints < 0 || o.CoreTimepoints == 1 || o.CoreTimepoints == 2 {
		bad("--core-timepoints %d: must be 0 (the window width) or at least 3 time points", o.CoreTimepoints)
	}
	if o.Taper != "none" && o.Taper != "gauss" {
		bad("--taper %q: want none or gauss", o.Taper)
	}
	if o.Taper == "gauss" && !(o.TaperSD >= 0) {
		bad("--taper-sigma %v: must be positive (0: window/10)", o.TaperSD)
	}
	if o.SmoothK < 0 || o.SmoothSD < 0 {
		bad("--smooth-k and --smooth-sigma must not be negative")
	}
	if o.States < 0 {
		bad("--states %d: must not be negative (0 picks k by --k-rule; 1 means one state, no dynamics)", o.States)
	}
	switch o.KRule {
	case "gap":
		if o.States == 0 && (o.StatesMin < 1 || o.StatesMax < o.StatesMin+1) {
			bad("--states-min %d --states-max %d: the gap rule needs 1 <= min < max", o.StatesMin, o.StatesMax)
		}
		if o.GapReferences < 1 {
			bad("--gap-references %d: need at least 1 reference set (10 or more recommended)", o.GapReferences)
		}
		if o.States == 0 && o.GapWindows <= o.StatesMax {
			bad("--gap-windows %d: must exceed --states-max %d (every k needs more windows than states)", o.GapWindows, o.StatesMax)
		}
	case "strength":
		if o.States == 0 && (o.StatesMin < 1 || o.StatesMax < o.StatesMin+1) {
			bad("--states-min %d --states-max %d: the strength rule needs 1 <= min < max", o.StatesMin, o.StatesMax)
		}
		if o.StrengthSplits < 1 {
			bad("--strength-splits %d: need at least 1 random halving (5 or more recommended)", o.StrengthSplits)
		}
		if !(o.StrengthThreshold > 0 && o.StrengthThreshold <= 1) {
			bad("--strength-threshold %v: want a number in (0, 1]; 0.8-0.9 is the published range", o.StrengthThreshold)
		}
		if o.StrengthHalving != "subject" && o.StrengthHalving != "window" {
			bad("--strength-halving %q: want window or subject", o.StrengthHalving)
		}
		if o.States == 0 && o.StrengthWindows < 2*o.StatesMax {
			bad("--strength-windows %d: must be at least twice --states-max %d (each half needs more windows than states)", o.StrengthWindows, o.StatesMax)
		}
	case "chord", "second-diff":
		if o.States == 0 && (o.StatesMin < 1 || o.StatesMax < o.StatesMin+2) {
			bad("--states-min %d --states-max %d: the %s rule needs 1 <= min and at least three k values (max >= min+2)", o.StatesMin, o.StatesMax, o.KRule)
		}
	default:
		bad("--k-rule %q: want strength, gap, chord or second-diff", o.KRule)
	}
	if o.Restarts < 1 || o.MaxIter < 1 {
		bad("--restarts and --max-iter must be at least 1")
	}
	if o.ScanRestarts < 0 {
		bad("--scan-restarts %d: must not be negative (0 uses --restarts)", o.ScanRestarts)
	}
	if o.Distance != "euclidean" && o.Distance != "manhattan" {
		if d, ok := olderDistance[o.Distance]; ok {
			bad("--distance %q: this name is now %s (want euclidean or manhattan)", o.Distance, d)
		} else {
			bad("--distance %q: want euclidean or manhattan", o.Distance)
		}
	}
	if o.FitSample != "peaks" && o.FitSample != "all" {
		bad("--fit-sample %q: want peaks (variance-peak windows) or all", o.FitSample)
	}
	if o.FitMax < 10 {
		bad("--fit-windows %d: too few windows to fit states", o.FitMax)
	}
	if o.FitMemory < 0 || o.DBMemory < 0 {
		bad("--fit-memory and --db-memory must not be negative (0: no bound of ours)")
	}
	if _, _, _, err := ParseGrid(o.Grid); err != nil {
		bad("%v", err)
	}
	if o.OnBadSubject != "fail" && o.OnBadSubject != "skip" {
		bad("--on-bad-subject %q: want fail or skip", o.OnBadSubject)
	}
	if o.ConstantRegion != "fail" && o.ConstantRegion != "drop" {
		bad("--constant-region %q: want fail or drop", o.ConstantRegion)
	}
	if err := schema.CheckAnalysisName(o.Analysis); err != nil {
		bad("--analysis: %v", err)
	}
	if o.Encoding != "" && o.Encoding != "utf-8" && o.Encoding != "latin1" {
		bad("--encoding %q: want utf-8 or latin1 (ISO-8859-1 / Windows-1252)", o.Encoding)
	}
	if err := o.SurrogateSettings().Check(); err != nil {
		bad("%v", errors.Unwrap(err))
	}
	if o.Workers < 0 {
		bad("--workers %d: must not be negative (0 uses every core)", o.Workers)
	}
	if len(errs) > 0 {
		return &UsageError{Err: errors.Join(errs...)}
	}
	return nil
}

// SurrogateSettings returns the surrogate-test settings of o, as given.
func (o Options) SurrogateSettings() SurrogateSettings {
	return SurrogateSettings{N: o.Surrogates, FitWindows: o.SurrogateFitWindows, Restarts: o.SurrogateRestarts}
}

// UsageError marks a problem with how the command was called (exit code 2).
type UsageError struct{ Err error }

func (e *UsageError) Error() string { return "ingest: " + e.Err.Error() }
func (e *UsageError) Unwrap() error { return e.Err }
