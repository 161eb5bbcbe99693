package ingest

import (
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"runtime"
	"slices"
	"strings"
	"sync"
	"unsafe"

	"github.com/topostate/topostate/compute"
)

// Cohort is a validated cohort: the series to analyse, in a fixed order,
// with everything the stages need to know about them.
type Cohort struct {
	Dir          string
	Participants *Participants
	Regions      []string // names of all columns as read
	Keep         []int    // column indices analysed (all but dropped regions)
	Dropped      []int    // column indices dropped as constant
	Inputs       []SubjectInput
	Excluded     []Exclusion
	Warnings     []string
	Source       *Source // reads each input's series (tables, .npy, NIfTI with the atlas)
	// Window is the window width used: Options.Window, or when that is 0
	// the rule's width at the cohort's shortest TR (WindowFor); TaperSD
	// likewise (TaperSigmaFor). Apply puts them into the options.
	Window  int
	TaperSD float64
	// TempDir is the run's temporary folder (Options.CacheSeries): the
	// parsed-series cache and DuckDB's spill folder. "" when there is none.
	// Close removes it.
	TempDir string
}

// Apply returns o with the window width and taper sigma the cohort
// resolved (when o left them to the rules).
func (c *Cohort) Apply(o Options) Options {
	if o.Window == 0 {
		o.Window = c.Window
	}
	if o.TaperSD == 0 {
		o.TaperSD = c.TaperSD
	}
	return o
}

// Close removes the cohort's temporary folder, if any. Safe to call twice
// and on a nil Cohort.
func (c *Cohort) Close() error {
	if c == nil || c.TempDir == "" {
		return nil
	}
	err := os.RemoveAll(c.TempDir)
	c.TempDir = ""
	return err
}

// SubjectInput is one series that passed validation.
type SubjectInput struct {
	Input
	TR         float64
	TRSource   string
	SHA256     string
	Timepoints int
	Windows    int
	// Window and Step are this series' window width and step in its own
	// time points: --window and --step, or from --window-seconds and
	// --step-seconds with its TR (windowPoints).
	Window, Step int

	cache string // the parsed series as float64 (seriesCache); "": read the file again
}

// Exclusion is a series left out under --on-bad-subject skip.
type Exclusion struct {
	Input
	Reason string
}

// fileCheck is what validation learns from reading one file.
type fileCheck struct {
	regions  []string
	T        int
	sha      string
	constant []int
	windows  []*compute.RegionError // regions whose window correlations are undefined (RegionWindowProblems)
	tr       float64
	trSource string
	window   int
	step     int
	warning  string // a TR the file's header states that its sidecar contradicts
	cache    string // where the parsed series was cached; "": not cached
	err      error
}

// series returns the series the check read: from the parsed-series cache
// when it was cached, else read again (refused if the file changed since).
func (ch *fileCheck) series(src *Source, in Input, p int) (compute.Series, error) {
	if ch.cache != "" {
		return readSeriesCache(ch.cache, ch.T, p)
	}
	sf, err := src.Read(in)
	if err != nil {
		return compute.Series{}, err
	}
	if sf.SHA256 != ch.sha {
		return compute.Series{}, &ParseError{Path: in.Path, Err: errors.New("the file changed while the cohort was being checked; run again")}
	}
	return sf.Series, nil
}

// eachIndex runs fn(i) for i in [0, n) on the given number of goroutines
// and returns when every call has.
func eachIndex(n, workers int, fn func(i int)) {
	var wg sync.WaitGroup
	next := make(chan int)
	for range max(1, workers) {
		wg.Add(1)
		go func() {
			defer wg.Done()
			for i := range next {
				fn(i)
			}
		}()
	}
	for i := range n {
		next <- i
	}
	close(next)
	wg.Wait()
}

