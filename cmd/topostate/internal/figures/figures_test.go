package figures

import (
	"context"
	"database/sql"
	"encoding/xml"
	"errors"
	"fmt"
	"image/png"
	"io"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"sync"
	"testing"

	"gonum.org/v1/gonum/stat"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/ingest"
	"github.com/topostate/topostate/schema"
)

var (
	whOnce sync.Once
	whPath string
	whErr  error
)

// warehouse builds, once per test run, a warehouse from a generated cohort
// (invented data): 10 subjects in groups A and B, 10 regions, 3 states,
// k chosen by the elbow over 2..5; subjects also carry "age" (10 values).
func warehouse(t *testing.T) string {
	t.Helper()
	whOnce.Do(func() {
		dir, err := os.MkdirTemp("", "figures-test-")
		if err != nil {
			whErr = err
			return
		}
		whPath, whErr = buildWarehouse(dir)
	})
	if whErr != nil {
		t.Fatal(whErr)
	}
	return whPath
}

func TestMain(m *testing.M) {
	code := m.Run()
	if whPath != "" {
		os.RemoveAll(filepath.Dir(whPath))
	}
	os.Exit(code)
}

func buildWarehouse(dir string) (string, error) {
	spec := compute.CohortSpec{Subjects: 10, Regions: 10, Timepoints: 160, States: 3, TR: 2,
		Stickiness: 0.93, GroupEffect: 0.04, Offset: 600, Seed: 17}
	subs, err := compute.SimulateCohort(spec)
	if err != nil {
		return "", err
	}
	names := make([]string, spec.Regions)
	for j := range names {
		names[j] = fmt.Sprintf("n%02d", j+1)
	}
	ids := make([]string, len(subs))
	series := make([]compute.Series, len(subs))
	rows := make([]ingest.SyntheticParticipant, len(subs))
	for i, s := range subs {
		ids[i], series[i] = s.ID, s.Series
		rows[i] = ingest.SyntheticParticipant{ID: s.ID, Cells: []string{s.Group, strconv.Itoa(30 + i)}}
	}
	cohort := filepath.Join(dir, "cohort")
	if err := ingest.WriteCohort(cohort, names, 2, ids, series, []string{"group", "age"}, rows); err != nil {
		return "", err
	}
	o := ingest.Defaults()
	o.Input, o.Window, o.StatesMin, o.StatesMax, o.Restarts, o.Grid, o.Seed, o.Analysis = cohort, 20, 2, 5, 3, "-1:1:41", 5, "figs"
	// The figures need the three simulated states; the rule is pinned so
	// the fixture does not follow the default rule (which picks 2 here).
	o.KRule = "chord"
	path := filepath.Join(dir, "w.duckdb")
	if _, err := ingest.IntoFile(context.Background(), path, o, nil); err != nil {
		return "", err
	}
	return path, nil
}

func openRO(t *testing.T) *sql.DB {
	t.Helper()
	db, err := schema.Open(warehouse(t), true, nil)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { db.Close() })
	return db
}

func load(t *testing.T, db *sql.DB) *Data {
	t.Helper()
	d, err := Load(context.Background(), db, "figs", "group", false)
	if err != nil {
		t.Fatal(err)
	}
	return d
}

func rowsOf(t *testing.T, db *sql.DB, q string, dest ...any) func() bool {
	t.Helper()
	rows, err := db.Query(q)
	if err != nil {
		t.Fatalf("%s: %v", q, err)
	}
	t.Cleanup(func() { rows.Close() })
	return func() bool {
		if !rows.Next() {
			return false
		}
		if err := rows.Scan(dest...); err != nil {
			t.Fatal(err)
		}
		return true
	}
}

