package report

import (
	"fmt"
	"math"
	"strconv"
	"strings"
)

// Table is one HTML table of the page. Every number shown sits in a
// <span data-col="COLUMN" data-v="VALUE">, VALUE being the query's value in
// full precision ("" for NULL), so a reader (or a test) can take the exact
// figure behind the rounded one; every row carries data-key naming what it
// is ("state=2/measure=occupancy").
type Table struct {
	ID      string
	Caption string // heading shown above the table, or ""
	Left    int    // leading columns aligned left (labels); the rest are numbers
	Head    []Head
	Rows    []Row
}

// Head is a column heading with a longer explanation (title).
type Head struct {
	Text, Title string
}

// Row is one table row.
type Row struct {
	Key   string
	Class string
	Cells []Cell
}

// Cell is one table cell made of parts.
type Cell struct {
	Key   string // data-key of the cell (matrix columns), or ""
	Class string
	Title string
	Parts []Part
}

// Part is a piece of a cell: a value (Col set) or plain text.
type Part struct {
	Col, V, Text, Class string
}

// HitLevel is the BH-adjusted p-value below which a result is set in bold.
const HitLevel = 0.05

// num returns a query value as a float64; ok is false for NULL and
// non-numbers.
func num(v any) (float64, bool) {
	switch x := v.(type) {
	case float64:
		return x, true
	case float32:
		return float64(x), true
	case int64:
		return float64(x), true
	case int32:
		return float64(x), true
	case int16:
		return float64(x), true
	case int8:
		return float64(x), true
	case int:
		return float64(x), true
	case uint64:
		return float64(x), true
	case uint32:
		return float64(x), true
	case uint16:
		return float64(x), true
	case uint8:
		return float64(x), true
	}
	return 0, false
}

// full writes a query value in full precision: floats as the shortest
// text that reads back to the same float64, NULL as "".
func full(v any) string {
	switch x := v.(type) {
	case nil:
		return ""
	case float64:
		return strconv.FormatFloat(x, 'g', -1, 64)
	case float32:
		return strconv.FormatFloat(float64(x), 'g', -1, 32)
	case string:
		return x
	case bool:
		return strconv.FormatBool(x)
	}
	if f, ok := num(v); ok {
		return strconv.FormatFloat(f, 'f', -1, 64)
	}
	return fmt.Sprint(v)
}

// Key writes a row key from a query row: "col=value" for each column,
// joined by "/".
func Key(row map[string]any, cols ...string) string {
	parts := make([]string, len(cols))
	for i, c := range cols {
		parts[i] = c + "=" + full(row[c])
	}
	return strings.Join(parts, "/")
}

// sig writes v with three significant digits, without an exponent between
// 1e-4 and 1e6.
func sig(v float64) string {
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return "–"
	}
	a := math.Abs(v)
	if a == 0 {
		return "0"
	}
	if a < 1e-4 || a >= 1e6 {
		return strconv.FormatFloat(v, 'e', 2, 64)
	}
	dec := max(0, 2-int(math.Floor(math.Log10(a))))
	return strconv.FormatFloat(v, 'f', dec, 64)
}

// signed is sig with a plus sign on positive values.
func signed(v float64) string {
	s := sig(v)
	if v > 0 {
		return "+" + s
	}
	return s
}

// pval writes a p-value: three decimals, or two significant digits in
// exponent form below 0.001.
func pval(p float64) string {
	if math.IsNaN(p) {
		return "–"
	}
	if p < 0.001 {
		return strconv.FormatFloat(p, 'e', 1, 64)
	}
	return strconv.FormatFloat(p, 'f', 3, 64)
}

func fixed(dec int) func(float64) string {
	return func(v float64) string {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return "–"
		}
		return strconv.FormatFloat(v, 'f', dec, 64)
	}
}

func integer(v float64) string { return strconv.FormatFloat(v, 'f', 0, 64) }

// value is the part showing query value v of column col formatted by f
// ("–" for NULL).
func value(col string, v any, f func(float64) string) Part {
	x, ok := num(v)
	if !ok {
		return Part{Col: col, V: full(v), Text: "–"}
	}
	return Part{Col: col, V: full(v), Text: f(x)}
}

func text(s string) Part { return Part{Text: s} }

func cell(parts ...Part) Cell { return Cell{Parts: parts} }

func valCell(col string, v any, f func(float64) string) Cell { return cell(value(col, v, f)) }

func numCell(col string, v float64, f func(float64) string) Cell { return valCell(col, v, f) }

func intCell(col string, n int64) Cell { return valCell(col, n, integer) }

func textCell(col, s string) Cell { return cell(Part{Col: col, V: s, Text: s}) }