// LoadCohort finds and validates the whole cohort before anything is
// written. Every problem found is returned together (as Problems), each
// naming its file and, where it applies, line and column. Under
// OnBadSubject "skip" a series with problems is excluded instead, with the
// reason kept for the excluded_inputs table.
func LoadCohort(o Options) (*Cohort, error) {
	if err := o.Check(); err != nil {
		return nil, err
	}
	inputs, err := discover(o.Input, o.Atlas != "")
	if err != nil {
		return nil, err
	}
	src, err := NewSource(o)
	if err != nil {
		return nil, Problems(flatten(err))
	}
	c := &Cohort{Dir: o.Input, Source: src}
	var problems Problems
	if o.CacheSeries {
		sweepStaleRunDirs()
		if c.TempDir, err = os.MkdirTemp("", runDirPrefix); err != nil {
			c.TempDir = "" // no cache: every stage reads the files again
		} else if err := os.WriteFile(filepath.Join(c.TempDir, runOwnerFile), []byte(runOwner()), 0o644); err != nil {
			os.RemoveAll(c.TempDir)
			c.TempDir = ""
		}
	}
	ok := false
	defer func() {
		if !ok {
			c.Close()
		}
	}()

	ppath := filepath.Join(o.Input, "participants.tsv")
	if _, err := os.Stat(ppath); err != nil {
		if alt := filepath.Join(o.Input, "participants.csv"); fileExists(alt) {
			ppath = alt
		}
	}
	part, err := ReadParticipantsEncoding(ppath, o.Encoding)
	if err != nil {
		var ps Problems
		if errors.As(err, &ps) {
			problems = append(problems, ps...)
		} else {
			problems = append(problems, err)
		}
	}
	c.Participants = part
	if part != nil {
		c.Warnings = append(c.Warnings, part.Warnings...)
	}

	checks := make([]fileCheck, len(inputs))
	workers := o.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	// Two readers per worker: a reader waiting for the disk leaves its
	// core to the other. On the 1,000-series benchmark cohort (2 cores, a
	// busy machine) validation took 21-22 s with four readers against
	// 27-28 s with two. The checks do not depend on the number of readers.
	workers *= 2
	eachIndex(len(inputs), workers, func(i int) {
		cache := ""
		if c.TempDir != "" {
			cache = filepath.Join(c.TempDir, fmt.Sprintf("series-%06d.f64", i))
		}
		checks[i] = checkFile(src, inputs[i], o, cache)
	})

	// Per-file problems, then cohort-wide ones: duplicates, regions, and
	// the participants sheet.
	bad := make([]error, len(inputs))
	for i, ch := range checks {
		bad[i] = ch.err
	}
	seen := map[string]int{}
	for i, in := range inputs {
		key := in.Subject + "/" + in.Session
		if j, dup := seen[key]; dup {
			bad[i] = errors.Join(bad[i], &ParseError{Path: in.Path, Err: fmt.Errorf("%s %s is %w: also as %s; keep one file per subject and session", in.Subject, orNone(in.Session), ErrDuplicate, inputs[j].Rel)})
			continue
		}
		seen[key] = i
		if part != nil {
			if _, ok := part.Lines[in.Subject]; !ok {
				hint := ""
				if near := similarID(in.Subject, part.IDs); near != "" {
					hint = fmt.Sprintf(" (did you mean %s, which it has? rename the file or the row so the labels match)", near)
				}
				bad[i] = errors.Join(bad[i], &ParseError{Path: in.Path, Err: fmt.Errorf("%w: add a row for %s to %s%s", ErrNoParticipant, in.Subject, part.Path, hint)})
			}
		}
	}
	// The reference region list is the first series that read cleanly.
	ref := -1
	for i, ch := range checks {
		if ch.err == nil {
			ref = i
			break
		}
	}
	if ref >= 0 {
		c.Regions = checks[ref].regions
		for i, ch := range checks {
			if ch.err != nil || i == ref {
				continue
			}
			if msg := regionDiff(c.Regions, ch.regions); msg != "" {
				bad[i] = errors.Join(bad[i], &ParseError{Path: inputs[i].Path, Line: 1, Err: fmt.Errorf("%w %s: %s; every series must have the same regions in the same order", ErrRegionMismatch, inputs[ref].Rel, msg)})
			}
		}
	}
	// Constant regions: refused, or dropped from every series alike.
	constant := map[int]bool{}
	for i, ch := range checks {
		if bad[i] != nil {
			continue
		}
		for _, j := range ch.constant {
			if o.ConstantRegion == "drop" {
				constant[j] = true
				continue
			}
			bad[i] = errors.Join(bad[i], &ParseError{Path: inputs[i].Path, Column: j + 1, Err: fmt.Errorf("%w: %q never changes (a region outside the mask?); fix the series or pass --constant-region drop to leave this region out of every subject", ErrConstantRegion, ch.regions[j])})
		}
	}
	for j := range c.Regions {
		if constant[j] {
			c.Dropped = append(c.Dropped, j)
		} else {
			c.Keep = append(c.Keep, j)
		}
	}
	if ref >= 0 && len(c.Keep) < 3 {
		problems = append(problems, fmt.Errorf("ingest: only %d region(s) left after dropping constant ones; a network needs at least 3", len(c.Keep)))
	}
	// The window: given, or from the rule at the shortest TR of the
	// series that were read (every series then spans at least 1/f_min
	// seconds per window). A series shorter than the window is refused.
	c.Window = o.Window
	if c.Window == 0 {
		for i, ch := range checks {
			if bad[i] == nil && ch.tr > 0 {
				c.Window = max(c.Window, WindowFor(ch.tr, o.MinFreq))
			}
		}
	}
	c.TaperSD = o.TaperSD
	if c.TaperSD == 0 {
		c.TaperSD = TaperSigmaFor(c.Window)
	}
	// (Windows in seconds were checked per series by checkFile.)
	for i, ch := range checks {
		if bad[i] == nil && o.WindowSeconds == 0 && c.Window > 0 && ch.T < c.Window {
			why := "--window is %d; use a shorter window"
			if o.Window == 0 {
				why = fmt.Sprintf("the window is %%d (1/--min-freq = %g s at the cohort's shortest TR); pass a shorter --window or a higher --min-freq,", 1/o.MinFreq)
			}
			bad[i] = &ParseError{Path: inputs[i].Path, Err: fmt.Errorf("%w: %d time points, "+why+" or leave this series out", ErrTooShort, ch.T, c.Window)}
		}
	}
	// Every series shorter than the window: one line, not one per file.
	if tooShort := tooShortAll(o, c.Window, inputs, checks, bad); tooShort != nil {
		return nil, append(problems, tooShort)
	}
	// Windows whose correlations are undefined (a region that does not
	// vary for a window's length) in a region that is analysed: the series
	// is refused like any bad series (skipped under --on-bad-subject skip),
	// here and in stage plan, so the computation never meets one.
	if ref >= 0 && (c.Window > 0 || o.WindowSeconds > 0) {
		if o.Window == 0 && o.WindowSeconds == 0 { // the window was derived from the cohort: the files are read again
			ow := o
			ow.Window = c.Window
			pre, win := computeOptions(ow)
			eachIndex(len(checks), workers, func(i int) {
				if bad[i] != nil || checks[i].T < c.Window {
					return
				}
				y, err := checks[i].series(src, inputs[i], len(checks[i].regions))
				if err != nil {
					bad[i] = err
					return
				}
				checks[i].windows = compute.RegionWindowProblems(y, pre, win)
			})
		}
		kept := map[int]bool{}
		for _, j := range c.Keep {
			kept[j] = true
		}
		for i, ch := range checks {
			if bad[i] != nil {
				continue
			}
			for _, re := range ch.windows {
				if kept[re.Region] {
					bad[i] = errors.Join(bad[i], windowProblem(inputs[i].Path, ch.regions, re))
				}
			}
		}
	}
	for i, in := range inputs {
		if bad[i] != nil {
			if o.OnBadSubject == "skip" {
				c.Excluded = append(c.Excluded, Exclusion{Input: in, Reason: oneLine(bad[i])})
				continue
			}
			problems = append(problems, flatten(bad[i])...)
			continue
		}
		ch := checks[i]
		w := c.Window // this series' window: the cohort's, or from --window-seconds and its TR
		if o.WindowSeconds > 0 {
			w = ch.window
		}
		c.Inputs = append(c.Inputs, SubjectInput{Input: in, TR: ch.tr, TRSource: ch.trSource, SHA256: ch.sha,
			Timepoints: ch.T, Windows: compute.NumWindows(ch.T, w, ch.step), Window: w, Step: ch.step, cache: ch.cache})
		if ch.warning != "" {
			c.Warnings = append(c.Warnings, ch.warning)
		}
	}
	if err := mixedTR(o, c.Window, c.Inputs); err != nil {
		problems = append(problems, err)
	}
	c.Warnings = append(c.Warnings, windowDurations(o, c.Inputs)...)
	if part != nil {
		have := map[string]bool{}
		for _, in := range inputs {
			have[in.Subject] = true
		}
		for _, id := range part.IDs {
			if !have[id] {
				c.Warnings = append(c.Warnings, fmt.Sprintf("%s:%d: %s has no series file; kept in the subjects table only", part.Path, part.Lines[id], id))
			}
		}
	}
	if len(problems) == 0 && len(c.Inputs) == 0 {
		problems = append(problems, fmt.Errorf("ingest: every series was excluded; nothing to analyse"))
	}
	if len(problems) > 0 {
		return nil, problems
	}
	// More states than windows cannot be fitted; say so before anything
	// opens the warehouse.
	var windows int
	for _, in := range c.Inputs {
		windows += in.Windows
	}
	k, flag := o.States, "--states"
	if k == 0 {
		k, flag = o.StatesMax, "--states-max"
	}
	if k > windows {
		return nil, &UsageError{Err: fmt.Errorf("%s %d is more than the %d windows of the whole cohort (%d series, --window %d, --step %d); ask for fewer states or use a shorter window or step", flag, k, windows, len(c.Inputs), c.Window, o.Step)}
	}
	ok = true
	return c, nil
}