// The numbers the figures draw equal the same summaries computed here in
// Go from the raw rows, with gonum's stat.Mean and stat.StdDev (sample
// standard deviation) as the outside reference for mean and SE = sd/sqrt(n).
func TestLoadMatchesRawTables(t *testing.T) {
	db := openRO(t)
	d := load(t, db)
	groupOf := map[string]string{}
	var sub, grp string
	for next := rowsOf(t, db, `SELECT subject_id, "group" FROM subjects`, &sub, &grp); next(); {
		groupOf[sub] = grp
	}
	if len(d.Groups) != 2 || d.Groups[0] != (Group{"A", 5, 5}) || d.Groups[1] != (Group{"B", 5, 5}) {
		t.Fatalf("groups %+v", d.Groups)
	}
	if d.States != 3 || d.Regions != 10 {
		t.Fatalf("k %d p %d", d.States, d.Regions)
	}

	// Betti curves.
	type key struct {
		state, dim int
		group      string
		e          float64
	}
	raw := map[key][]float64{}
	var st, dim, b int
	var e float64
	for next := rowsOf(t, db, `SELECT subject_id, state, dimension, threshold, betti FROM betti_curves`, &sub, &st, &dim, &e, &b); next(); {
		k := key{st, dim, groupOf[sub], e}
		raw[k] = append(raw[k], float64(b))
	}
	n := 0
	for _, c := range d.Betti {
		for i, e := range c.Threshold {
			v := raw[key{c.State, c.Dim, d.Groups[c.Group].Name, e}]
			mean := stat.Mean(v, nil)
			se := 0.0
			if len(v) > 1 {
				se = stat.StdDev(v, nil) / math.Sqrt(float64(len(v)))
			}
			if len(v) != c.N || math.Abs(c.Mean[i]-mean) > 1e-12 || math.Abs(c.SE[i]-se) > 1e-12 {
				t.Fatalf("state %d dim %d group %d e %v: mean %v se %v n %d; raw %v %v %d", c.State, c.Dim, c.Group, e, c.Mean[i], c.SE[i], c.N, mean, se, len(v))
			}
			n++
		}
	}
	if n != len(raw) || n == 0 {
		t.Errorf("compared %d curve points of %d", n, len(raw))
	}

	// Occupancy and dwell: the same values per state and group.
	occ := map[[2]string][]float64{}
	dwell := map[[2]string][]float64{}
	var o float64
	var dw sql.NullFloat64
	for next := rowsOf(t, db, `SELECT subject_id, state, occupancy, mean_dwell_seconds FROM state_metrics`, &sub, &st, &o, &dw); next(); {
		k := [2]string{strconv.Itoa(st), groupOf[sub]}
		occ[k] = append(occ[k], o)
		if dw.Valid {
			dwell[k] = append(dwell[k], dw.Float64)
		}
	}
	for s := range d.States {
		for g, gr := range d.Groups {
			k := [2]string{strconv.Itoa(s + 1), gr.Name}
			for _, c := range []struct {
				name      string
				got, want []float64
			}{{"occupancy", d.Occupancy[s][g], occ[k]}, {"dwell", d.Dwell[s][g], dwell[k]}} {
				got, want := slices.Clone(c.got), slices.Clone(c.want)
				slices.Sort(got)
				slices.Sort(want)
				if !slices.Equal(got, want) {
					t.Errorf("%s state %d group %s: %v, raw %v", c.name, s+1, gr.Name, got, want)
				}
			}
		}
	}

	// Transitions: mean of the non-NULL probabilities.
	probs := map[[3]string][]float64{}
	var from, to int
	var p sql.NullFloat64
	for next := rowsOf(t, db, `SELECT subject_id, from_state, to_state, probability FROM transitions`, &sub, &from, &to, &p); next(); {
		k := [3]string{groupOf[sub], strconv.Itoa(from), strconv.Itoa(to)}
		if p.Valid {
			probs[k] = append(probs[k], p.Float64)
		} else if _, ok := probs[k]; !ok {
			probs[k] = nil
		}
	}
	for g, gr := range d.Groups {
		for i := range d.States {
			for j := range d.States {
				v := probs[[3]string{gr.Name, strconv.Itoa(i + 1), strconv.Itoa(j + 1)}]
				got := d.Transitions[g][i][j]
				if len(v) == 0 {
					if !math.IsNaN(got) {
						t.Errorf("transition %s %d->%d: %v with no series", gr.Name, i+1, j+1, got)
					}
					continue
				}
				if want := stat.Mean(v, nil); math.Abs(got-want) > 1e-12 || d.TransN[g][i][j] != len(v) {
					t.Errorf("transition %s %d->%d: %v (n %d), raw %v (n %d)", gr.Name, i+1, j+1, got, d.TransN[g][i][j], want, len(v))
				}
			}
		}
	}

	// Centroids: symmetric, the stored upper triangle, NaN diagonal.
	var i, j int
	var w float64
	count := 0
	for next := rowsOf(t, db, `SELECT state, i, j, weight FROM state_centroids`, &st, &i, &j, &w); next(); {
		m := d.Centroids[st-1]
		if m[i-1][j-1] != w || m[j-1][i-1] != w {
			t.Fatalf("centroid %d (%d,%d) = %v / %v, stored %v", st, i, j, m[i-1][j-1], m[j-1][i-1], w)
		}
		count++
	}
	if count != 3*45 {
		t.Errorf("%d centroid entries", count)
	}
	for s := range d.Centroids {
		for r := range d.Centroids[s] {
			if !math.IsNaN(d.Centroids[s][r][r]) {
				t.Errorf("diagonal %d,%d not blank", s, r)
			}
		}
	}

	// Elbow: every k tried, one chosen, the one the analysis used.
	if len(d.Elbow) != 4 || d.Elbow[0].K != 2 || d.Elbow[3].K != 5 {
		t.Fatalf("elbow %+v", d.Elbow)
	}
	chosen := 0
	for _, e := range d.Elbow {
		if e.Chosen {
			chosen++
			if e.K != d.States {
				t.Errorf("chosen k %d, analysis has %d states", e.K, d.States)
			}
		}
	}
	if chosen != 1 {
		t.Errorf("%d chosen k", chosen)
	}
}

