package report

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strconv"
	"strings"
	"sync"
	"testing"

	"golang.org/x/net/html"
	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/ingest"
	"github.com/topostate/topostate/queries"
	"github.com/topostate/topostate/schema"
)

// The test warehouse: an invented cohort of 12 simulated subjects plus one
// series too short to analyse (left out under --on-bad-subject skip). The
// simulator's groups A and B are called "day" and "night", two subjects
// form a third group whose name holds HTML's special characters, and one
// has no group (n/a). Region r08 never changes in the first subject, so it
// is dropped everywhere (--constant-region drop). k is chosen by the elbow
// over 2..5. The analysis name also holds special characters.
const (
	analysisName = `quay "7" & <yard>`
	lateGroup    = `late & "swing" <i>`
	testNPerm    = 199
	// testCurveNPerm differs from testNPerm so that the tables below show
	// each reached its own query.
	testCurveNPerm = 99
	cautionText    = "Research use only: results are not a diagnosis and must not guide the care of a patient; defer to clinical judgement."
)

var (
	once    sync.Once
	whPath  string
	pageB   []byte
	built   *Report
	onceErr error
)

func TestMain(m *testing.M) {
	code := m.Run()
	if whPath != "" {
		os.RemoveAll(filepath.Dir(whPath))
	}
	os.Exit(code)
}

// fixture builds the warehouse and the report once per test run.
func fixture(t *testing.T) (*Report, []byte) {
	t.Helper()
	once.Do(func() {
		dir, err := os.MkdirTemp("", "report-test-")
		if err != nil {
			onceErr = err
			return
		}
		if whPath, onceErr = buildWarehouse(dir); onceErr != nil {
			return
		}
		built, pageB, onceErr = buildReport(whPath, "group")
	})
	if onceErr != nil {
		t.Fatal(onceErr)
	}
	return built, pageB
}

func buildWarehouse(dir string) (string, error) {
	spec := compute.CohortSpec{Subjects: 12, Regions: 8, Timepoints: 150, States: 3, TR: 2,
		Stickiness: 0.92, GroupEffect: 0.05, Offset: 600, Seed: 23}
	subs, err := compute.SimulateCohort(spec)
	if err != nil {
		return "", err
	}
	names := make([]string, spec.Regions)
	for j := range names {
		names[j] = fmt.Sprintf("r%02d", j+1)
	}
	var ids []string
	var series []compute.Series
	var rows []ingest.SyntheticParticipant
	for i, s := range subs {
		group := map[string]string{"A": "day", "B": "night"}[s.Group]
		switch i {
		case 9:
			group = "n/a"
		case 10, 11:
			group = lateGroup
		}
		if i == 0 {
			for tp := range s.Series.T {
				s.Series.Data[tp*s.Series.P+7] = 600 // r08 constant in this series
			}
		}
		ids, series = append(ids, s.ID), append(series, s.Series)
		rows = append(rows, ingest.SyntheticParticipant{ID: s.ID, Cells: []string{
			group, strconv.Itoa(20 + 3*i), strconv.FormatFloat(10+float64(i%5)*1.5, 'f', 1, 64), []string{"north", "south"}[i%2]}})
	}
	short := compute.NewSeries(10, spec.Regions)
	rng := rand.New(rand.NewPCG(1, 2))
	for i := range short.Data {
		short.Data[i] = rng.NormFloat64()
	}
	ids, series = append(ids, "sub-099"), append(series, short)
	rows = append(rows, ingest.SyntheticParticipant{ID: "sub-099", Cells: []string{"day", "40", "9.0", "north"}})
	cohort := filepath.Join(dir, "cohort")
	if err := ingest.WriteCohort(cohort, names, 2, ids, series, []string{"group", "age", "score", "site"}, rows); err != nil {
		return "", err
	}
	o := ingest.Defaults()
	o.Input, o.Window, o.StatesMin, o.StatesMax, o.Restarts, o.Grid, o.Seed, o.Analysis = cohort, 20, 2, 5, 3, "-1:1:41", 5, analysisName
	o.OnBadSubject, o.ConstantRegion = "skip", "drop"
	path := filepath.Join(dir, "w.duckdb")
	if _, err := ingest.IntoFile(context.Background(), path, o, nil); err != nil {
		return "", err
	}
	return path, nil
}

func buildReport(path, group string, adjustAll ...string) (*Report, []byte, error) {
	ctx := context.Background()
	db, err := schema.Open(path, true, nil)
	if err != nil {
		return nil, nil, err
	}
	defer db.Close()
	conn, err := db.Conn(ctx)
	if err != nil {
		return nil, nil, err
	}
	defer conn.Close()
	if err := queries.Register(ctx, conn, queries.FS); err != nil {
		return nil, nil, err
	}
	r, err := Build(ctx, db, conn, Options{Analysis: analysisName, Group: group, NPerm: testNPerm, CurveNPerm: testCurveNPerm, Seed: 3,
		DBPath: "my cohort.duckdb", Caution: cautionText, Generator: "topostate test", AdjustAll: strings.Join(adjustAll, "")})
	if err != nil {
		return nil, nil, err
	}
	var buf bytes.Buffer
	if err := r.Render(&buf); err != nil {
		return nil, nil, err
	}
	return r, buf.Bytes(), nil
}

