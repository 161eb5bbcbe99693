package report

import (
	"context"
	"database/sql"
	"fmt"
	"strconv"
	"strings"

	"github.com/topostate/topostate/cmd/topostate/internal/figures"
)

// The covariate-adjusted group contrasts (bundled query
// adjusted_group_contrast, docs/methods.md §8), shown when Options.Adjust
// names covariates. Kept apart from the other tables so that this section
// can change on its own.

// AdjustedContrast is one pair of groups compared by
// adjusted_group_contrast.
type AdjustedContrast struct {
	ID     string // anchor, "adjusted-1", ...
	A, B   string
	IA, IB int
	Table  *Table
}

// loadAdjusted runs adjusted_group_contrast for every pair of groups when
// o.Adjust lists covariates.
func (r *Report) loadAdjusted(ctx context.Context, conn *sql.Conn, d *figures.Data, o Options) error {
	if len(o.Adjust) == 0 || d.Group == "" {
		return nil
	}
	r.Adjust = o.Adjust
	gs := contrastGroups(d)
	aid := strconv.FormatInt(r.Analysis.ID, 10)
	for x := range gs {
		for y := x + 1; y < len(gs); y++ {
			a, b := d.Groups[gs[x]].Name, d.Groups[gs[y]].Name
			c := AdjustedContrast{ID: fmt.Sprintf("adjusted-%d", len(r.Adjusted)+1), A: a, B: b, IA: gs[x], IB: gs[y]}
			params := map[string]string{"analysis": aid, "group_column": d.Group, "group_a": a, "group_b": b,
				"adjust": strings.Join(o.Adjust, ","), "n_perm": strconv.Itoa(o.NPerm), "seed": strconv.FormatInt(o.Seed, 10)}
			res, err := runQuery(ctx, conn, "adjusted_group_contrast", params)
			if err != nil {
				return err
			}
			c.Table = adjustedTable(c.ID, a, b, res)
			r.command(o, fmt.Sprintf("group contrast adjusted for %s, %s vs %s", strings.Join(o.Adjust, ", "), a, b), "adjusted_group_contrast", params)
			r.Adjusted = append(r.Adjusted, c)
		}
	}
	return nil
}

var adjustedMeasureText = map[string]string{
	"occupancy":     "occupancy",
	"dwell_seconds": "dwell time (s)",
	"switch_rate":   "switch rate",
	"betti0_area":   "β0 curve area",
}

// adjustedTable shows adjusted_group_contrast.
func adjustedTable(id, a, b string, res *result) *Table {
	t := &Table{ID: "t-" + id, Left: 2, Head: []Head{
		{"measure", "occupancy: share of windows (0-1); dwell time: mean stay, seconds; switch rate: switches per window step (one per subject); β0 curve area: area under the subject's β0 curve of the state"},
		{"state", ""},
		{"subjects", a + " / " + b + ": subjects with every covariate (and, for dwell time and β0 area, a visit to the state)"},
		{"estimate", "adjusted difference " + a + " − " + b + " (least-squares coefficient of the group)"},
		{"t (df)", "estimate / standard error, residual degrees of freedom"},
		{"p", "Student t test of the coefficient, two-sided"},
		{"p, BH", "Benjamini-Hochberg adjusted across the tested rows of this table (occupancy, dwell time, switch rate)"},
		{"p perm.", "Freedman-Lane permutation test: residuals of the model without the group permuted across subjects"},
		{"p perm., BH", "Benjamini-Hochberg adjusted across the tested rows of this table (occupancy, dwell time, switch rate)"},
		{"note", "why a row has no p-value: β0 curve area is a description (it differs with dwell time alone), or its subjects cannot support the model"},
	}}
	for _, row := range res.rows {
		m := full(row["measure"])
		label := adjustedMeasureText[m]
		if label == "" {
			label = m
		}
		t.Rows = append(t.Rows, Row{Key: Key(row, "measure", "state"), Cells: []Cell{
			cell(Part{Col: "measure", V: m, Text: label}),
			valCell("state", row["state"], integer),
			cell(value("n_a", row["n_a"], integer), text(" / "), value("n_b", row["n_b"], integer)),
			valCell("estimate", row["estimate"], signed),
			cell(value("t", row["t"], fixed(2)), text(" ("), value("df", row["df"], fixed(0)), text(")")),
			pCell("p", row["p"], false), pCell("p_bh", row["p_bh"], true),
			pCell("perm_p", row["perm_p"], false), pCell("perm_p_bh", row["perm_p_bh"], true),
			noteCell(row["note"]),
		}})
	}
	return t
}

// noteCell shows the query's note, or nothing.
func noteCell(v any) Cell {
	s, _ := v.(string)
	c := cell(Part{Col: "note", V: s, Text: s})
	c.Class = "reason"
	return c
}