// svgTexts returns the text content of every <text> element; it fails the
// test when the file is not well-formed XML.
func svgTexts(t *testing.T, path string) []string {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	dec := xml.NewDecoder(f)
	var out []string
	in := false
	root := ""
	for {
		tok, err := dec.Token()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatalf("%s is not well-formed XML: %v", path, err)
		}
		switch x := tok.(type) {
		case xml.StartElement:
			if root == "" {
				root = x.Name.Local
			}
			in = x.Name.Local == "text"
			if in {
				out = append(out, "")
			}
		case xml.CharData:
			if in {
				out[len(out)-1] += string(x)
			}
		case xml.EndElement:
			in = false
		}
	}
	if root != "svg" {
		t.Fatalf("%s: root element %q", path, root)
	}
	return out
}

func TestWriteAll(t *testing.T) {
	d := load(t, openRO(t))
	dir := t.TempDir()
	const dpi = 100
	files, err := WriteAll(d, dir, []string{"png", "svg"}, dpi)
	if err != nil {
		t.Fatal(err)
	}
	figs, err := Figures(d)
	if err != nil {
		t.Fatal(err)
	}
	labels := map[string][]string{
		"betti0":      {"threshold e (correlation r)", "Betti-0 (components)", "group", "A (n=5)", "B (n=5)"},
		"betti1":      {"threshold e (correlation r)", "Betti-1 (independent cycles)"},
		"elbow":       {"number of states k", "within-cluster sum of squares", "choosing k"},
		"occupancy":   {"connectivity state", "fractional occupancy (share of windows)", "group", "A (n=5)", "B (n=5)"},
		"dwell":       {"connectivity state", "mean dwell time (s)", "group"},
		"transitions": {"to state (window w+1)", "from state (window w)", "A (n=5)", "B (n=5)"},
		// The fixture's regions are named n01..n10 in the series files.
		"centroids": {"region", "correlation r", "state 1", "state 3", "n01", "n10"},
	}
	if len(files) != 2*len(labels) || len(figs) != len(labels) {
		t.Fatalf("%d files, %d figures", len(files), len(figs))
	}
	for _, f := range figs {
		t.Run(f.Name, func(t *testing.T) {
			pf, err := os.Open(filepath.Join(dir, f.Name+".png"))
			if err != nil {
				t.Fatal(err)
			}
			img, err := png.Decode(pf)
			pf.Close()
			if err != nil {
				t.Fatal(err)
			}
			// Expected pixels: size in points x dpi / 72, rounded to the
			// nearest pixel (as gonum's vgimg does).
			w := int(math.Round(float64(f.Width) * dpi / 72))
			h := int(math.Round(float64(f.Height) * dpi / 72))
			if b := img.Bounds(); b.Dx() != w || b.Dy() != h || w < 300 || h < 200 {
				t.Errorf("PNG is %v, want %d x %d", b, w, h)
			}
			texts := svgTexts(t, filepath.Join(dir, f.Name+".svg"))
			joined := strings.Join(texts, "\n")
			for _, l := range labels[f.Name] {
				if !slices.Contains(texts, l) {
					t.Errorf("SVG lacks the text %q", l)
				}
			}
			if !strings.Contains(joined, "figs") {
				t.Error("SVG does not name the analysis")
			}
		})
	}
	// The values printed in the transition matrices are the means computed
	// in TestLoadMatchesRawTables' way, rounded to two decimals.
	texts := svgTexts(t, filepath.Join(dir, "transitions.svg"))
	var printed []string
	for _, s := range texts {
		if len(s) == 4 && strings.HasPrefix(s, "0.") || s == "1.00" || s == "–" {
			printed = append(printed, s)
		}
	}
	var want []string
	for g := range d.Groups {
		for i := range d.States {
			for j := range d.States {
				v := fmt.Sprintf("%.2f", d.Transitions[g][i][j])
				if math.IsNaN(d.Transitions[g][i][j]) {
					v = "–"
				}
				want = append(want, v)
			}
		}
	}
	if !slices.Equal(printed, want) {
		t.Errorf("printed %v, want %v", printed, want)
	}
}