// ---- reading the page ----

func parse(t *testing.T, b []byte) *html.Node {
	t.Helper()
	doc, err := html.Parse(bytes.NewReader(b))
	if err != nil {
		t.Fatal(err)
	}
	return doc
}

func walk(n *html.Node, f func(*html.Node)) {
	f(n)
	for c := n.FirstChild; c != nil; c = c.NextSibling {
		walk(c, f)
	}
}

func attr(n *html.Node, key string) (string, bool) {
	for _, a := range n.Attr {
		if a.Key == key {
			return a.Val, true
		}
	}
	return "", false
}

func find(root *html.Node, match func(*html.Node) bool) []*html.Node {
	var out []*html.Node
	walk(root, func(n *html.Node) {
		if n.Type == html.ElementNode && match(n) {
			out = append(out, n)
		}
	})
	return out
}

func byID(root *html.Node, id string) *html.Node {
	ns := find(root, func(n *html.Node) bool { v, _ := attr(n, "id"); return v == id })
	if len(ns) != 1 {
		return nil
	}
	return ns[0]
}

func textOf(n *html.Node) string {
	var b strings.Builder
	walk(n, func(c *html.Node) {
		if c.Type == html.TextNode {
			b.WriteString(c.Data)
		}
	})
	return b.String()
}

func isTag(tag string) func(*html.Node) bool {
	return func(n *html.Node) bool { return n.Data == tag }
}

// voidElements have no end tag in HTML (WHATWG HTML, "void elements").
var voidElements = []string{"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source", "track", "wbr"}

// wellFormed checks what html.Parse forgives: every element but the void
// ones is closed, in order; ids are unique; the document starts with
// <!DOCTYPE html> and declares UTF-8 and a language.
func wellFormed(b []byte) []string {
	var problems []string
	z := html.NewTokenizer(bytes.NewReader(b))
	var stack []string
	ids := map[string]bool{}
	first := true
	for {
		tt := z.Next()
		if tt == html.ErrorToken {
			if z.Err() != io.EOF {
				problems = append(problems, z.Err().Error())
			}
			break
		}
		tok := z.Token()
		if first && tt != html.TextToken {
			if tt != html.DoctypeToken || !strings.EqualFold(tok.Data, "html") {
				problems = append(problems, "does not start with <!DOCTYPE html>")
			}
			first = false
		}
		switch tt {
		case html.StartTagToken, html.SelfClosingTagToken:
			for _, a := range tok.Attr {
				if a.Key == "id" {
					if ids[a.Val] {
						problems = append(problems, "duplicate id "+a.Val)
					}
					ids[a.Val] = true
				}
			}
			if tt == html.StartTagToken && !slices.Contains(voidElements, tok.Data) {
				stack = append(stack, tok.Data)
			}
		case html.EndTagToken:
			if len(stack) == 0 || stack[len(stack)-1] != tok.Data {
				problems = append(problems, fmt.Sprintf("</%s> does not close the open element (open: %v)", tok.Data, stack[max(0, len(stack)-3):]))
				return problems
			}
			stack = stack[:len(stack)-1]
		}
	}
	if len(stack) > 0 {
		problems = append(problems, fmt.Sprintf("elements never closed: %v", stack))
	}
	s := string(b)
	if !strings.Contains(s, `<meta charset="utf-8">`) || !strings.Contains(s, `<html lang="en">`) {
		problems = append(problems, "no UTF-8 declaration or language")
	}
	return problems
}

// fetchingElements load something when a browser meets them.
var fetchingElements = []string{"script", "link", "iframe", "frame", "object", "embed", "img", "audio", "video", "source", "base", "track", "picture", "portal"}

// urlAttributes hold a URL the browser may follow or fetch.
var urlAttributes = []string{"href", "src", "srcset", "action", "formaction", "poster", "background", "cite", "data", "ping", "manifest"}

