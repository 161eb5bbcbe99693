package report

import (
	"context"
	"database/sql"
	"strconv"
)

// Surrogates is the surrogate-data test of the analysis (query
// surrogate_summary, docs/methods.md §10); nil Table when it has none.
type Surrogates struct {
	Headline string // the clustering-quality row in words ("" without a test)
	N        int    // surrogates
	Table    *Table
	Hint     string // the command that adds a test, when there is none
}

func init() {
	settingMeaning["surrogates"] = "N, phase-randomised stationary surrogates of the surrogate-data test run with the ingest"
	settingMeaning["surrogate_fit_windows"] = "fitting-window cap of each surrogate run (0: the default)"
	settingMeaning["surrogate_restarts"] = "k-means restarts of each surrogate run (0: the default)"
}

func (r *Report) loadSurrogates(ctx context.Context, conn *sql.Conn, o Options) error {
	params := map[string]string{"analysis": strconv.FormatInt(r.Analysis.ID, 10)}
	res, err := runQuery(ctx, conn, "surrogate_summary", params)
	if err != nil {
		return err
	}
	if len(res.rows) == 0 {
		r.Surrogates.Hint = "topostate surrogates --db " + shellQuote(o.DBPath) + " --analysis " + shellQuote(r.Analysis.Name) + " --n 99"
		return nil
	}
	t := &Table{ID: "t-surrogates", Left: 2, Head: []Head{
		{"statistic", ""},
		{"state", "frequency rank of the state in the test's own fit; – for the whole model"},
		{"observed", "the original series through the same fit as each surrogate"},
		{"surrogates", "mean ± sd over the surrogates"},
		{"z", "(observed - mean) / sd, descriptive"},
		{"p", "one-sided Monte-Carlo p = (1 + #{surrogate ≥ observed}) / (1 + N)"},
		{"in words", ""},
	}}
	for i, row := range res.rows {
		if i == 0 {
			r.Surrogates.Headline = full(row["in_words"])
			if n, ok := num(row["n_surrogates"]); ok {
				r.Surrogates.N = int(n)
			}
		}
		state := cell(text("–"))
		if row["state"] != nil {
			state = valCell("state", row["state"], integer)
		}
		t.Rows = append(t.Rows, Row{Key: Key(row, "statistic", "state"), Cells: []Cell{
			textCell("statistic", full(row["statistic"])),
			state,
			valCell("observed", row["observed"], sig),
			cell(value("null_mean", row["null_mean"], sig), text(" ± "), value("null_sd", row["null_sd"], sig)),
			valCell("null_z", row["null_z"], fixed(1)),
			pCell("p", row["p"], false),
			textCell("in_words", full(row["in_words"])),
		}})
	}
	r.Surrogates.Table = t
	r.command(o, "the surrogate-data test", "surrogate_summary", params)
	return nil
}