// checkFile reads and checks one file; when cache is not "" the parsed
// series is also written there (writeSeriesCache) for the stages.
func checkFile(src *Source, in Input, o Options, cache string) fileCheck {
	var ch fileCheck
	sf, err := src.Read(in)
	if err != nil {
		ch.err = err
		return ch
	}
	ch.regions, ch.T, ch.sha = sf.Regions, sf.Series.T, sf.SHA256
	if cache != "" && writeSeriesCache(cache, sf.Series) == nil {
		ch.cache = cache
	}
	ch.constant = compute.ConstantRegions(sf.Series)
	// TR precedence: --tr, then the sidecar's RepetitionTime, then what
	// the file itself states (a NIfTI header's pixdim[4] with its unit).
	// A header that contradicts its sidecar is reported and the sidecar's
	// TR used: the sidecar is written from the scanner's protocol, while a
	// converted header's pixdim[4] is often 1 or in the wrong unit.
	switch {
	case o.TR > 0:
		ch.tr, ch.trSource = o.TR, "option --tr"
	case in.Sidecar != "":
		ch.tr, ch.err = SidecarTR(in.Sidecar)
		ch.trSource = in.Sidecar
		if errors.Is(ch.err, ErrNoTR) && sf.TR > 0 {
			ch.tr, ch.trSource, ch.err = sf.TR, in.Path+" (header pixdim[4])", nil
		} else if ch.err == nil && sf.TR > 0 && !sameTR(sf.TR, ch.tr) {
			ch.warning = fmt.Sprintf("%s: the header's pixdim[4] says TR %g s but its sidecar %s says %g s; the sidecar's %g s is used", in.Path, sf.TR, in.Sidecar, ch.tr, ch.tr)
		}
	case sf.TR > 0:
		ch.tr, ch.trSource = sf.TR, in.Path+" (header pixdim[4])"
	case FileKind(in.Path) == KindNifti:
		ch.err = &ParseError{Path: in.Path, Err: fmt.Errorf("%w: the header's pixdim[4] has no time unit (xyzt_units); pass --tr SECONDS or put a JSON sidecar with RepetitionTime beside the file", ErrNoTR)}
	default:
		ch.err = &ParseError{Path: in.Path, Err: fmt.Errorf("%w: pass --tr SECONDS or put a JSON sidecar with RepetitionTime beside the file", ErrNoTR)}
	}
	if ch.err != nil {
		return ch
	}
	if strings.HasSuffix(ch.trSource, "(header pixdim[4])") {
		if err := CheckTR(ch.tr, "the header's pixdim[4]"); err != nil {
			ch.err = &ParseError{Path: in.Path, Err: fmt.Errorf("%w; pass --tr SECONDS or put a JSON sidecar with RepetitionTime beside the file", err)}
			return ch
		}
	}
	// The window in time points is the cohort's (LoadCohort), except with
	// --window-seconds, where each series has its own.
	ch.window, ch.step = windowPoints(o, ch.tr)
	if o.WindowSeconds > 0 {
		if ch.window < 2 {
			ch.err = &ParseError{Path: in.Path, Err: fmt.Errorf("--window-seconds %g at TR %g s gives %d time point(s); a window needs at least 2", o.WindowSeconds, ch.tr, ch.window)}
			return ch
		}
		if sf.Series.T < ch.window {
			ch.err = &ParseError{Path: in.Path, Err: fmt.Errorf("%w: %d time points, --window-seconds %g at TR %g s is %d; use a shorter window or leave this series out", ErrTooShort, sf.Series.T, o.WindowSeconds, ch.tr, ch.window)}
			return ch
		}
	}
	// Windows whose correlations would be undefined, at the window this
	// series is computed with: --window, or its own points from
	// --window-seconds. A window derived from --min-freq is known only
	// when every file has been read; LoadCohort checks it then.
	if ch.window > 0 && sf.Series.T >= ch.window {
		ow := o
		ow.Window, ow.Step = ch.window, ch.step
		pre, win := computeOptions(ow)
		ch.windows = compute.RegionWindowProblems(sf.Series, pre, win)
	}
	return ch
}

