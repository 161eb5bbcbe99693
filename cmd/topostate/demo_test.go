package main

import (
	"math"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"
)

// tsvRows parses the tab-separated output of `query -f tsv` into maps
// keyed by column name.
func tsvRows(t *testing.T, out string) []map[string]string {
	t.Helper()
	lines := strings.Split(strings.TrimRight(out, "\n"), "\n")
	if len(lines) < 2 {
		t.Fatalf("query printed no rows:\n%s", out)
	}
	head := strings.Split(lines[0], "\t")
	var rows []map[string]string
	for _, l := range lines[1:] {
		f := strings.Split(l, "\t")
		row := map[string]string{}
		for i, h := range head {
			if i < len(f) {
				row[h] = f[i]
			}
		}
		rows = append(rows, row)
	}
	return rows
}

// TestDemoDwellTable runs the demo through the real command and holds that
// its dwell table is the dwell rows of state_dwell_by_group (complete runs
// only, the subjects left out counted) as `query` prints them with the
// parameters the demo names, and that those rows agree with a
// recomputation from state_metrics: per group the mean of the stored
// complete-run dwell times, the counts of subjects left out, and Welch's t
// test computed here from its formula (Welch 1947; t and the
// Welch-Satterthwaite df) with the Student t distribution of gonum
// stat/distuv.
func TestDemoDwellTable(t *testing.T) {
	if testing.Short() {
		t.Skip("the demo ingests a 28-subject cohort")
	}
	dir := t.TempDir()
	r := runCmd(t, cmdOpts{args: []string{"demo", "--dir", dir, "-q", "--surrogates", "0"}, timeout: 5 * time.Minute})
	if r.code != 0 {
		t.Fatalf("demo: exit %d\n%s", r.code, r.stderr)
	}
	if !strings.Contains(r.stdout, "complete runs only") || !strings.Contains(r.stdout, "state_dwell_by_group --param group_a=practice --param group_b=waitlist --param n_perm=4999 --param seed=7") {
		t.Fatalf("the demo's dwell table does not say it shows complete runs of state_dwell_by_group:\n%s", r.stdout)
	}
	// The printed table: the lines after its header, up to the note.
	printed := map[string][]string{}
	in := false
	for _, l := range strings.Split(r.stdout, "\n") {
		f := strings.Fields(l)
		switch {
		case len(f) > 0 && f[0] == "state" && strings.Contains(l, "cut runs only"):
			in = true
		case in && len(f) > 0 && f[0] == "(left":
			in = false
		case in && len(f) > 0:
			printed[f[0]] = f
		}
	}
	db := filepath.Join(dir, "demo.duckdb")
	q := runCmd(t, cmdOpts{args: []string{"query", "--db", db, "state_dwell_by_group", "--param", "group_a=practice",
		"--param", "group_b=waitlist", "--param", "n_perm=4999", "--param", "seed=7", "-f", "tsv"}})
	if q.code != 0 {
		t.Fatalf("query: exit %d\n%s", q.code, q.stderr)
	}
	raw := runCmd(t, cmdOpts{args: []string{"query", "--db", db, "-f", "tsv", "--sql",
		`SELECT m.state, s."group" AS grp, m.occupancy, m.complete_dwell_seconds AS d
		 FROM state_metrics m JOIN subjects s USING (analysis_id, subject_id) ORDER BY m.state, m.subject_id`}})
	if raw.code != 0 {
		t.Fatalf("query --sql: exit %d\n%s", raw.code, raw.stderr)
	}
	type groupData struct {
		d                []float64
		noVisit, cutOnly int
	}
	ref := map[string]map[string]*groupData{}
	for _, row := range tsvRows(t, raw.stdout) {
		st := row["state"]
		if ref[st] == nil {
			ref[st] = map[string]*groupData{"practice": {}, "waitlist": {}}
		}
		g := ref[st][row["grp"]]
		occ, _ := strconv.ParseFloat(row["occupancy"], 64)
		switch d, err := strconv.ParseFloat(row["d"], 64); {
		case err == nil:
			g.d = append(g.d, d)
		case occ == 0:
			g.noVisit++
		default:
			g.cutOnly++
		}
	}
	dwellRows := 0
	for _, row := range tsvRows(t, q.stdout) {
		if row["measure"] != "dwell_seconds" {
			continue
		}
		dwellRows++
		st := row["state"]
		f := printed[st]
		if len(f) < 14 {
			t.Errorf("state %s: no row in the demo's table (%q)", st, f)
			continue
		}
		// f: state, mean_a, (n=..), mean_b, (n=..), nv_a, +, nv_b, cut_a, +, cut_b, t, df, p, p_bh, perm
		num := func(col, format string) string {
			v, err := strconv.ParseFloat(row[col], 64)
			if err != nil {
				return "-"
			}
			return strconv.FormatFloat(v, 'f', map[string]int{"%.1f": 1, "%.2f": 2, "%.4f": 4}[format], 64)
		}
		want := []string{st, num("mean_a", "%.1f"), "(n=" + row["n_a"] + ")", num("mean_b", "%.1f"), "(n=" + row["n_b"] + ")",
			row["n_without_visit_a"], "+", row["n_without_visit_b"], row["n_censored_only_a"], "+", row["n_censored_only_b"],
			num("welch_t", "%.2f"), num("welch_df", "%.1f"), num("welch_p", "%.4f"), num("welch_p_bh", "%.4f"), num("perm_p", "%.4f")}
		if strings.Join(f, " ") != strings.Join(want, " ") {
			t.Errorf("state %s: the demo prints\n  %s\nstate_dwell_by_group gives\n  %s", st, strings.Join(f, " "), strings.Join(want, " "))
		}
		// Against state_metrics: complete runs, subjects left out, Welch.
		a, b := ref[st]["practice"], ref[st]["waitlist"]
		if n, _ := strconv.Atoi(row["n_a"]); n != len(a.d) || row["n_without_visit_a"] != strconv.Itoa(a.noVisit) || row["n_censored_only_a"] != strconv.Itoa(a.cutOnly) {
			t.Errorf("state %s practice: n %s, no visit %s, cut only %s; state_metrics: %d, %d, %d", st, row["n_a"], row["n_without_visit_a"], row["n_censored_only_a"], len(a.d), a.noVisit, a.cutOnly)
		}
		if n, _ := strconv.Atoi(row["n_b"]); n != len(b.d) || row["n_without_visit_b"] != strconv.Itoa(b.noVisit) || row["n_censored_only_b"] != strconv.Itoa(b.cutOnly) {
			t.Errorf("state %s waitlist: n %s, no visit %s, cut only %s; state_metrics: %d, %d, %d", st, row["n_b"], row["n_without_visit_b"], row["n_censored_only_b"], len(b.d), b.noVisit, b.cutOnly)
		}
		if len(a.d) < 2 || len(b.d) < 2 {
			continue
		}
		ma, mb := stat.Mean(a.d, nil), stat.Mean(b.d, nil)
		if got, _ := strconv.ParseFloat(row["mean_a"], 64); math.Abs(got-ma) > 1e-9*math.Abs(ma) {
			t.Errorf("state %s: mean_a %v, mean of complete_dwell_seconds %v", st, got, ma)
		}
		va, vb := stat.Variance(a.d, nil)/float64(len(a.d)), stat.Variance(b.d, nil)/float64(len(b.d))
		tw := (ma - mb) / math.Sqrt(va+vb)
		df := (va + vb) * (va + vb) / (va*va/float64(len(a.d)-1) + vb*vb/float64(len(b.d)-1))
		p := 2 * distuv.StudentsT{Mu: 0, Sigma: 1, Nu: df}.CDF(-math.Abs(tw))
		if got, _ := strconv.ParseFloat(row["welch_p"], 64); math.Abs(got-p) > 1e-9 {
			t.Errorf("state %s: welch_p %v, Welch from state_metrics %v (t %v, df %v)", st, got, p, tw, df)
		}
	}
	if dwellRows == 0 || len(printed) != dwellRows {
		t.Errorf("%d dwell rows from the query, %d printed by the demo", dwellRows, len(printed))
	}
}