// selfContained lists every way the page could reach outside itself: an
// element that fetches, a URL attribute that is neither an anchor (#...)
// nor data:, any attribute or style sheet naming http(s), CSS imports and
// non-data url(), and a refresh. Text may mention addresses freely.
func selfContained(doc *html.Node) []string {
	var problems []string
	cssOK := func(where, css string) {
		l := strings.ToLower(css)
		if strings.Contains(l, "@import") || strings.Contains(l, "http:") || strings.Contains(l, "https:") ||
			strings.Count(l, "url(") != strings.Count(l, "url(data:") {
			problems = append(problems, where+": style refers outside the page")
		}
	}
	walk(doc, func(n *html.Node) {
		if n.Type != html.ElementNode {
			return
		}
		if slices.Contains(fetchingElements, n.Data) {
			problems = append(problems, "element <"+n.Data+">")
		}
		for _, a := range n.Attr {
			v := strings.ToLower(strings.TrimSpace(a.Val))
			if strings.Contains(v, "http:") || strings.Contains(v, "https:") || strings.Contains(v, "ftp:") || strings.HasPrefix(v, "//") {
				problems = append(problems, fmt.Sprintf("<%s %s=%q>", n.Data, a.Key, a.Val))
			}
			if slices.Contains(urlAttributes, a.Key) && !strings.HasPrefix(v, "#") && !strings.HasPrefix(v, "data:") {
				problems = append(problems, fmt.Sprintf("<%s %s=%q> leaves the page", n.Data, a.Key, a.Val))
			}
			if a.Key == "style" {
				cssOK("<"+n.Data+" style>", a.Val)
			}
			if a.Key == "http-equiv" && strings.EqualFold(a.Val, "refresh") {
				problems = append(problems, "meta refresh")
			}
		}
		if n.Data == "style" {
			cssOK("<style>", textOf(n))
		}
	})
	return problems
}

// ---- the page's structure ----

func TestReportIsValidSelfContainedHTML(t *testing.T) {
	r, b := fixture(t)
	if p := wellFormed(b); len(p) > 0 {
		t.Errorf("not well-formed: %v", p)
	}
	doc := parse(t, b)
	if p := selfContained(doc); len(p) > 0 {
		t.Errorf("refers outside the page: %v", p)
	}
	// Both checkers can fail (controls).
	if p := wellFormed([]byte(`<!DOCTYPE html><html lang="en"><head><meta charset="utf-8"></head><body><div><p>x</div></body></html>`)); len(p) == 0 {
		t.Error("wellFormed passed a misnested page")
	}
	for _, bad := range []string{`<img src="a.png">`, `<a href="https://example.org/">x</a>`, `<div style="background:url(x.png)"></div>`,
		`<style>@import "x.css";</style>`, `<svg><image href="http://x/y.png"/></svg>`, `<script>1</script>`} {
		if p := selfContained(parse(t, []byte(bad))); len(p) == 0 {
			t.Errorf("selfContained passed %s", bad)
		}
	}
	if p := selfContained(parse(t, []byte(`<p>see https://example.org/ in text</p><a href="#x">x</a>`))); len(p) > 0 {
		t.Errorf("selfContained refused text or an anchor: %v", p)
	}

	// Every section has its id, an <h2> and an entry in the contents.
	nav := find(doc, isTag("nav"))
	for _, id := range Sections {
		s := byID(doc, id)
		if s == nil || s.Data != "section" {
			t.Errorf("no <section id=%q>", id)
			continue
		}
		if h := find(s, isTag("h2")); len(h) != 1 || strings.TrimSpace(textOf(h[0])) == "" {
			t.Errorf("section %s: want one non-empty <h2>", id)
		}
		if len(nav) != 1 || len(find(nav[0], func(n *html.Node) bool { v, _ := attr(n, "href"); return v == "#"+id })) != 1 {
			t.Errorf("section %s: no link in the contents", id)
		}
	}
	// Seven figures inline (elbow, centroids, occupancy, dwell,
	// transitions, Betti-0, Betti-1), each drawn with many elements.
	svgs := find(doc, isTag("svg"))
	if len(svgs) < 7 {
		t.Errorf("%d inline <svg> elements, want at least 7", len(svgs))
	}
	for _, s := range svgs {
		if n := len(find(s, func(*html.Node) bool { return true })); n < 25 {
			l, _ := attr(s, "aria-label")
			t.Errorf("svg %q has only %d elements", l, n)
		}
		if s.Namespace != "svg" {
			t.Errorf("svg parsed in namespace %q", s.Namespace)
		}
	}
	// The caution stands before the first section, word for word.
	c := byID(doc, "caution")
	if c == nil || !strings.Contains(textOf(c), cautionText) {
		t.Errorf("no caution box with %q", cautionText)
	}
	if i, j := bytes.Index(b, []byte(`id="caution"`)), bytes.Index(b, []byte(`<section`)); i < 0 || i > j {
		t.Error("the caution does not come before the sections")
	}

	// Names with HTML's special characters are text, never markup: the
	// group named lateGroup has an <i> in it, the analysis name a <yard>.
	if n := find(doc, func(n *html.Node) bool { return n.Data == "i" || n.Data == "yard" }); len(n) > 0 {
		t.Errorf("a name became markup: %d <%s> elements", len(n), n[0].Data)
	}
	if h := find(doc, isTag("h1")); len(h) != 1 || !strings.Contains(textOf(h[0]), analysisName) {
		t.Errorf("h1 does not name the analysis %q", analysisName)
	}
	if !strings.Contains(textOf(byID(doc, "t-groups")), lateGroup) {
		t.Errorf("groups table does not show %q", lateGroup)
	}
	// ... including inside the figures (the SVG canvas escapes its text).
	inSVG := false
	for _, s := range svgs {
		if strings.Contains(textOf(s), lateGroup) {
			inSVG = true
		}
	}
	if !inSVG {
		t.Errorf("no figure labels the group %q", lateGroup)
	}
	if len(r.Contrasts) != 3 {
		t.Errorf("%d contrasts, want 3 (day, night and %q in pairs; n/a left out)", len(r.Contrasts), lateGroup)
	}
}