func TestLoadChoices(t *testing.T) {
	db := openRO(t)
	ctx := context.Background()
	cases := []struct {
		name, analysis, group string
		dflt                  bool
		usage                 bool
		msg                   string
		groups                int
	}{
		{"only analysis by default", "", "group", false, false, "", 2},
		{"unknown analysis", "nope", "group", false, true, `no such analysis "nope"; the warehouse holds: 1 ("figs")`, 0},
		{"unknown column", "figs", "shift", false, true, `no column "shift"; its covariates are: group, age`, 0},
		{"missing default column", "figs", "cohort", true, false, "", 1},
		{"no grouping", "figs", "", false, false, "", 1},
		{"too many groups", "figs", "age", false, true, "10 values", 0},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			d, err := Load(ctx, db, c.analysis, c.group, c.dflt)
			if c.usage || c.msg != "" {
				if !errors.Is(err, ErrUsage) || !strings.Contains(err.Error(), c.msg) {
					t.Fatalf("error %v, want a usage error saying %q", err, c.msg)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if len(d.Groups) != c.groups {
				t.Fatalf("%d groups", len(d.Groups))
			}
			if c.groups == 1 && (d.Groups[0].Name != NoGroup || d.Groups[0].Series != 10) {
				t.Errorf("one group: %+v", d.Groups[0])
			}
			if c.dflt && len(d.Notes) == 0 {
				t.Error("no note about the missing column")
			}
		})
	}
}

