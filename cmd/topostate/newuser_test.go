package main

import (
	"fmt"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/queries"
)

// A group value that no subject has is refused in every bundled group
// query (and in a user's SQL calling the macro), with the values present
// and the case-only match; never rows of n = 0 with exit 0 (issue: a
// mistyped group value).
func TestGroupValueTypoRefused(t *testing.T) {
	all, err := queries.List(queries.FS)
	if err != nil {
		t.Fatal(err)
	}
	groupQueries := 0
	for _, q := range all {
		if _, ok := q.Param("group_a"); !ok {
			continue
		}
		groupQueries++
		t.Run(q.Name, func(t *testing.T) {
			code, stdout, stderr := topostate("query", "--db", warehouse, q.Name, "--param", "group_a=b", "--param", "group_b=A", "-f", "csv", "--param", "n_perm=99")
			if _, ok := q.Param("n_perm"); !ok {
				code, stdout, stderr = topostate("query", "--db", warehouse, q.Name, "--param", "group_a=b", "--param", "group_b=A", "-f", "csv")
			}
			if code != 2 || stdout != "" ||
				!strings.Contains(stderr, "group_a value 'b' matches no subject") ||
				!strings.Contains(stderr, "the values there are: A, B") ||
				!strings.Contains(stderr, "did you mean 'B'?") {
				t.Errorf("exit %d\nstdout: %s\nstderr: %s", code, stdout, stderr)
			}
			code, _, stderr = topostate("query", "--db", warehouse, q.Name, "--param", "group_a=A", "--param", "group_b=Z")
			if code != 2 || !strings.Contains(stderr, "group_b value 'Z'") || strings.Contains(stderr, "did you mean") {
				t.Errorf("group_b=Z: exit %d: %s", code, stderr)
			}
		})
	}
	if groupQueries < 4 {
		t.Errorf("%d bundled group queries; expected at least 4", groupQueries)
	}
	code, _, stderr := topostate("query", "--db", warehouse, "--sql",
		"SELECT count(*) FROM subject_groups(1, 'group', 'a', 'B')")
	if code != 2 || !strings.Contains(stderr, "did you mean 'A'?") {
		t.Errorf("own SQL: exit %d: %s", code, stderr)
	}
	// The right values still work.
	code, stdout, stderr := topostate("query", "--db", warehouse, "transitions_by_group", "--param", "group_a=B", "--param", "group_b=A", "-f", "csv")
	if code != 0 || !strings.Contains(stdout, "group,from_state") {
		t.Errorf("B vs A: exit %d: %s %s", code, stdout, stderr)
	}
}

// One rule for which analysis a command uses (queries.FindAnalysis): the
// only one when the warehouse holds one; with several, --analysis is
// required and the refusal lists them; an id, a name or latest otherwise.
// Every command names the analysis it used; query does so on standard
// error, so standard output stays plain CSV.
func TestOneAnalysisRule(t *testing.T) {
	db, _ := twoAnalyses(t) // 1 "baseline", 2 "second"
	out := t.TempDir()
	run := func(args ...string) result { return runCmd(t, cmdOpts{args: args}) }

	// Several analyses, none named: every command refuses and lists them.
	for _, args := range [][]string{
		{"query", "--db", db, "subject_features", "-f", "csv"},
		{"query", "--db", db, "--sql", "SELECT getvariable('analysis') AS a"},
		{"plot", "--db", db, "--out", out},
		{"report", "--db", db, "--out", filepath.Join(out, "r.html")},
	} {
		r := run(args...)
		if r.code != exitUsage || r.stdout != "" || !strings.Contains(r.stderr, `holds 2 analyses: 1 ("baseline"), 2 ("second")`) {
			t.Errorf("%v: exit %d\nstdout: %s\nstderr: %s", args, r.code, r.stdout, r.stderr)
		}
	}
	// query names the analysis on standard error; standard output is the
	// CSV alone, with the second analysis's rows.
	for _, given := range [][]string{{"--analysis", "second"}, {"--analysis", "2"}, {"--analysis", "latest"}, {"--param", "analysis=second"}} {
		r := run(append([]string{"query", "--db", db, "subject_features", "-f", "csv"}, given...)...)
		if r.code != 0 || !strings.Contains(r.stderr, `query: analysis 2 ("second"), one of 2 in the warehouse`) ||
			!strings.HasPrefix(r.stdout, "subject_id,") {
			t.Errorf("%v: exit %d\nstdout: %s\nstderr: %s", given, r.code, r.stdout, r.stderr)
		}
	}
	// In --sql, getvariable('analysis') holds the resolved id as an
	// INTEGER however it was given.
	for _, v := range []string{"second", "2", "latest"} {
		r := run("query", "--db", db, "--analysis", v, "-f", "csv", "--sql",
			"SELECT getvariable('analysis') AS a, typeof(getvariable('analysis')) AS t, count(*) AS n FROM analyses WHERE analysis_id = getvariable('analysis')")
		if r.code != 0 || r.stdout != "a,t,n\n2,INTEGER,1\n" {
			t.Errorf("--sql with analysis %s: exit %d\nstdout: %q\nstderr: %s", v, r.code, r.stdout, r.stderr)
		}
	}
	r := run("query", "--db", db, "--analysis", "third", "subject_features")
	if r.code != exitUsage || !strings.Contains(r.stderr, `no such analysis "third"`) {
		t.Errorf("unknown analysis: exit %d: %s", r.code, r.stderr)
	}
	// plot and export name the analysis they used; export without
	// --analysis writes (and names) every analysis.
	r = run("plot", "--db", db, "--out", filepath.Join(out, "fig"), "--analysis", "1", "--format", "svg")
	if r.code != 0 || !strings.Contains(r.stdout, `for analysis 1 ("baseline")`) {
		t.Errorf("plot: exit %d\n%s\n%s", r.code, r.stdout, r.stderr)
	}
	r = run("export", "--db", db, "--out", filepath.Join(out, "e1"), "--tables", "analyses", "--analysis", "latest")
	if r.code != 0 || !strings.Contains(r.stdout, `analysis 2 ("second")`) {
		t.Errorf("export latest: exit %d\n%s\n%s", r.code, r.stdout, r.stderr)
	}
	r = run("export", "--db", db, "--out", filepath.Join(out, "e2"), "--tables", "analyses")
	if r.code != 0 || !strings.Contains(r.stdout, `every analysis (rows carry analysis_id): 1 ("baseline"), 2 ("second")`) {
		t.Errorf("export all: exit %d\n%s\n%s", r.code, r.stdout, r.stderr)
	}
	// One analysis: it is used without being named, and named in the output.
	r = run("query", "--db", baselineDB, "subject_features", "-f", "csv")
	if r.code != 0 || !strings.Contains(r.stderr, `query: analysis 1 ("baseline"), the only analysis in the warehouse`) {
		t.Errorf("one analysis: exit %d\n%s", r.code, r.stderr)
	}
}