// computeOptions are the preprocessing and window options of o, as the
// computation uses them.
func computeOptions(o Options) (compute.PreprocessOptions, compute.WindowOptions) {
	pre := compute.PreprocessOptions{Detrend: o.Detrend, SmoothK: o.SmoothK, SmoothSigma: o.SmoothSD}
	win := compute.WindowOptions{Width: o.Window, Step: o.Step, FisherZ: o.FisherZ, GaussSigma: o.TaperSD}
	if o.Taper == "gauss" {
		win.Taper = compute.TaperGauss
	}
	return pre, win
}

// windowProblem words a region whose window correlations are undefined
// (the policy: such a series is refused, or left out
// under --on-bad-subject skip): the region's name, its column, and the
// window's time points counted from 1 (and its lines, for a table with a
// header line).
func windowProblem(path string, regions []string, re *compute.RegionError) error {
	name := fmt.Sprint(re.Region + 1)
	if re.Region < len(regions) {
		name = regions[re.Region]
	}
	if re.Window < 0 {
		return &ParseError{Path: path, Column: re.Region + 1, Err: fmt.Errorf("%w: region %q has no variance left after detrending or smoothing (is it a straight line?); fix the series, or pass --on-bad-subject skip to leave this series out", ErrUndefinedWindow, name)}
	}
	first, last := re.Start+1, re.Start+re.Width
	lines := ""
	if FileKind(path) == KindTable {
		lines = fmt.Sprintf(", lines %d..%d", first+1, last+1)
	}
	return &ParseError{Path: path, Column: re.Region + 1, Err: fmt.Errorf("%w: region %q does not vary over time points %d..%d%s (window %d of %d time points), so its correlations there are undefined; "+
		"fix the series (a stretch filled with one value?), or pass --on-bad-subject skip to leave this series out", ErrUndefinedWindow, name, first, last, lines, re.Window+1, re.Width)}
}

