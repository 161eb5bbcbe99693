package report

import (
	"fmt"
	"math"
	"strconv"
	"strings"

	"github.com/topostate/topostate/compute"
)

// familyColumns are the inferential p-value columns that enter the
// report-wide family of Options.AdjustAll, one per hypothesis: the
// studentised permutation p of each occupancy and dwell contrast (its Welch
// p tests the same hypothesis and is left out so no hypothesis counts
// twice), the curve permutation p of each Betti-curve contrast, the
// Freedman-Lane p of each covariate-adjusted contrast (report --adjust;
// descriptive rows there have no p and stay out) and the Pearson p of each
// covariate association. Descriptive statistics (distances, the
// state-pair table) never enter it.
var familyColumns = map[string]string{
	"dwell":      "perm_p",
	"filtration": "curve_perm_p",
	"adjusted":   "perm_p",
	"covariate":  "p",
}

// AllTables describes the report-wide adjustment when one was asked for.
type AllTables struct {
	Method string // "BH" or "BY"
	Name   string // the method's full name
	M      int    // p-values in the family
	Column string // the added column's data-col
}

// adjustAcrossTables adds to every inferential table a column holding its
// p-values adjusted by method over the family of all of the report's
// inferential p-values (familyColumns), the NULL ones left out of m.
func (r *Report) adjustAcrossTables(method string) error {
	m := compute.AdjustMethod(strings.ToLower(method))
	name := map[compute.AdjustMethod]string{compute.AdjustBH: "Benjamini-Hochberg", compute.AdjustBY: "Benjamini-Yekutieli"}[m]
	if name == "" {
		return fmt.Errorf("adjustment %q: want bh or by", method)
	}
	type member struct {
		t   *Table
		row int
	}
	var tables []*Table
	var cols []string
	for _, c := range r.Contrasts {
		tables = append(tables, c.Dwell, c.Filtration)
		cols = append(cols, familyColumns["dwell"], familyColumns["filtration"])
	}
	for _, c := range r.Adjusted {
		tables = append(tables, c.Table)
		cols = append(cols, familyColumns["adjusted"])
	}
	for _, t := range r.Covariates {
		tables = append(tables, t)
		cols = append(cols, familyColumns["covariate"])
	}
	var members []member
	var ps []float64
	var nan []int // members whose p is NULL
	for i, t := range tables {
		if t == nil {
			continue
		}
		for j, row := range t.Rows {
			v, ok := partValue(row, cols[i])
			if !ok {
				return fmt.Errorf("table %s has no column %s to adjust", t.ID, cols[i])
			}
			p := mathNaN
			if v != "" {
				x, err := strconv.ParseFloat(v, 64)
				if err != nil {
					return fmt.Errorf("table %s row %s: %s = %q", t.ID, row.Key, cols[i], v)
				}
				p = x
			} else {
				nan = append(nan, len(ps))
			}
			members = append(members, member{t, j})
			ps = append(ps, p)
		}
	}
	q, err := compute.AdjustPValues(ps, m)
	if err != nil {
		return err
	}
	col := "report_p_" + string(m)
	r.AllTables = &AllTables{Method: strings.ToUpper(string(m)), Name: name, M: len(ps) - len(nan), Column: col}
	title := fmt.Sprintf("%s adjusted across all %d inferential p-values of this report at once (see “Reading this report”)", name, r.AllTables.M)
	for _, t := range tables {
		if t == nil {
			continue
		}
		t.Head = append(t.Head, Head{"p, " + r.AllTables.Method + " all", title})
	}
	for i, mb := range members {
		var v any
		if !math.IsNaN(q[i]) {
			v = q[i]
		}
		row := &mb.t.Rows[mb.row]
		row.Cells = append(row.Cells, pCell(col, v, true))
	}
	return nil
}

// partValue returns the data-v of the part of row showing column col.
func partValue(row Row, col string) (string, bool) {
	for _, c := range row.Cells {
		for _, p := range c.Parts {
			if p.Col == col {
				return p.V, true
			}
		}
	}
	return "", false
}

var mathNaN = math.NaN()