// The ramps keep lightness monotone (sequential: falling; diverging:
// rising to the middle, then falling), the property that keeps them
// readable without colour vision (common practice, no source).
func TestRampsMonotoneLightness(t *testing.T) {
	seq := newRamp(sequentialStops, 0, 1)
	div := newRamp(divergingStops, -1, 1)
	prevS, prevD := math.Inf(1), -1.0
	for i := 0; i <= 100; i++ {
		v := float64(i) / 100
		c, err := seq.At(v)
		if err != nil {
			t.Fatal(err)
		}
		if l := luminance(c); l > prevS+1e-9 {
			t.Errorf("sequential lightness rises at %v", v)
		} else {
			prevS = l
		}
		x := -1 + 2*v
		c, _ = div.At(x)
		l := luminance(c)
		if (x <= 0 && l < prevD-1e-9) || (x > 0 && l > prevD+1e-9) {
			t.Errorf("diverging lightness not monotone at %v", x)
		}
		prevD = l
	}
	if _, err := seq.At(math.NaN()); err == nil {
		t.Error("NaN has a colour")
	}
	// Eight distinct group colours.
	seen := map[[3]uint8]bool{}
	for _, c := range groupColours {
		seen[[3]uint8{c.R, c.G, c.B}] = true
	}
	if len(seen) != MaxGroups {
		t.Errorf("%d distinct group colours", len(seen))
	}
}

func TestBettiRange(t *testing.T) {
	grid := compute.Grid(-1, 1, 21) // step 0.1
	flat := make([]float64, 21)
	step := make([]float64, 21)
	for i := range step {
		step[i] = 1
		if grid[i] > 0.35 {
			step[i] = 5
		}
	}
	cases := []struct {
		name   string
		means  [][]float64
		lo, hi float64
	}{
		{"flat curves keep the grid", [][]float64{flat}, -1, 1},
		{"one step at 0.4", [][]float64{step}, 0.3 - 0.2, 0.4 + 0.2},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			d := &Data{}
			for _, m := range c.means {
				d.Betti = append(d.Betti, Curve{Dim: 0, Threshold: grid, Mean: m, SE: flat})
			}
			lo, hi := bettiRange(d, 0)
			if math.Abs(lo-c.lo) > 1e-9 || math.Abs(hi-c.hi) > 1e-9 {
				t.Errorf("range %v..%v, want %v..%v", lo, hi, c.lo, c.hi)
			}
		})
	}
}

// The elbow figure's legend names the rule that picked k (the analysis's
// stored k_rule), not the chord elbow whatever the rule: an analysis whose
// k was chosen by prediction strength once read "farthest from the chord".
func TestElbowLegendNamesRule(t *testing.T) {
	db := openRO(t)
	d := load(t, db)
	var stored string
	if err := db.QueryRow(`SELECT parameters->>'k_rule' FROM analyses WHERE name = 'figs'`).Scan(&stored); err != nil {
		t.Fatal(err)
	}
	if d.KRule != stored || stored != "chord" {
		t.Fatalf("KRule %q, stored k_rule %q (the fixture pins chord)", d.KRule, stored)
	}
	for rule, want := range map[string]string{"chord": "farthest from the chord", "strength": "prediction strength",
		"gap": "gap statistic", "second-diff": "largest second difference"} {
		dd := *d
		dd.KRule = rule
		f := elbowFigure(&dd)
		path := filepath.Join(t.TempDir(), "elbow.svg")
		if err := f.Write(path, 72); err != nil {
			t.Fatal(err)
		}
		var used []string
		for _, s := range svgTexts(t, path) {
			if strings.HasPrefix(s, "used: k = ") {
				used = append(used, s)
			}
		}
		if len(used) != 1 || !strings.Contains(used[0], "("+want) {
			t.Errorf("rule %s: legend %q, want one 'used: k = %d (%s...'", rule, used, d.States, want)
		}
		if rule != "chord" && strings.Contains(used[0], "chord") {
			t.Errorf("rule %s: legend %q names the chord", rule, used[0])
		}
	}
}