// mixedTRCohort writes a synthetic cohort of 6 subjects (150 time points)
// whose sidecars say TR 0.8 s for sub-001..003 and 2 s for the others.
func mixedTRCohort(t *testing.T) string {
	t.Helper()
	dir := filepath.Join(t.TempDir(), "mixed")
	spec := compute.CohortSpec{Subjects: 6, Regions: 5, Timepoints: 150, States: 2, TR: 2, Stickiness: 0.95, Offset: 100, Seed: 11}
	if _, err := writeSynthetic(dir, spec, map[string]string{"A": "A", "B": "B"}, "score"); err != nil {
		t.Fatal(err)
	}
	sidecars, _ := filepath.Glob(filepath.Join(dir, "sub-*", "func", "*.json"))
	if len(sidecars) != 6 {
		t.Fatalf("%d sidecars", len(sidecars))
	}
	for _, p := range sidecars {
		if strings.Contains(p, "sub-001") || strings.Contains(p, "sub-002") || strings.Contains(p, "sub-003") {
			if err := os.WriteFile(p, []byte(`{"RepetitionTime": 0.8}`), 0o644); err != nil {
				t.Fatal(err)
			}
		}
	}
	return dir
}

// Repetition time: a value in milliseconds is refused with the seconds
// suggested; a cohort of two TRs is refused with the TRs and their files
// unless the window is given in seconds, and then every series gets its
// own window in points, recorded per series; a NIfTI header that
// contradicts its sidecar is reported and the sidecar's TR used.
func TestRepetitionTime(t *testing.T) {
	tmp := t.TempDir()
	abs, _ := filepath.Abs(goodCohort)
	run := func(args ...string) result { return runCmd(t, cmdOpts{args: args}) }

	r := run("ingest", "--input", abs, "--db", filepath.Join(tmp, "ms.duckdb"), "--window", "5", "--states", "2", "--tr", "800", "-q")
	if r.code != exitUsage || !strings.Contains(r.stderr, "did you mean 0.8 (seconds)?") {
		t.Errorf("--tr 800: exit %d: %s", r.code, r.stderr)
	}
	for _, v := range []string{"NaN", "0.01", "-2", "25"} {
		r := run("ingest", "--input", abs, "--db", filepath.Join(tmp, "bad.duckdb"), "--window", "5", "--tr", v, "-q")
		if r.code != exitUsage || !strings.Contains(r.stderr, "--tr") || strings.Contains(r.stderr, "did you mean") {
			t.Errorf("--tr %s: exit %d: %s", v, r.code, r.stderr)
		}
	}
	// A sidecar in milliseconds: refused naming the file.
	msCohort := filepath.Join(tmp, "mscohort")
	copyTree(t, abs, msCohort)
	side := filepath.Join(msCohort, "sub-02", "func", "sub-02_task-rest_timeseries.json")
	if err := os.WriteFile(side, []byte(`{"RepetitionTime": 2000}`), 0o644); err != nil {
		t.Fatal(err)
	}
	r = run("ingest", "--input", msCohort, "--db", filepath.Join(tmp, "ms2.duckdb"), "--window", "5", "--states", "2", "-q")
	if r.code == 0 || !strings.Contains(r.stderr, side) || !strings.Contains(r.stderr, "did you mean 2 (seconds)?") {
		t.Errorf("sidecar 2000: exit %d: %s", r.code, r.stderr)
	}

	// Two TRs, window in time points: refused, nothing written.
	mixed := mixedTRCohort(t)
	db := filepath.Join(tmp, "mixed.duckdb")
	r = run("ingest", "--input", mixed, "--db", db, "--window", "20", "--states", "2", "-q")
	if r.code != exitUsage || !strings.Contains(r.stderr, "2 different repetition times") ||
		!strings.Contains(r.stderr, "TR 0.8 s: 3 series: sub-001/func/sub-001_task-rest_timeseries.tsv") ||
		!strings.Contains(r.stderr, "TR 2 s: 3 series: sub-004/") || !strings.Contains(r.stderr, "--window-seconds") {
		t.Errorf("mixed TR: exit %d: %s", r.code, r.stderr)
	}
	if _, err := os.Stat(db); err == nil {
		t.Errorf("the refused ingest left %s", db)
	}
	// Windows in seconds: 16 s is 20 points at 0.8 s and 8 at 2 s; a 4 s
	// step is 5 and 2 points.
	r = run("ingest", "--input", mixed, "--db", db, "--window-seconds", "16", "--step-seconds", "4", "--states", "2", "-q")
	if r.code != 0 || strings.Contains(r.stdout, "warning") {
		t.Fatalf("--window-seconds: exit %d\n%s\n%s", r.code, r.stdout, r.stderr)
	}
	got := querySQL(t, db, `SELECT string_agg(DISTINCT tr_seconds || ':' || window_points || '/' || step_points, ' ' ORDER BY tr_seconds || ':' || window_points || '/' || step_points) FROM inputs`)
	if got != "0.8:20/5 2.0:8/2" {
		t.Errorf("per-series windows %q, want 0.8:20/5 2.0:8/2", got)
	}
	// Dwell in seconds = mean dwell in windows x step points x TR, per
	// series (docs/methods.md, the dwell-time definition), for all runs and
	// for complete runs; window centres at (start + (window-1)/2) x TR.
	bad := querySQL(t, db, `SELECT count(*) FROM state_metrics m JOIN inputs i USING (analysis_id, subject_id, session_id)
		WHERE abs(m.mean_dwell_seconds - m.mean_dwell_windows * i.step_points * i.tr_seconds) > 1e-9
		   OR abs(m.complete_dwell_seconds - m.complete_dwell_windows * i.step_points * i.tr_seconds) > 1e-9`)
	bad2 := querySQL(t, db, `SELECT count(*) FROM state_sequence s JOIN inputs i USING (analysis_id, subject_id, session_id)
		WHERE abs(s.center_seconds - (s.window_start + (i.window_points - 1) / 2.0) * i.tr_seconds) > 1e-9
		   OR s.window_start <> (s.window_index - 1) * i.step_points`)
	if bad != "0" || bad2 != "0" {
		t.Errorf("%s dwell rows and %s window rows disagree with the per-series window", bad, bad2)
	}
	if n := querySQL(t, db, `SELECT count(*) FROM state_metrics m JOIN inputs i USING (analysis_id, subject_id, session_id)
		WHERE m.complete_dwell_seconds IS NOT NULL AND i.step_points > 1`); n == "0" {
		t.Error("no complete run in a series with a step above 1 point: the complete-run dwell check above checked nothing")
	}
	if p := querySQL(t, db, `SELECT parameters->>'window_seconds' FROM analyses`); p != "16" {
		t.Errorf("parameters window_seconds %q", p)
	}
	// Rounding that leaves steps of different lengths is reported.
	r = run("ingest", "--input", mixed, "--db", db, "--window-seconds", "16", "--step-seconds", "2", "--states", "2", "-q", "--analysis", "step2")
	if r.code != 0 || !strings.Contains(r.stdout, "warning          the step lasts 2 s in sub-004/func/sub-004_task-rest_timeseries.tsv (TR 2 s) but 2.4 s in sub-001") {
		t.Errorf("uneven steps: exit %d\n%s\n%s", r.code, r.stdout, r.stderr)
	}
	r = run("ingest", "--input", mixed, "--db", db, "--window-seconds", "16", "--window", "8", "-q")
	if r.code != exitUsage || !strings.Contains(r.stderr, "not both") {
		t.Errorf("--window and --window-seconds: exit %d: %s", r.code, r.stderr)
	}

	// A NIfTI header (pixdim[4] 2 s) contradicted by its sidecar (2.5 s).
	nifti := filepath.Join(tmp, "nifti")
	niftiAbs, _ := filepath.Abs(filepath.Join("..", "..", "testdata", "nifti"))
	copyTree(t, filepath.Join(niftiAbs, "cohort"), nifti)
	images, _ := filepath.Glob(filepath.Join(nifti, "sub-*", "func", "*_bold.nii.gz"))
	for _, img := range images {
		if err := os.WriteFile(strings.TrimSuffix(img, ".nii.gz")+".json", []byte(`{"RepetitionTime": 2.5}`), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	ndb := filepath.Join(tmp, "nifti.duckdb")
	r = run("ingest", "--input", nifti, "--atlas", filepath.Join(niftiAbs, "atlas.nii.gz"), "--db", ndb, "--window", "5", "--states", "2", "-q")
	want := "sub-01_task-rest_bold.nii.gz: the header's pixdim[4] says TR 2 s but its sidecar " + filepath.Join(nifti, "sub-01", "func", "sub-01_task-rest_bold.json") + " says 2.5 s; the sidecar's 2.5 s is used"
	if r.code != 0 || !strings.Contains(r.stdout, want) {
		t.Errorf("header vs sidecar: exit %d\n%s\n%s", r.code, r.stdout, r.stderr)
	}
	if got := querySQL(t, ndb, `SELECT string_agg(DISTINCT tr_seconds::VARCHAR, ',') FROM inputs`); got != "2.5" {
		t.Errorf("TR used %q, want the sidecar's 2.5", got)
	}
}

// participants.json's Description, Units and Levels reach export's data
// dictionary and codebook; true/false columns are BOOLEAN and ISO dates
// DATE (BIDS: participants.json describes the columns of participants.tsv).
func TestParticipantsJSON(t *testing.T) {
	tmp := t.TempDir()
	abs, _ := filepath.Abs(goodCohort)
	cohort := filepath.Join(tmp, "cohort")
	copyTree(t, abs, cohort)
	sheet := "participant_id\tgroup\tage\tsmoker\tscan_date\n" +
		"sub-01\tday\t34\ttrue\t2024-03-01\n" +
		"sub-02\tnight\t41\tFALSE\tn/a\n" +
		"sub-03\tday\t29\tfalse\t2024-03-09\n"
	if err := os.WriteFile(filepath.Join(cohort, "participants.tsv"), []byte(sheet), 0o644); err != nil {
		t.Fatal(err)
	}
	docs := `{
  "age": {"Description": "age at the scan", "Units": "years"},
  "group": {"LongName": "shift", "Description": "work shift", "Levels": {"day": "day shift", "night": "night shift"}},
  "smoker": {"Description": "smokes daily"},
  "height": {"Description": "a column the sheet lacks"}
}`
	pj := filepath.Join(cohort, "participants.json")
	if err := os.WriteFile(pj, []byte(docs), 0o644); err != nil {
		t.Fatal(err)
	}
	db := filepath.Join(tmp, "w.duckdb")
	r := runCmd(t, cmdOpts{args: []string{"ingest", "--input", cohort, "--db", db, "--window", "5", "--states", "2", "-q"}})
	if r.code != 0 || !strings.Contains(r.stdout, `participants.json describes column "height", which participants.tsv does not have`) {
		t.Fatalf("ingest: exit %d\n%s\n%s", r.code, r.stdout, r.stderr)
	}
	types := querySQL(t, db, `SELECT string_agg(column_name || ' ' || data_type, ', ' ORDER BY ordinal_position) FROM information_schema.columns WHERE table_name = 'subjects'`)
	if types != "analysis_id INTEGER, subject_id VARCHAR, group VARCHAR, age BIGINT, smoker BOOLEAN, scan_date DATE" {
		t.Errorf("subjects types: %s", types)
	}
	if got := querySQL(t, db, `SELECT count(*) FROM subjects WHERE smoker AND scan_date = DATE '2024-03-01'`); got != "1" {
		t.Errorf("BOOLEAN/DATE values: %s rows", got)
	}
	out := filepath.Join(tmp, "export")
	if r := runCmd(t, cmdOpts{args: []string{"export", "--db", db, "--out", out, "-f", "csv", "--tables", "subjects"}}); r.code != 0 {
		t.Fatalf("export: exit %d: %s", r.code, r.stderr)
	}
	dict, _ := os.ReadFile(filepath.Join(out, "data_dictionary.csv"))
	book, _ := os.ReadFile(filepath.Join(out, "codebook.csv"))
	subj, _ := os.ReadFile(filepath.Join(out, "subjects.csv"))
	for _, want := range []string{
		"subjects,age,BIGINT,true,age at the scan (participants.json; n/a and empty cells are NULL),years\n",
		"subjects,smoker,BOOLEAN,true,smokes daily (participants.json;",
		"subjects,scan_date,DATE,true,covariate from participants.tsv",
	} {
		if !strings.Contains(string(dict), want) {
			t.Errorf("data dictionary lacks %q:\n%s", want, dict)
		}
	}
	for _, want := range []string{
		"subjects,group,work shift (participants.json; n/a and empty cells are NULL),text,VARCHAR,as recorded in participants.tsv,day;night,day=day shift;night=night shift,",
		"subjects,age,age at the scan (participants.json; n/a and empty cells are NULL),integer,BIGINT,years,",
		"subjects,smoker,smokes daily (participants.json; n/a and empty cells are NULL),boolean,BOOLEAN,as recorded in participants.tsv,true;false,",
		"subjects,scan_date,covariate from participants.tsv (n/a and empty cells are NULL),datetime,DATE,",
	} {
		if !strings.Contains(string(book), want) {
			t.Errorf("codebook lacks %q:\n%s", want, book)
		}
	}
	if !strings.Contains(string(subj), "sub-01,day,34,true,2024-03-01") || !strings.Contains(string(subj), "sub-02,night,41,false,\n") {
		t.Errorf("subjects.csv:\n%s", subj)
	}
	// A participants.json that is not valid JSON: refused, naming the file
	// and the line.
	if err := os.WriteFile(pj, []byte("{\n  \"age\": {\"Units\": \"years\",}\n}"), 0o644); err != nil {
		t.Fatal(err)
	}
	r = runCmd(t, cmdOpts{args: []string{"ingest", "--input", cohort, "--db", filepath.Join(tmp, "bad.duckdb"), "--window", "5", "--states", "2", "-q"}})
	if r.code == 0 || !strings.Contains(r.stderr, pj+":2") {
		t.Errorf("bad participants.json: exit %d: %s", r.code, r.stderr)
	}
}

// README's options table and the commands' --help agree: every option the
// table names exists, a default the table states as plain values is the
// one --help shows, and no help placeholder is the bare word "value".
func TestReadmeOptionsMatchHelp(t *testing.T) {
	b, err := os.ReadFile(filepath.Join("..", "..", "README.md"))
	if err != nil {
		t.Fatal(err)
	}
	readme := string(b)
	i := strings.Index(readme, "The main ingest options:")
	if i < 0 {
		t.Fatal("README has no ingest options table")
	}
	table := readme[i:]
	table = table[:strings.Index(table, "\n\n## ")]
	_, help, _ := topostate("ingest", "--help")
	// defaults maps each option of --help to its shown default.
	defaults := map[string]string{}
	flagRe := regexp.MustCompile(`^\s+(--[a-z0-9-]+)(?:[ ,].*?)?\(default: ([^)]*)\)\s*$`)
	for _, line := range strings.Split(help, "\n") {
		if m := flagRe.FindStringSubmatch(line); m != nil {
			defaults[m[1]] = strings.Trim(m[2], `"`)
		}
	}
	optRe := regexp.MustCompile("--[a-z0-9-]+")
	rows := 0
	for _, line := range strings.Split(table, "\n") {
		if !strings.HasPrefix(line, "| `--") {
			continue
		}
		rows++
		cells := strings.Split(line, " | ")
		opts := optRe.FindAllString(cells[0], -1)
		for _, o := range opts {
			if !strings.Contains(help, "   "+o+" ") {
				t.Errorf("README lists %s, which 'topostate ingest --help' does not have", o)
			}
		}
		vals := strings.Split(strings.TrimSpace(cells[1]), ", ")
		if len(vals) != len(opts) {
			continue // a descriptive default ("chord elbow over 2..10", "off")
		}
		for k, o := range opts {
			want, shown := defaults[o]
			if !shown || strings.ContainsAny(vals[k], " `(") {
				continue
			}
			if got := map[string]string{"off": "false", "on": "true"}[vals[k]]; got != "" {
				vals[k] = got
			}
			if vals[k] != want {
				t.Errorf("README says %s defaults to %s; --help says %s", o, vals[k], want)
			}
		}
	}
	if rows < 15 {
		t.Errorf("%d option rows read from README", rows)
	}
	// Commands in README's table exist; no help shows a bare "value".
	for _, args := range [][]string{{"demo"}, {"ingest"}, {"stage", "plan"}, {"stage", "sample"}, {"stage", "fit"}, {"stage", "compute"},
		{"stage", "surrogates"}, {"stage", "merge"}, {"simulate"}, {"info"}, {"drop"}, {"surrogates"}, {"upgrade"}, {"query"}, {"export"}, {"plot"}, {"report"}} {
		code, out, _ := topostate(append(args, "--help")...)
		if code != 0 || !strings.Contains(readme, "`topostate "+args[0]) {
			t.Errorf("%v: exit %d, or not in README's commands table", args, code)
		}
		if regexp.MustCompile(`--[a-z-]+ value\b`).MatchString(out) {
			t.Errorf("%v --help has a bare 'value' placeholder:\n%s", args, out)
		}
		if strings.Contains(out, "--analysis") && !strings.Contains(out, "--analysis ID") && args[0] != "ingest" && args[0] != "stage" {
			t.Errorf("%v: --analysis is not shown as ID", args)
		}
	}
	// The placeholders README shows (`--out FOLDER`, `--param KEY=VALUE`,
	// `-n N`) are the ones --help shows, in the commands table and in the
	// ingest options table.
	i = strings.Index(readme, "| command | what it does |")
	if i < 0 {
		t.Fatal("README has no commands table")
	}
	commands := readme[i:]
	commands = commands[:strings.Index(commands, "\n\n")]
	placeholder := regexp.MustCompile("(-{1,2}[a-z][a-z-]*) ([A-Z][A-Z=]*)\\b")
	checked := 0
	for _, line := range strings.Split(commands, "\n") {
		m := regexp.MustCompile("^\\| `topostate ([a-z]+)([^`]*)`").FindStringSubmatch(line)
		if m == nil {
			continue
		}
		args := []string{m[1]}
		if m[1] == "stage" {
			args = append(args, "plan")
		}
		_, out, _ := topostate(append(args, "--help")...)
		for _, p := range placeholder.FindAllStringSubmatch(m[2], -1) {
			checked++
			if !regexp.MustCompile(`(^|\n|, )\s*` + regexp.QuoteMeta(p[0]) + `(\s|,)`).MatchString(out) {
				t.Errorf("README's commands table shows %q for %s; %v --help does not", p[0], m[1], args)
			}
		}
	}
	for _, line := range strings.Split(table, "\n") {
		if !strings.HasPrefix(line, "| `--") {
			continue
		}
		for _, p := range placeholder.FindAllStringSubmatch(strings.Split(line, " | ")[0], -1) {
			checked++
			if !strings.Contains(help, "   "+p[0]+" ") && !strings.Contains(help, "   "+p[0]+",") {
				t.Errorf("README's options table shows %q; ingest --help does not", p[0])
			}
		}
	}
	if checked < 15 {
		t.Errorf("%d placeholders checked", checked)
	}
	if strings.Contains(help, "--tr SECONDS") && strings.Contains(help, "(default: 0)") && regexp.MustCompile(`--tr SECONDS.*\(default: 0\)`).MatchString(help) {
		t.Error("--tr shows (default: 0)")
	}
}

// The smaller things a new user meets: one summary line when the window
// exceeds every series; a comma-separated participants.tsv named as such;
// "did you mean sub-4" for a file of sub-004; input_dir stored absolute;
// drop says the file keeps its size and how to shrink it.
func TestNewUserMessages(t *testing.T) {
	tmp := t.TempDir()
	abs, _ := filepath.Abs(goodCohort)
	run := func(args ...string) result { return runCmd(t, cmdOpts{args: args}) }

	r := run("ingest", "--input", abs, "--db", filepath.Join(tmp, "a.duckdb"), "--window", "50", "-q")
	if r.code != exitUsage || strings.Count(r.stderr, "\n  - ") != 1 ||
		!strings.Contains(r.stderr, "every one of the 3 series is shorter than the window of 50 time points") || !strings.Contains(r.stderr, "use --window 12 or less") {
		t.Errorf("window too long: exit %d: %s", r.code, r.stderr)
	}

	comma := filepath.Join(tmp, "comma")
	copyTree(t, abs, comma)
	sheet, _ := os.ReadFile(filepath.Join(comma, "participants.tsv"))
	os.WriteFile(filepath.Join(comma, "participants.tsv"), []byte(strings.ReplaceAll(string(sheet), "\t", ",")), 0o644)
	r = run("ingest", "--input", comma, "--db", filepath.Join(tmp, "b.duckdb"), "--window", "5", "-q")
	if r.code == 0 || !strings.Contains(r.stderr, "participants.tsv:1: the header has commas but no tabs: this sheet is comma-separated") {
		t.Errorf("comma sheet: exit %d: %s", r.code, r.stderr)
	}

	short := filepath.Join(tmp, "short")
	copyTree(t, abs, short)
	os.WriteFile(filepath.Join(short, "participants.tsv"), []byte(strings.Replace(string(sheet), "sub-02\t", "sub-2\t", 1)), 0o644)
	r = run("ingest", "--input", short, "--db", filepath.Join(tmp, "c.duckdb"), "--window", "5", "-q")
	if r.code == 0 || !strings.Contains(r.stderr, "add a row for sub-02") || !strings.Contains(r.stderr, "did you mean sub-2, which it has?") {
		t.Errorf("sub-2: exit %d: %s", r.code, r.stderr)
	}

	// input_dir is absolute even when --input is relative.
	db := filepath.Join(tmp, "d.duckdb")
	cmd := cmdOpts{args: []string{"ingest", "--input", goodCohort, "--db", db, "--window", "5", "--states", "2", "-q"}}
	if r := runCmd(t, cmd); r.code != 0 {
		t.Fatalf("relative ingest: exit %d: %s", r.code, r.stderr)
	}
	if got := querySQL(t, db, `SELECT input_dir FROM analyses`); got != abs {
		t.Errorf("input_dir %q, want %q", got, abs)
	}

	r = run("drop", "--db", db, "--analysis", "latest", "--yes")
	if r.code != 0 || !strings.Contains(r.stdout, "the file keeps its size") || !strings.Contains(r.stdout, "COPY FROM DATABASE old TO new") {
		t.Errorf("drop: exit %d\n%s\n%s", r.code, r.stdout, r.stderr)
	}
}

// The demo's "Next:" lines call the program the way it was called: a
// temporary 'go run' build is named "go run ./cmd/topostate".
func TestSelfCommand(t *testing.T) {
	for _, c := range []struct {
		arg0, want string
		built      bool
	}{
		{"/tmp/go-build2718/b001/exe/topostate", "go run ./cmd/topostate", false},
		{"./bin/topostate", "./bin/topostate", true},
		{"/opt/x y/topostate", "'/opt/x y/topostate'", true},
	} {
		if got, built := selfCommand(c.arg0); got != c.want || built != c.built {
			t.Errorf("selfCommand(%q) = %q, %v; want %q, %v", c.arg0, got, built, c.want, c.built)
		}
	}
}

// Empty session_id: the codebook lists ” as a value meaning "no session"
// and says how to keep it when reading the CSV; the CSV has the empty cell.
func TestSessionIDCodebook(t *testing.T) {
	out := filepath.Join(t.TempDir(), "e")
	if code, _, stderr := topostate("export", "--db", warehouse, "--out", out, "-f", "csv", "--tables", "inputs"); code != 0 {
		t.Fatalf("export: %s", stderr)
	}
	book, _ := os.ReadFile(filepath.Join(out, "codebook.csv"))
	if !strings.Contains(string(book), "inputs,session_id,") || !strings.Contains(string(book), ",'',''=no session,\"none: an empty cell in CSV is the value ''") {
		t.Errorf("codebook:\n%s", book)
	}
	csvb, _ := os.ReadFile(filepath.Join(out, "inputs.csv"))
	if !strings.Contains(string(csvb), "sub-001,,") {
		t.Errorf("inputs.csv:\n%s", csvb)
	}
}

// flatten sets column col (0-based) of a series file to one value on the
// time points from..from+n-1 (0-based; line 1 is the header).
func flattenStretch(t *testing.T, path string, col, from, n int) {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimRight(string(b), "\n"), "\n")
	if from+n >= len(lines) {
		t.Fatalf("%s has %d time points", path, len(lines)-1)
	}
	for tp := from; tp < from+n; tp++ {
		cells := strings.Split(lines[1+tp], "\t")
		cells[col] = "100.25"
		lines[1+tp] = strings.Join(cells, "\t")
	}
	if err := os.WriteFile(path, []byte(strings.Join(lines, "\n")+"\n"), 0o644); err != nil {
		t.Fatal(err)
	}
}

// With --window-seconds in a cohort of two TRs, the undefined-window check
// at validation (shared by ingest, --on-bad-subject skip and stage plan)
// uses each series' own window in points, not one window for the cohort:
// 16 s is 20 points at TR 0.8 s and 8 points at TR 2 s. A region constant
// over exactly 20 points of a TR-0.8 series makes one of its windows
// undefined: refused at validation, skipped with --on-bad-subject skip
// (it once reached the computation, which stopped the run even under
// skip). A region constant over 7 points of a TR-2 series is fine at its
// own 8 points and must not be refused, although a 7-point window (what
// --min-freq 0.2 gives at the cohort's shortest TR) would be undefined.
func TestWindowSecondsUndefinedWindowPerSeries(t *testing.T) {
	tmp := t.TempDir()
	run := func(args ...string) result { return runCmd(t, cmdOpts{args: args}) }
	series := func(dir, sub string) string {
		return filepath.Join(dir, sub, "func", sub+"_task-rest_timeseries.tsv")
	}

	// Without a window option the refusal names the default window (125
	// points: ceil(1 / (0.01 Hz x 0.8 s))), not "--window 0".
	r := run("ingest", "--input", mixedTRCohort(t), "--db", filepath.Join(tmp, "default.duckdb"), "--states", "2", "-q")
	if r.code != exitUsage || !strings.Contains(r.stderr, "the default window (125 time points: 1/--min-freq at the shortest TR) counts time points") || strings.Contains(r.stderr, "--window 0") {
		t.Errorf("mixed TR, default window: exit %d: %s", r.code, r.stderr)
	}

	// Fine at its own window: 7 constant points in a TR-2 series (window 8).
	fine := mixedTRCohort(t)
	flattenStretch(t, series(fine, "sub-004"), 1, 30, 7)
	for _, extra := range [][]string{nil, {"--min-freq", "0.2"}} {
		db := filepath.Join(tmp, fmt.Sprintf("fine%d.duckdb", len(extra)))
		r := run(append([]string{"ingest", "--input", fine, "--db", db, "--window-seconds", "16", "--states", "2", "-q"}, extra...)...)
		if r.code != 0 {
			t.Fatalf("7 constant points at a window of 8 (%v): exit %d\n%s", extra, r.code, r.stderr)
		}
		if got := querySQL(t, db, `SELECT count(*) || ' ' || max(window_points) FILTER (WHERE subject_id = 'sub-004') FROM inputs`); got != "6 8" {
			t.Errorf("%v: inputs %q, want 6 series with sub-004 at 8 points", extra, got)
		}
	}
	// The core networks of the group topology test (docs/methods.md §7)
	// are over N = the widest window in points, 20, for every series (N
	// was once the --min-freq window, 125 points, which no series used, so
	// nearly no subject had a core network): a subject and state has one
	// exactly when it has at least 20 core time points.
	db0 := filepath.Join(tmp, "fine0.duckdb")
	if got := querySQL(t, db0, `SELECT count(*) FILTER (WHERE (n.core_timepoints >= 20) <> (c.subject_id IS NOT NULL))
		|| ' ' || count(DISTINCT i.tr_seconds) FILTER (WHERE c.subject_id IS NOT NULL)
		FROM state_networks n JOIN inputs i USING (analysis_id, subject_id, session_id)
		LEFT JOIN (SELECT DISTINCT analysis_id, subject_id, session_id, state FROM core_betti_curves) c USING (analysis_id, subject_id, session_id, state)`); got != "0 2" {
		t.Errorf("core networks: %q, want 0 disagreeing with N = 20 and core networks at both TRs", got)
	}

	// Undefined at its own window: 20 constant points in a TR-0.8 series.
	bad := mixedTRCohort(t)
	flattenStretch(t, series(bad, "sub-001"), 1, 40, 20)
	want := `sub-001_task-rest_timeseries.tsv: column 2: a window's correlations are undefined: region "node002" does not vary over time points 41..60, lines 42..61 (window 41 of 20 time points)`
	db := filepath.Join(tmp, "bad.duckdb")
	r = run("ingest", "--input", bad, "--db", db, "--window-seconds", "16", "--states", "2", "-q")
	if r.code != 1 || !strings.Contains(r.stderr, want) || !strings.Contains(r.stderr, "nothing was written") {
		t.Errorf("20 constant points at a window of 20: exit %d\n%s", r.code, r.stderr)
	}
	if _, err := os.Stat(db); err == nil {
		t.Error("the refused ingest left a warehouse")
	}
	// 19 constant points are fine at 20.
	ok19 := mixedTRCohort(t)
	flattenStretch(t, series(ok19, "sub-001"), 1, 40, 19)
	if r := run("ingest", "--input", ok19, "--db", filepath.Join(tmp, "ok19.duckdb"), "--window-seconds", "16", "--states", "2", "-q"); r.code != 0 {
		t.Errorf("19 constant points at a window of 20: exit %d\n%s", r.code, r.stderr)
	}
	// --on-bad-subject skip: left out at validation, by ingest and stage plan.
	r = run("ingest", "--input", bad, "--db", db, "--window-seconds", "16", "--states", "2", "-q", "--on-bad-subject", "skip")
	if r.code != 0 {
		t.Fatalf("skip: exit %d\n%s", r.code, r.stderr)
	}
	if got := querySQL(t, db, `SELECT count(*) FROM excluded_inputs WHERE path LIKE '%sub-001%' AND reason LIKE '%does not vary over time points 41..60%'`); got != "1" {
		t.Errorf("excluded_inputs: %s rows for sub-001", got)
	}
	if got := querySQL(t, db, `SELECT count(*) FROM inputs`); got != "5" {
		t.Errorf("%s series analysed, want 5", got)
	}
	out := mustRun(t, "stage", "plan", "--work", filepath.Join(tmp, "work"), "--shards", "2", "--input", bad,
		"--window-seconds", "16", "--states", "2", "--on-bad-subject", "skip")
	if !strings.Contains(out, "planned 5 series") || !strings.Contains(out, "(1 excluded)") {
		t.Errorf("stage plan with skip: %s", out)
	}
}

// Through the binary: the same contrast named in either order gives the
// same permutation p-values and the opposite difference (the seed stream
// does not depend on which group is named first; a mean difference
// changes sign when the groups swap, by its definition); and pearson_test
// with a NULL refuses with advice that keeps x and y paired.
func TestContrastOrderAndPairing(t *testing.T) {
	run := func(args ...string) result { return runCmd(t, cmdOpts{args: args}) }
	rows := func(a, b string) map[string][]string {
		r := run("query", "--db", warehouse, "state_dwell_by_group", "--param", "group_a="+a, "--param", "group_b="+b, "--param", "n_perm=999", "-f", "csv")
		if r.code != 0 {
			t.Fatalf("%s vs %s: exit %d: %s", a, b, r.code, r.stderr)
		}
		lines := strings.Split(strings.TrimSpace(r.stdout), "\n")
		head := strings.Split(lines[0], ",")
		out := map[string][]string{}
		for _, l := range lines[1:] {
			cells := strings.Split(l, ",")
			for i, h := range head {
				out[h] = append(out[h], cells[i])
			}
		}
		return out
	}
	ab, ba := rows("A", "B"), rows("B", "A")
	if len(ab["perm_p"]) < 4 {
		t.Fatalf("%d rows", len(ab["perm_p"]))
	}
	for i := range ab["perm_p"] {
		for _, col := range []string{"perm_p", "perm_p_bh", "welch_p"} {
			if ab[col][i] != ba[col][i] {
				t.Errorf("row %d %s: %s for A vs B, %s for B vs A", i+1, col, ab[col][i], ba[col][i])
			}
		}
		x, err1 := strconv.ParseFloat(ab["difference"][i], 64)
		y, err2 := strconv.ParseFloat(ba["difference"][i], 64)
		if err1 != nil || err2 != nil || math.Abs(x+y) > 1e-9*math.Max(1, math.Abs(x)) {
			t.Errorf("row %d: difference %s for A vs B, %s for B vs A", i+1, ab["difference"][i], ba["difference"][i])
		}
	}
	r := run("query", "--db", warehouse, "--sql", "SELECT pearson_test([1.0, NULL, 3.0, 4.0], [1.0, 2.0, 3.0, 5.0])")
	if r.code == 0 || !strings.Contains(r.stderr, "FILTER (WHERE x IS NOT NULL AND y IS NOT NULL)") || !strings.Contains(r.stderr, "breaks the pairing") {
		t.Errorf("pearson_test with a NULL: exit %d: %s", r.code, r.stderr)
	}
}