func regionDiff(want, got []string) string {
	if slices.Equal(want, got) {
		return ""
	}
	if len(want) != len(got) {
		return fmt.Sprintf("%d regions here, %d there", len(got), len(want))
	}
	for i := range want {
		if want[i] != got[i] {
			return fmt.Sprintf("column %d is %q here but %q there", i+1, got[i], want[i])
		}
	}
	return ""
}

func flatten(err error) []error {
	if u, ok := err.(interface{ Unwrap() []error }); ok {
		var out []error
		for _, e := range u.Unwrap() {
			out = append(out, flatten(e)...)
		}
		return out
	}
	return []error{err}
}

func oneLine(err error) string {
	parts := flatten(err)
	s := make([]string, len(parts))
	for i, e := range parts {
		s[i] = e.Error()
	}
	return strings.Join(s, "; ")
}

func orNone(ses string) string {
	if ses == "" {
		return "(no session)"
	}
	return ses
}

func fileExists(p string) bool {
	_, err := os.Stat(p)
	return err == nil
}

// tooShortAll returns one error summarising the cohort when every series
// (more than one) is too short for the window, and nil otherwise.
func tooShortAll(o Options, window int, inputs []Input, checks []fileCheck, bad []error) error {
	if len(inputs) < 2 {
		return nil
	}
	longest := 0
	for i := range inputs {
		if !errors.Is(bad[i], ErrTooShort) {
			return nil
		}
		if checks[i].T > checks[longest].T {
			longest = i
		}
	}
	if o.WindowSeconds > 0 {
		return &UsageError{Err: fmt.Errorf("%w: every one of the %d series is shorter than --window-seconds %g; the longest, %s, has %d time points (TR %g s): use a shorter window",
			ErrTooShort, len(inputs), o.WindowSeconds, inputs[longest].Rel, checks[longest].T, checks[longest].tr)}
	}
	return &UsageError{Err: fmt.Errorf("%w: every one of the %d series is shorter than the window of %d time points; the longest, %s, has %d time points: use --window %d or less",
		ErrTooShort, len(inputs), window, inputs[longest].Rel, checks[longest].T, checks[longest].T)}
}