// The cohort section shows what the warehouse holds: counted here with
// plain SQL on the raw tables.
func TestCohortSummary(t *testing.T) {
	r, b := fixture(t)
	doc := parse(t, b)
	db, err := schema.Open(whPath, true, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	var series, subjects, k int
	if err := db.QueryRow(`SELECT count(*), count(DISTINCT subject_id) FROM inputs`).Scan(&series, &subjects); err != nil {
		t.Fatal(err)
	}
	if err := db.QueryRow(`SELECT n_states FROM analyses`).Scan(&k); err != nil {
		t.Fatal(err)
	}
	if series != 12 || r.Cohort.Series != series || r.Cohort.Subjects != subjects || r.Cohort.States != k {
		t.Errorf("cohort %+v; tables: %d series, %d subjects, k = %d", r.Cohort, series, subjects, k)
	}
	// Groups: series per group value, NULL as n/a.
	rows, err := db.Query(`SELECT coalesce(s."group", 'n/a'), count(*) FROM inputs i JOIN subjects s USING (analysis_id, subject_id) GROUP BY 1`)
	if err != nil {
		t.Fatal(err)
	}
	want := map[string]string{}
	for rows.Next() {
		var g string
		var n int
		rows.Scan(&g, &n)
		want["group="+g] = strconv.Itoa(n)
	}
	rows.Close()
	got := map[string]string{}
	for _, tr := range find(byID(doc, "t-groups"), isTag("tr")) {
		key, ok := attr(tr, "data-key")
		if !ok {
			continue
		}
		for _, sp := range find(tr, func(n *html.Node) bool { v, _ := attr(n, "data-col"); return v == "series" }) {
			got[key], _ = attr(sp, "data-v")
		}
	}
	if fmt.Sprint(got) != fmt.Sprint(want) {
		t.Errorf("groups shown %v, tables %v", got, want)
	}
	// The short series is listed as left out, r08 as dropped.
	if ex := byID(doc, "t-excluded"); ex == nil || !strings.Contains(textOf(ex), "sub-099") {
		t.Error("the excluded series sub-099 is not listed")
	}
	if d := byID(doc, "dropped-regions"); d == nil || strings.TrimSpace(textOf(d)) != "r08" {
		t.Error("the dropped region r08 is not listed")
	}
	// Settings: every member of analyses.parameters, with its value.
	var params string
	db.QueryRow(`SELECT parameters->>'window' || '/' || (parameters->>'on_bad_subject') FROM analyses`).Scan(&params)
	set := textOf(byID(doc, "t-settings"))
	if params != "20/skip" || !strings.Contains(set, "window20") || !strings.Contains(set, "on_bad_subjectskip") {
		t.Errorf("settings table misses window or on_bad_subject (%s):\n%s", params, set)
	}
	// The elbow: the picks shown are the ones stored.
	var chord, second int
	db.QueryRow(`SELECT max(k) FILTER (WHERE chord_pick), max(k) FILTER (WHERE second_diff_pick) FROM elbow`).Scan(&chord, &second)
	states := textOf(byID(doc, "states"))
	if chord == 0 || second == 0 || r.Elbow.Chord != chord || r.Elbow.SecondDiff != second ||
		!strings.Contains(states, fmt.Sprintf("picks k = %d", chord)) || !strings.Contains(states, fmt.Sprintf("curve picks k = %d", second)) {
		t.Errorf("elbow picks: report %d/%d, table %d/%d; text: %s", r.Elbow.Chord, r.Elbow.SecondDiff, chord, second, states)
	}
	// The rule that chose k is the stored k_rule, named in words (an analysis
	// whose k came from prediction strength once read as chosen by the chord).
	var rule string
	db.QueryRow(`SELECT parameters->>'k_rule' FROM analyses`).Scan(&rule)
	words := map[string]string{"strength": "prediction strength", "gap": "the gap statistic", "chord": "the chord rule", "second-diff": "the largest second difference"}[rule]
	if words == "" || !strings.Contains(states, "chosen by "+words+" (--k-rule "+rule+";") {
		t.Errorf("k_rule %q not named in: %s", rule, states)
	}
	// Every stored setting has its meaning beside it.
	for _, st := range r.Settings {
		if st.Meaning == "" {
			t.Errorf("setting %s has no meaning in the report", st.Key)
		}
	}
}

// ---- the numbers ----

// spans returns the value spans of a row: data-col -> (data-v, text).
func spans(n *html.Node) map[string][2]string {
	out := map[string][2]string{}
	for _, s := range find(n, func(n *html.Node) bool { _, ok := attr(n, "data-col"); return ok }) {
		c, _ := attr(s, "data-col")
		v, _ := attr(s, "data-v")
		out[c] = [2]string{v, textOf(s)}
	}
	return out
}

// tableRows returns a table's rows by data-key.
func tableRows(t *testing.T, doc *html.Node, id string) map[string]*html.Node {
	t.Helper()
	tab := byID(doc, id)
	if tab == nil {
		t.Fatalf("no table %s", id)
	}
	out := map[string]*html.Node{}
	for _, tr := range find(tab, isTag("tr")) {
		if k, ok := attr(tr, "data-key"); ok {
			out[k] = tr
		}
	}
	return out
}

// columnHeads returns the headings of the columns in which table id
// shows values of column col.
func columnHeads(t *testing.T, doc *html.Node, id, col string) []string {
	t.Helper()
	tab := byID(doc, id)
	heads := find(find(tab, isTag("thead"))[0], isTag("th"))
	var out []string
	for _, tr := range find(find(tab, isTag("tbody"))[0], isTag("tr")) {
		for i, td := range find(tr, isTag("td")) {
			if _, ok := spans(td)[col]; ok && i < len(heads) && !slices.Contains(out, textOf(heads[i])) {
				out = append(out, textOf(heads[i]))
			}
		}
	}
	return out
}

// rounded reports whether shown is v rounded to the digits shown (fixed
// or exponent notation; a sign is allowed).
func rounded(shown string, v float64) bool {
	shown = strings.TrimPrefix(shown, "+")
	x, err := strconv.ParseFloat(shown, 64)
	if err != nil {
		return false
	}
	mant := shown
	exp := 0
	if i := strings.IndexAny(shown, "eE"); i >= 0 {
		mant = shown[:i]
		exp, _ = strconv.Atoi(shown[i+1:])
	}
	dec := 0
	if i := strings.IndexByte(mant, '.'); i >= 0 {
		dec = len(mant) - i - 1
	}
	half := 0.5 * math.Pow(10, float64(exp-dec))
	return math.Abs(x-v) <= half*(1+1e-9)
}

type queryRows = []map[string]any

// labelColumns are shown as words, not numbers (dimension 0 as β0).
var labelColumns = map[string]bool{"dimension": true, "measure": true}

// sameValue compares a data-v attribute with a query value: text and
// integers exactly; floats to 1e-12 relative, because DuckDB's parallel
// aggregates (regr_slope, avg) may add in another order on another run
// and differ in the last bits.
func sameValue(v string, want any) bool {
	if v == full(want) {
		return true
	}
	w, ok := want.(float64)
	if !ok {
		return false
	}
	x, err := strconv.ParseFloat(v, 64)
	return err == nil && math.Abs(x-w) <= 1e-12*math.Max(1, math.Abs(w))
}

func runBundled(t *testing.T, conn *queries.DB, name string, params map[string]string) queryRows {
	t.Helper()
	res, err := runQuery(context.Background(), conn.Conn, name, params)
	if err != nil {
		t.Fatal(err)
	}
	return res.rows
}

// matchTable checks that table id shows exactly the rows of the query, each
// value span holding the query's value (exact, as the shortest text that
// reads back to the same float64) and a rounding of it as its text.
func matchTable(t *testing.T, doc *html.Node, id string, rows queryRows, keys ...string) int {
	t.Helper()
	trs := tableRows(t, doc, id)
	if len(trs) != len(rows) {
		t.Errorf("%s: %d rows shown, the query gives %d", id, len(trs), len(rows))
	}
	checked := 0
	for _, row := range rows {
		k := Key(row, keys...)
		tr := trs[k]
		if tr == nil {
			t.Errorf("%s: no row %s", id, k)
			continue
		}
		for col, sv := range spans(tr) {
			want, ok := row[col]
			if !ok {
				t.Errorf("%s %s: column %s is not in the query's output", id, k, col)
				continue
			}
			if !sameValue(sv[0], want) {
				t.Errorf("%s %s %s: data-v %q, query %q", id, k, col, sv[0], full(want))
			}
			if x, ok := num(want); ok && !math.IsNaN(x) && !labelColumns[col] && !rounded(sv[1], x) {
				t.Errorf("%s %s %s: shows %q for %v", id, k, col, sv[1], x)
			}
			checked++
		}
	}
	return checked
}

// The tables show the bundled queries' results, run here again through
// the same runner on a connection of their own with the same parameters.
func TestNumbersEqualBundledQueries(t *testing.T) {
	r, b := fixture(t)
	doc := parse(t, b)
	qdb, err := queries.Open(context.Background(), whPath)
	if err != nil {
		t.Fatal(err)
	}
	defer qdb.Close()
	aid := strconv.FormatInt(r.Analysis.ID, 10)
	checked := 0
	for _, c := range r.Contrasts {
		p := map[string]string{"analysis": aid, "group_column": "group", "group_a": c.A, "group_b": c.B}
		pp := map[string]string{"n_perm": strconv.Itoa(testNPerm), "seed": "3"}
		for k, v := range p {
			pp[k] = v
		}
		checked += matchTable(t, doc, "t-dwell-"+c.ID, runBundled(t, qdb, "state_dwell_by_group", pp), "state", "measure")
		// Each group's values stand under its name.
		for col, head := range map[string]string{"mean_a": c.A, "n_a": c.A, "mean_b": c.B, "sd_b": c.B, "welch_p_bh": "p, BH", "perm_p": "p perm."} {
			if got := columnHeads(t, doc, "t-dwell-"+c.ID, col); len(got) != 1 || got[0] != head {
				t.Errorf("t-dwell-%s: %s under the headings %q, want %q", c.ID, col, got, head)
			}
		}
		cp := map[string]string{"n_perm": strconv.Itoa(testCurveNPerm), "seed": "3"}
		for k, v := range p {
			cp[k] = v
		}
		checked += matchTable(t, doc, "t-filtration-"+c.ID, runBundled(t, qdb, "filtration_tests_by_group", cp), "state", "dimension")
		// Transitions: a matrix; each cell holds both groups' means.
		trs := tableRows(t, doc, "t-transitions-"+c.ID)
		for _, row := range runBundled(t, qdb, "transitions_by_group", p) {
			tr := trs["from_state="+full(row["from_state"])]
			var td *html.Node
			if tr != nil {
				if tds := find(tr, func(n *html.Node) bool { v, _ := attr(n, "data-key"); return v == "to_state="+full(row["to_state"]) }); len(tds) == 1 {
					td = tds[0]
				}
			}
			if td == nil {
				t.Errorf("transitions %s: no cell %v -> %v", c.ID, row["from_state"], row["to_state"])
				continue
			}
			col := "mean_a"
			if full(row["group"]) == c.B {
				col = "mean_b"
			}
			if got := spans(td)[col][0]; !sameValue(got, row["mean_probability"]) {
				t.Errorf("transitions %s %v->%v %s: %q, query %q", c.ID, row["from_state"], row["to_state"], col, got, full(row["mean_probability"]))
			}
			checked++
		}
	}
	checked += matchTable(t, doc, "t-state-pairs", runBundled(t, qdb, "state_pairs_ks", map[string]string{"analysis": aid}), "dimension", "state_a", "state_b")
	if len(r.Covariates) != 2 {
		t.Errorf("%d covariate tables, want 2 (age, score)", len(r.Covariates))
	}
	for _, ct := range r.Covariates {
		checked += matchTable(t, doc, ct.ID, runBundled(t, qdb, "covariate_association", map[string]string{"analysis": aid, "covariate": ct.Caption}), "state", "measure")
	}
	if checked < 200 {
		t.Errorf("only %d values checked", checked)
	}
}

// The occupancy and dwell contrast recomputed from the raw state_metrics
// rows with gonum: group means and sample standard deviations
// (stat.MeanVariance), Welch's t with the Welch-Satterthwaite degrees of
// freedom (Welch 1947) and its two-sided p from Student's t
// (distuv.StudentsT); then the Benjamini-Hochberg (1995) step-up
// adjustment, q_(i) = min_{j >= i} m p_(j) / j, across the states of each
// measure, written here from the paper's definition.
func TestDwellContrastAgainstGonum(t *testing.T) {
	r, b := fixture(t)
	doc := parse(t, b)
	db, err := schema.Open(whPath, true, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	i := slices.IndexFunc(r.Contrasts, func(c Contrast) bool { return c.A == "day" && c.B == "night" })
	if i < 0 {
		t.Fatalf("no contrast day vs night in %+v", r.Contrasts)
	}
	c := r.Contrasts[i]
	type key struct {
		state   int
		measure string
	}
	samples := map[key][2][]float64{}
	// One value per subject: its sessions averaged (the bundled query's unit);
	// dwell time of complete runs only (docs/methods.md §4).
	rows, err := db.Query(`SELECT m.state, s."group", avg(m.occupancy), avg(m.complete_dwell_seconds)
		FROM state_metrics m JOIN subjects s USING (analysis_id, subject_id)
		WHERE s."group" IN ('day', 'night') GROUP BY m.subject_id, m.state, s."group" ORDER BY m.subject_id, m.state`)
	if err != nil {
		t.Fatal(err)
	}
	for rows.Next() {
		var st int
		var g string
		var occ float64
		var dwell *float64
		if err := rows.Scan(&st, &g, &occ, &dwell); err != nil {
			t.Fatal(err)
		}
		side := 0
		if g == "night" {
			side = 1
		}
		s := samples[key{st, "occupancy"}]
		s[side] = append(s[side], occ)
		samples[key{st, "occupancy"}] = s
		if dwell != nil {
			s := samples[key{st, "dwell_seconds"}]
			s[side] = append(s[side], *dwell)
			samples[key{st, "dwell_seconds"}] = s
		}
	}
	rows.Close()
	trs := tableRows(t, doc, "t-dwell-"+c.ID)
	pvals := map[string][]float64{}
	shownBH := map[string][]float64{}
	for st := 1; st <= r.Cohort.States; st++ {
		for _, m := range []string{"occupancy", "dwell_seconds"} {
			s := samples[key{st, m}]
			tr := trs[fmt.Sprintf("state=%d/measure=%s", st, m)]
			if tr == nil {
				t.Fatalf("state %d %s: no row", st, m)
			}
			got := map[string]float64{}
			for col, sv := range spans(tr) {
				got[col], _ = strconv.ParseFloat(sv[0], 64)
			}
			if len(s[0]) < 2 || len(s[1]) < 2 {
				// Too few subjects with a complete run: shown, not tested.
				if got["n_a"] != float64(len(s[0])) || got["n_b"] != float64(len(s[1])) || spans(tr)["welch_p"][0] != "" {
					t.Errorf("state %d %s: n %v/%v welch_p %q, want %d/%d and no test", st, m, got["n_a"], got["n_b"], spans(tr)["welch_p"][0], len(s[0]), len(s[1]))
				}
				pvals[m] = append(pvals[m], math.NaN())
				shownBH[m] = append(shownBH[m], math.NaN())
				continue
			}
			ma, va := stat.MeanVariance(s[0], nil)
			mb, vb := stat.MeanVariance(s[1], nil)
			na, nb := float64(len(s[0])), float64(len(s[1]))
			se2 := va/na + vb/nb
			tw := (ma - mb) / math.Sqrt(se2)
			df := se2 * se2 / ((va/na)*(va/na)/(na-1) + (vb/nb)*(vb/nb)/(nb-1))
			p := 2 * distuv.StudentsT{Mu: 0, Sigma: 1, Nu: df}.Survival(math.Abs(tw))
			for _, w := range []struct {
				col  string
				want float64
			}{{"mean_a", ma}, {"mean_b", mb}, {"sd_a", math.Sqrt(va)}, {"sd_b", math.Sqrt(vb)}, {"n_a", na}, {"n_b", nb},
				{"difference", ma - mb}, {"welch_t", tw}, {"welch_df", df}, {"welch_p", p}} {
				if math.Abs(got[w.col]-w.want) > 1e-9*math.Max(1, math.Abs(w.want)) {
					t.Errorf("state %d %s %s: report %v, gonum %v", st, m, w.col, got[w.col], w.want)
				}
			}
			pvals[m] = append(pvals[m], got["welch_p"])
			shownBH[m] = append(shownBH[m], got["welch_p_bh"])
		}
	}
	for m, all := range pvals {
		// States without a test are not in the family.
		var ps []float64
		var at []int
		for i, p := range all {
			if !math.IsNaN(p) {
				ps, at = append(ps, p), append(at, i)
			}
		}
		want := bhStepUp(ps)
		for j, i := range at {
			if math.Abs(shownBH[m][i]-want[j]) > 1e-12 {
				t.Errorf("%s state %d: BH %v, step-up %v", m, i+1, shownBH[m][i], want[j])
			}
		}
	}
}

// bhStepUp is Benjamini and Hochberg's (1995) adjustment: sort the m
// p-values, q_(i) = min over j >= i of m p_(j) / j, capped at 1.
func bhStepUp(p []float64) []float64 {
	m := len(p)
	idx := make([]int, m)
	for i := range idx {
		idx[i] = i
	}
	sort.Slice(idx, func(a, b int) bool { return p[idx[a]] < p[idx[b]] })
	q := make([]float64, m)
	run := 1.0
	for r := m; r >= 1; r-- {
		i := idx[r-1]
		run = math.Min(run, float64(m)*p[i]/float64(r))
		q[i] = run
	}
	return q
}

// Without a grouping column the page still has every section, says why
// there are no contrasts, and runs no group query.
func TestReportWithoutGroups(t *testing.T) {
	fixture(t)
	r, b, err := buildReport(whPath, "")
	if err != nil {
		t.Fatal(err)
	}
	doc := parse(t, b)
	if len(r.Contrasts) != 0 || r.NoContrast == "" || !strings.Contains(textOf(byID(doc, "dynamics")), "no group contrasts") {
		t.Errorf("contrasts %d, note %q", len(r.Contrasts), r.NoContrast)
	}
	for _, id := range Sections {
		if byID(doc, id) == nil {
			t.Errorf("no section %s", id)
		}
	}
	for _, c := range r.Commands {
		if strings.Contains(c.Line(), "by_group") {
			t.Errorf("group query listed: %s", c.Line())
		}
	}
}

// Shell words in the reproduce commands: plain words stay, others are
// single-quoted (POSIX shell quoting, quotes inside closed and reopened).
func TestShellQuote(t *testing.T) {
	for _, c := range []struct{ in, want string }{
		{"group_a=day", "group_a=day"},
		{"my cohort.duckdb", "'my cohort.duckdb'"},
		{`group_a=late & "swing" <i>`, `'group_a=late & "swing" <i>'`},
		{"it's", `'it'\''s'`},
		{"", "''"},
	} {
		if got := shellQuote(c.in); got != c.want {
			t.Errorf("shellQuote(%q) = %s, want %s", c.in, got, c.want)
		}
	}
}

func TestFormats(t *testing.T) {
	for _, c := range []struct {
		v    float64
		f    func(float64) string
		want string
	}{
		{0.45678, sig, "0.457"}, {23.456, sig, "23.5"}, {1234.6, sig, "1235"}, {0.00012345, sig, "0.000123"},
		{3e-7, sig, "3.00e-07"}, {0, sig, "0"}, {0.04, signed, "+0.0400"}, {-1.5, signed, "-1.50"},
		{0.0123, pval, "0.012"}, {0.000234, pval, "2.3e-04"}, {1, pval, "1.000"}, {math.NaN(), pval, "–"},
	} {
		if got := c.f(c.v); got != c.want {
			t.Errorf("%v: %q, want %q", c.v, got, c.want)
		}
		if !math.IsNaN(c.v) && !rounded(c.want, c.v) {
			t.Errorf("rounded(%q, %v) false", c.want, c.v)
		}
	}
	if rounded("0.45", 0.45678) || rounded("1.2e-04", 0.000234) || rounded("x", 1) {
		t.Error("rounded accepts a wrong rounding")
	}
}

// Issue 11 item 3: the page never puts a descriptive statistic beside
// p-values nor adjusts one. The state-pair distances carry no p-like
// column; the Betti-curve tables no pooled-event KS column; the
// report-wide adjustment (--adjust-all) takes only the inferential
// p-values (familyColumns), and its values are compute.AdjustPValues over
// exactly that family (itself checked against the definitions of
// Benjamini-Hochberg 1995 and Benjamini-Yekutieli 2001 in compute).
func TestDescriptiveApartAndAdjustAll(t *testing.T) {
	_, b := fixture(t)
	doc := parse(t, b)
	pLike := func(col string) bool {
		return col == "p" || strings.HasSuffix(col, "_p") || strings.Contains(col, "_p_")
	}
	for _, tr := range tableRows(t, doc, "t-state-pairs") {
		for col := range spans(tr) {
			if pLike(col) {
				t.Errorf("state pairs: p-like column %s", col)
			}
		}
	}
	r0, _ := fixture(t)
	for _, c := range r0.Contrasts {
		for _, tr := range tableRows(t, doc, "t-filtration-"+c.ID) {
			for col := range spans(tr) {
				if strings.HasPrefix(col, "ks_") {
					t.Errorf("filtration %s: descriptive column %s beside the tests", c.ID, col)
				}
			}
		}
	}
	if r0.AllTables != nil || strings.Contains(string(b), " all</th>") {
		t.Errorf("no --adjust-all, yet a report-wide column")
	}
	for _, method := range []string{"bh", "by"} {
		r, page, err := buildReport(whPath, "group", method)
		if err != nil {
			t.Fatal(err)
		}
		doc := parse(t, page)
		var ids []string
		var cols []string
		for _, c := range r.Contrasts {
			ids = append(ids, "t-dwell-"+c.ID, "t-filtration-"+c.ID)
			cols = append(cols, "perm_p", "curve_perm_p")
		}
		for _, ct := range r.Covariates {
			ids = append(ids, ct.ID)
			cols = append(cols, "p")
		}
		var ps []float64
		var shown []string
		for i, id := range ids {
			trs := tableRows(t, doc, id)
			keys := make([]string, 0, len(trs))
			for k := range trs {
				keys = append(keys, k)
			}
			slices.Sort(keys)
			for _, k := range keys {
				sp := spans(trs[k])
				v, err := strconv.ParseFloat(sp[cols[i]][0], 64)
				if err != nil {
					v = math.NaN()
				}
				ps = append(ps, v)
				shown = append(shown, sp["report_p_"+method][0])
			}
		}
		want, err := compute.AdjustPValues(ps, compute.AdjustMethod(method))
		if err != nil {
			t.Fatal(err)
		}
		m := 0
		for i, q := range want {
			if math.IsNaN(q) {
				if shown[i] != "" {
					t.Errorf("%s member %d: NULL p, adjusted %q", method, i, shown[i])
				}
				continue
			}
			m++
			if !sameValue(shown[i], q) {
				t.Errorf("%s member %d: p %v, shown %q, want %v", method, i, ps[i], shown[i], q)
			}
		}
		if r.AllTables == nil || r.AllTables.M != m || m < 10 {
			t.Errorf("%s: family %+v, want m = %d (and at least 10)", method, r.AllTables, m)
		}
		if !strings.Contains(string(page), fmt.Sprintf("across all %d inferential p-values of this report", m)) {
			t.Errorf("%s: the page does not name the family of %d", method, m)
		}
	}
}