// pCell shows a p-value, in bold when it is a BH-adjusted one below
// HitLevel.
func pCell(col string, v any, adjusted bool) Cell {
	c := valCell(col, v, pval)
	if p, ok := num(v); ok && adjusted && p < HitLevel {
		c.Class = "hit"
	}
	return c
}

// meanCell shows "mean ± sd (n = N)".
func meanCell(suffix string, row map[string]any) Cell {
	return cell(value("mean_"+suffix, row["mean_"+suffix], sig), text(" ± "), value("sd_"+suffix, row["sd_"+suffix], sig),
		Part{Text: " (n=", Class: "n"}, Part{Col: "n_" + suffix, V: full(row["n_"+suffix]), Text: full(row["n_"+suffix]), Class: "n"}, Part{Text: ")", Class: "n"})
}

var measureText = map[string]string{
	"occupancy":     "occupancy",
	"dwell_seconds": "dwell time (s)",
}

var dimensionText = map[string]string{
	"0": "β0 (components)",
	"1": "β1 (cycles)",
}

// dwellTable shows state_dwell_by_group.
func dwellTable(id, a, b string, res *result) *Table {
	t := &Table{ID: "t-dwell-" + id, Left: 2, Head: []Head{
		{"state", ""},
		{"measure", "occupancy: share of a subject's windows in the state (0-1); dwell time: mean length of an uninterrupted stay, seconds"},
		{a, "group mean ± standard deviation over subjects (n subjects)"},
		{b, "group mean ± standard deviation over subjects (n subjects)"},
		{"difference", a + " − " + b},
		{"Welch t (df)", "Welch's t statistic with Welch-Satterthwaite degrees of freedom"},
		{"p", "Welch t-test, two-sided"},
		{"p, BH", "Benjamini-Hochberg adjusted across the states of this measure"},
		{"p perm.", "group labels of whole subjects relabelled; p = (1 + count) / (1 + relabellings)"},
		{"p perm., BH", "Benjamini-Hochberg adjusted across the states of this measure"},
	}}
	for _, row := range res.rows {
		m := full(row["measure"])
		label := measureText[m]
		if label == "" {
			label = m
		}
		t.Rows = append(t.Rows, Row{Key: Key(row, "state", "measure"), Cells: []Cell{
			valCell("state", row["state"], integer),
			cell(Part{Col: "measure", V: m, Text: label}),
			meanCell("a", row), meanCell("b", row),
			valCell("difference", row["difference"], signed),
			cell(value("welch_t", row["welch_t"], fixed(2)), text(" ("), value("welch_df", row["welch_df"], fixed(1)), text(")")),
			pCell("welch_p", row["welch_p"], false), pCell("welch_p_bh", row["welch_p_bh"], true),
			pCell("perm_p", row["perm_p"], false), pCell("perm_p_bh", row["perm_p_bh"], true),
		}})
	}
	return t
}

// filtrationTable shows the group test of filtration_tests_by_group: the
// permutation test of the core Betti curves (docs/methods.md §7). The
// query's pooled-event KS distance is descriptive and is left out here, so
// it is never read beside the test.
func filtrationTable(id string, res *result) *Table {
	t := &Table{ID: "t-filtration-" + id, Left: 2, Head: []Head{
		{"state", ""},
		{"Betti curve", "β0: spanning-tree edges, where components merge; β1: the other edges, where cycles close"},
		{"subjects", "subjects of each group with a core network in this state (enough time points covered only by windows of the state)"},
		{"curve gap", "largest distance between the two group-mean core Betti curves"},
		{"p perm.", "group labels of whole subjects relabelled: the group test"},
		{"p perm., BH", "Benjamini-Hochberg adjusted across all rows"},
	}}
	for _, row := range res.rows {
		dim := full(row["dimension"])
		t.Rows = append(t.Rows, Row{Key: Key(row, "state", "dimension"), Cells: []Cell{
			valCell("state", row["state"], integer),
			cell(Part{Col: "dimension", V: dim, Text: dimensionText[dim]}),
			cell(value("n_subjects_a", row["n_subjects_a"], integer), text(" / "), value("n_subjects_b", row["n_subjects_b"], integer)),
			valCell("curve_distance", row["curve_distance"], sig),
			pCell("curve_perm_p", row["curve_perm_p"], false), pCell("curve_perm_p_bh", row["curve_perm_p_bh"], true),
		}})
	}
	return t
}

func abbrevMethod(m string) string {
	if m == "" {
		return ""
	}
	return "(" + m + ")"
}