// Region names go on the centroid axes under the stated rule (at most 20
// regions, names of at most 16 characters); otherwise the regions are
// numbered and the subtitle says why. Names ingest generates for unnamed
// .npy columns (region_001, ...) count as no names.
func TestRegionAxes(t *testing.T) {
	d := load(t, openRO(t))
	if want := []string{"n01", "n02", "n03", "n04", "n05", "n06", "n07", "n08", "n09", "n10"}; !slices.Equal(d.RegionNames, want) {
		t.Fatalf("RegionNames %v, want the fixture's header %v", d.RegionNames, want)
	}
	named := func(p, runes int) []string {
		out := make([]string, p)
		for i := range out {
			out[i] = fmt.Sprintf("%0*d", runes, i+1)
		}
		return out
	}
	cases := []struct {
		name  string
		d     *Data
		names bool
		note  string
	}{
		{"fixture", d, true, "regions named as in table regions"},
		{"20 regions", &Data{Regions: 20, RegionNames: named(20, 16)}, true, "named"},
		{"21 regions", &Data{Regions: 21, RegionNames: named(21, 4)}, false, "21 regions are too many to name on the axes (at most 20"},
		{"17 characters", &Data{Regions: 8, RegionNames: named(8, 17)}, false, "are too long for the axes (at most 16 characters"},
		{"no names", &Data{Regions: 8}, false, "the series files named no regions"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			a, note := regionAxes(c.d)
			if (a.names != nil) != c.names || !strings.Contains(note, c.note) {
				t.Errorf("names %v, note %q; want names %v, note with %q", a.names != nil, note, c.names, c.note)
			}
			if c.names && (a.size < 6 || a.size > 8) {
				t.Errorf("name font %v points, want 6..8", a.size)
			}
		})
	}
	// In the drawing: every name on both axes of every panel, or numbers
	// and the note.
	for _, c := range []struct {
		d            *Data
		drawn, notes []string
		count        int // times each name is drawn
	}{
		{synthCentroids(2, 12, false, named(12, 6)), []string{"000001", "000012"}, []string{"regions named as in table regions"}, 2 * 2},
		{synthCentroids(2, 36, false, named(36, 6)), []string{"1", "36"}, []string{"36 regions are too many to name"}, 0},
	} {
		texts := map[string]int{}
		var all []string
		for _, dr := range record(centroidFigure(c.d)) {
			texts[dr.text]++
			all = append(all, dr.text)
		}
		for _, w := range c.drawn {
			if texts[w] == 0 {
				t.Errorf("%d regions: %q not drawn", c.d.Regions, w)
			}
		}
		for _, w := range c.notes {
			if !strings.Contains(strings.Join(all, "\n"), w) {
				t.Errorf("%d regions: no note %q", c.d.Regions, w)
			}
		}
		for _, n := range c.d.RegionNames {
			if texts[n] != c.count {
				t.Errorf("%d regions: name %q drawn %d times, want %d", c.d.Regions, n, texts[n], c.count)
			}
		}
	}
}

// A legend of groups is titled, naming the column when it is not called
// group, so that the values of a column such as site (1, 2, 3) are not
// read as states; n counts subjects, and series too when sessions make
// them differ (the group tests count subjects).
func TestGroupLegendTitleAndN(t *testing.T) {
	d := &Data{Group: "site", Groups: []Group{{"1", 6, 3}, {"2", 4, 4}}}
	for _, c := range []struct{ got, want string }{
		{d.groupTitle(), "group (site)"},
		{d.groupPanelTitle(1), "site = 2 (n=4)"},
		{d.groupLabel(0, 6), "1 (n=3 subjects, 6 series)"},
		{d.groupLabel(0, 5), "1 (5 of 6 series)"},
		{(&Data{Group: "group", Groups: d.Groups}).groupTitle(), "group"},
		{(&Data{Groups: d.Groups}).groupPanelTitle(1), "2 (n=4)"},
	} {
		if c.got != c.want {
			t.Errorf("%q, want %q", c.got, c.want)
		}
	}
}