// similarID returns the id of ids whose label equals id's up to leading
// zeros of numbers and letter case (sub-4 and sub-04, sub-ab and sub-AB),
// or "" when none does.
func similarID(id string, ids []string) string {
	key := func(s string) string {
		s = strings.ToLower(strings.TrimPrefix(s, "sub-"))
		var b strings.Builder
		for i := 0; i < len(s); i++ {
			if s[i] == '0' && (i == 0 || s[i-1] < '0' || s[i-1] > '9') && i+1 < len(s) && s[i+1] >= '0' && s[i+1] <= '9' {
				// a leading zero of a number: skip it and any that follow
				for i+1 < len(s) && s[i] == '0' && s[i+1] >= '0' && s[i+1] <= '9' {
					i++
				}
			}
			b.WriteByte(s[i])
		}
		return b.String()
	}
	k := key(id)
	for _, other := range ids {
		if other != id && key(other) == k {
			return other
		}
	}
	return ""
}

// The parsed-series cache: each series that passed its read at validation
// is written once, as its T x p float64 values in the machine's byte order
// (no header: the cohort knows T and p), to the run's temporary folder.
// The stages read it back instead of parsing the file again (text parsing
// is most of a read), and the values are the very numbers validation
// parsed and hashed, so a file changed during the run cannot enter it.
// float64, not float32: the stages then compute from exactly the numbers
// the file gives (parsed to float64), so results are identical with or
// without the cache; float32 would round values such as 1000.123456 (a
// scanner offset plus signal) to about 7 digits. A series that cannot be
// cached (a full disk) is read from its file again.
func writeSeriesCache(path string, y compute.Series) error {
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	if _, err := f.Write(float64Bytes(y.Data)); err != nil {
		f.Close()
		os.Remove(path)
		return err
	}
	if err := f.Close(); err != nil {
		os.Remove(path)
		return err
	}
	return nil
}

// readSeriesCache reads a series written by writeSeriesCache.
func readSeriesCache(path string, t, p int) (compute.Series, error) {
	y := compute.NewSeries(t, p)
	f, err := os.Open(path)
	if err != nil {
		return compute.Series{}, err
	}
	defer f.Close()
	if _, err := io.ReadFull(f, float64Bytes(y.Data)); err != nil {
		return compute.Series{}, fmt.Errorf("ingest: parsed-series cache %s: %w", path, err)
	}
	return y, nil
}

func float64Bytes(v []float64) []byte {
	if len(v) == 0 {
		return nil
	}
	return unsafe.Slice((*byte)(unsafe.Pointer(&v[0])), len(v)*8)
}

// A run's temporary folder is $TMPDIR/topostate-run-*, holding a file
// "owner": host name and process id. A run killed outright (SIGKILL, power
// loss) cannot remove its folder, and the parsed series can take gigabytes,
// so each new run removes the folders of runs of this host whose process no
// longer exists (on Linux, where /proc tells; elsewhere nothing is removed).
// A folder without an owner file, or of another host (a shared TMPDIR), is
// left alone.
const (
	runDirPrefix = "topostate-run-"
	runOwnerFile = "owner"
)

func runOwner() string {
	host, _ := os.Hostname()
	return fmt.Sprintf("%s %d", host, os.Getpid())
}

func sweepStaleRunDirs() {
	if _, err := os.Stat("/proc/self"); err != nil {
		return // no /proc: cannot tell a dead run from a live one
	}
	host, _ := os.Hostname()
	dirs, _ := filepath.Glob(filepath.Join(os.TempDir(), runDirPrefix+"*"))
	for _, d := range dirs {
		b, err := os.ReadFile(filepath.Join(d, runOwnerFile))
		if err != nil {
			continue
		}
		h, pid, ok := strings.Cut(strings.TrimSpace(string(b)), " ")
		if !ok || h != host || pid == "" || strings.ContainsAny(pid, "/.") {
			continue
		}
		if _, err := os.Stat(filepath.Join("/proc", pid)); errors.Is(err, os.ErrNotExist) {
			os.RemoveAll(d)
		}
	}
}