// transitionTable shows transitions_by_group as one k x k matrix whose
// cells hold the difference of the two groups' mean probabilities and,
// below it, the two means.
func transitionTable(id, a, b string, k int, res *result) *Table {
	type pair struct{ a, b any }
	cells := map[[2]int]*pair{}
	for _, row := range res.rows {
		i, _ := num(row["from_state"])
		j, _ := num(row["to_state"])
		key := [2]int{int(i), int(j)}
		if cells[key] == nil {
			cells[key] = &pair{}
		}
		switch full(row["group"]) {
		case a:
			cells[key].a = row["mean_probability"]
		case b:
			cells[key].b = row["mean_probability"]
		}
	}
	t := &Table{ID: "t-transitions-" + id, Head: []Head{{"from \\ to", "row: state of window w; column: state of window w + 1"}}}
	for j := 1; j <= k; j++ {
		t.Head = append(t.Head, Head{strconv.Itoa(j), ""})
	}
	for i := 1; i <= k; i++ {
		row := Row{Key: "from_state=" + strconv.Itoa(i), Cells: []Cell{cell(Part{Col: "from_state", V: strconv.Itoa(i), Text: strconv.Itoa(i)})}}
		for j := 1; j <= k; j++ {
			p := cells[[2]int{i, j}]
			if p == nil {
				p = &pair{}
			}
			var diff any
			if x, ok := num(p.a); ok {
				if y, ok := num(p.b); ok {
					diff = x - y
				}
			}
			c := cell(value("difference", diff, signed), Part{Class: "br"},
				Part{Col: "mean_a", V: full(p.a), Text: fmtOr(p.a, fixed(2)), Class: "ma"},
				Part{Col: "mean_b", V: full(p.b), Text: fmtOr(p.b, fixed(2)), Class: "mb"})
			c.Key = "to_state=" + strconv.Itoa(j)
			c.Title = fmt.Sprintf("%d → %d: %s %s, %s %s", i, j, a, fmtOr(p.a, fixed(3)), b, fmtOr(p.b, fixed(3)))
			if i == j {
				c.Class = "diag"
			}
			row.Cells = append(row.Cells, c)
		}
		t.Rows = append(t.Rows, row)
	}
	return t
}

func fmtOr(v any, f func(float64) string) string {
	if x, ok := num(v); ok {
		return f(x)
	}
	return "–"
}

// statePairsTable shows state_pairs_ks.
func statePairsTable(res *result) *Table {
	t := &Table{ID: "t-state-pairs", Left: 2, Head: []Head{
		{"Betti curve", "β0: spanning-tree edges; β1: the other edges"},
		{"states", ""},
		{"events", "filtration events of each centroid network"},
		{"KS D", "largest gap between the two states' event distributions"},
		{"KS p", "exact Kolmogorov-Smirnov test when affordable"},
		{"KS p, BH", "Benjamini-Hochberg adjusted across the pairs of one Betti curve"},
	}}
	for _, row := range res.rows {
		dim := full(row["dimension"])
		t.Rows = append(t.Rows, Row{Key: Key(row, "dimension", "state_a", "state_b"), Cells: []Cell{
			cell(Part{Col: "dimension", V: dim, Text: dimensionText[dim]}),
			cell(value("state_a", row["state_a"], integer), text(" vs "), value("state_b", row["state_b"], integer)),
			valCell("n_events", row["n_events"], integer),
			cell(value("ks_statistic", row["ks_statistic"], fixed(3)), Part{Text: " " + abbrevMethod(full(row["ks_method"])), Class: "n"}),
			pCell("ks_p", row["ks_p"], false), pCell("ks_p_bh", row["ks_p_bh"], true),
		}})
	}
	return t
}

// covariateTable shows covariate_association for one covariate.
func covariateTable(id, name string, res *result) *Table {
	t := &Table{ID: id, Caption: name, Left: 2, Head: []Head{
		{"state", ""},
		{"measure", ""},
		{"subjects", "subjects with a value of " + name + " (and, for dwell time, a visit to the state)"},
		{"r", "Pearson correlation of " + name + " with the measure"},
		{"slope", "least-squares change of the measure per unit of " + name},
		{"t (df)", ""},
		{"p", "test of r = 0, two-sided"},
		{"p, BH", "Benjamini-Hochberg adjusted across the states of this measure"},
	}}
	for _, row := range res.rows {
		m := full(row["measure"])
		label := measureText[m]
		if label == "" {
			label = m
		}
		t.Rows = append(t.Rows, Row{Key: Key(row, "state", "measure"), Cells: []Cell{
			valCell("state", row["state"], integer),
			cell(Part{Col: "measure", V: m, Text: label}),
			valCell("n", row["n"], integer),
			valCell("r", row["r"], fixed(2)),
			valCell("slope", row["slope"], sig),
			cell(value("t", row["t"], fixed(2)), text(" ("), value("df", row["df"], fixed(0)), text(")")),
			pCell("p", row["p"], false), pCell("p_bh", row["p_bh"], true),
		}})
	}
	return t
}
