package main

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"os"
	"strings"

	"github.com/urfave/cli/v2"

	"github.com/topostate/topostate/ingest"
	"github.com/topostate/topostate/queries"
	"github.com/topostate/topostate/schema"
)

// surrogateFlags are the surrogate-test flags of ingest and stage plan.
func surrogateFlags() []cli.Flag {
	return []cli.Flag{
		&cli.IntFlag{Name: "surrogates", Usage: "also test the state model against `N` phase-randomised stationary surrogates of every series (0: no test; 19 or more, 99 for p down to 0.01)"},
		&cli.IntFlag{Name: "surrogate-fit-windows", Usage: fmt.Sprintf("each surrogate run (and the observed run) fits its states on at most `N` windows (0: %d)", ingest.DefaultSurrogateFitWindows)},
		&cli.IntFlag{Name: "surrogate-restarts", Usage: fmt.Sprintf("k-means restarts of each surrogate run, `N` (0: %d)", ingest.DefaultSurrogateRestarts)},
	}
}

func surrogatesCommand() *cli.Command {
	return &cli.Command{
		Name:      "surrogates",
		Usage:     "add a surrogate-data test to a stored analysis: do the states exist beyond stationary sampling variability?",
		ArgsUsage: " ",
		Description: "Reads the cohort and settings recorded with the analysis (the series must be unchanged), replaces every\n" +
			"series by N phase-randomised surrogates (same spectra and static correlations, no dynamics), fits each\n" +
			"with the analysis's k, and stores one row per statistic in surrogate_tests, in one transaction that\n" +
			"touches no other row. docs/methods.md §10.",
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "db", Value: "topostate.duckdb", Usage: "warehouse `FILE`"},
			analysisFlag("left out: the only analysis in the warehouse (several: refused, listing them)"),
			&cli.IntFlag{Name: "n", Usage: "`N` surrogates (19 or more; 99 for p down to 0.01)", DefaultText: "none, required"},
			&cli.IntFlag{Name: "fit-windows", Usage: fmt.Sprintf("each run fits its states on at most `N` windows (0: %d)", ingest.DefaultSurrogateFitWindows)},
			&cli.IntFlag{Name: "restarts", Usage: fmt.Sprintf("k-means restarts of each run, `N` (0: %d)", ingest.DefaultSurrogateRestarts)},
			&cli.StringFlag{Name: "input", Usage: "cohort `FOLDER` when it moved since the analysis (default: the folder recorded); its series must be byte-identical"},
			&cli.BoolFlag{Name: "replace", Usage: "replace the analysis's earlier surrogate test"},
			&cli.IntFlag{Name: "workers", Usage: "`N` parallel workers (0: every core); results do not depend on it"},
			&cli.BoolFlag{Name: "quiet", Aliases: []string{"q"}, Usage: "no progress bar"},
		},
		Action: func(c *cli.Context) error {
			if c.NArg() > 0 {
				return usagef("surrogates takes no arguments (got %q)", c.Args().First())
			}
			path := c.String("db")
			if c.Int("workers") < 0 {
				return usagef("surrogates: --workers %d: must not be negative", c.Int("workers"))
			}
			set := ingest.SurrogateSettings{N: c.Int("n"), FitWindows: c.Int("fit-windows"), Restarts: c.Int("restarts")}
			if set.N == 0 {
				return usagef("surrogates: --n N is required (99 gives p-values down to 0.01)")
			}
			if err := set.Check(); err != nil {
				return err
			}
			if _, err := os.Stat(path); errors.Is(err, fs.ErrNotExist) {
				return fmt.Errorf("surrogates: %s does not exist", path)
			}
			if err := upgradeIfOld(c, path); err != nil {
				return err
			}
			db, err := schema.Open(path, false, nil)
			if err != nil {
				return err
			}
			defer db.Close()
			// One rule for which analysis (queries.FindAnalysis): left out,
			// the only one; else an id, a name or latest.
			a, err := queries.FindAnalysis(c.Context, db, c.String("analysis"))
			if err != nil {
				return usageError{fmt.Errorf("surrogates: %w", err)}
			}
			name := a.Name
			var prog ingest.Progress
			if p := newProgress(c.App.ErrWriter, c.Bool("quiet")); p != nil {
				prog = p
			}
			res, err := ingest.AddSurrogates(c.Context, db, name, c.String("input"), set, c.Bool("replace"), c.Int("workers"), prog)
			if err != nil {
				return err
			}
			w := c.App.Writer
			fmt.Fprintf(w, "surrogate test of analysis %q (id %d, %d states) written to %s", res.Name, res.AnalysisID, res.States, path)
			if res.Replaced > 0 {
				fmt.Fprintf(w, " (replacing %d rows)", res.Replaced)
			}
			fmt.Fprintf(w, "\n  each run: at most %d fitting windows, %d k-means restarts; %.1fs\n", res.Settings.FitWindows, res.Settings.Restarts, res.Seconds)
			printSurrogates(w, "  ", "  ", toShown(res.Rows))
			return nil
		},
	}
}

// shownSurrogate is a surrogate_tests row for printing.
type shownSurrogate struct {
	Statistic          string
	State              int // 0: whole model
	Observed, NullMean float64
	NullSD             float64
	N                  int
	P                  float64
}

func toShown(rows []ingest.SurrogateRow) []shownSurrogate {
	out := make([]shownSurrogate, len(rows))
	for i, r := range rows {
		out[i] = shownSurrogate{r.Statistic, r.State, r.Observed, r.NullMean, r.NullSD, r.N, r.P}
	}
	return out
}

// surrogateSentence says in plain words what a row tests and its p.
func surrogateSentence(r shownSurrogate) string {
	var what string
	switch r.Statistic {
	case ingest.StatClusterQuality:
		what = "states more distinct (windows cluster more tightly)"
	case ingest.StatWindowVariability:
		what = "window correlations vary more over time"
	case ingest.StatBettiDistance:
		what = "state networks differ more in topology (Betti curves)"
	case ingest.StatMeanDwell:
		if r.State > 0 {
			what = fmt.Sprintf("state %d (by frequency) lasts longer", r.State)
		} else {
			what = "states last longer"
		}
	default:
		what = r.Statistic
	}
	return fmt.Sprintf("%s than in %d stationary surrogates: p = %s (observed %.4g, surrogates %.4g ± %.2g)",
		what, r.N, formatP(r.P), r.Observed, r.NullMean, r.NullSD)
}

func formatP(p float64) string {
	if p >= 0.01 {
		return fmt.Sprintf("%.2f", p)
	}
	return fmt.Sprintf("%.3f", p)
}

// surrogateNote ends every printed surrogate test.
const surrogateNote = "(one-sided Monte-Carlo p-values, each a separate question, not adjusted for multiplicity; docs/methods.md §10)"

// printSurrogates prints one line per row and the note, the first line
// after first (the rest after indent).
func printSurrogates(w io.Writer, first, indent string, rows []shownSurrogate) {
	if len(rows) == 0 {
		return
	}
	for i, r := range rows {
		lead := indent
		if i == 0 {
			lead = first
		}
		fmt.Fprintf(w, "%s%s\n", lead, surrogateSentence(r))
	}
	fmt.Fprintf(w, "%s%s\n", indent, surrogateNote)
}

// surrogateHeadline is the one line of a summary: the clustering-quality
// row (states more distinct), or the window variability with one state.
func surrogateHeadline(rows []shownSurrogate) string {
	for _, want := range []string{ingest.StatClusterQuality, ingest.StatWindowVariability} {
		for _, r := range rows {
			if r.Statistic == want && r.State == 0 {
				s := surrogateSentence(r)
				return strings.SplitN(s, " (observed", 2)[0]
			}
		}
	}
	return ""
}

// readSurrogates returns the surrogate_tests rows of every analysis, by
// analysis id, in stored order.
func readSurrogates(ctx context.Context, db *sql.DB) (map[int][]shownSurrogate, error) {
	rows, err := db.QueryContext(ctx, `SELECT analysis_id, statistic, coalesce(state, 0), observed,
		coalesce(null_mean, 'NaN'::DOUBLE), coalesce(null_sd, 'NaN'::DOUBLE), n_surrogates, p FROM surrogate_tests`)
	if err != nil {
		return nil, err
	}
	defer rows.Close()
	out := map[int][]shownSurrogate{}
	for rows.Next() {
		var id int
		var r shownSurrogate
		if err := rows.Scan(&id, &r.Statistic, &r.State, &r.Observed, &r.NullMean, &r.NullSD, &r.N, &r.P); err != nil {
			return nil, err
		}
		out[id] = append(out[id], r)
	}
	return out, rows.Err()
}

// writeSurrogateTests prints each analysis's surrogate test in plain words
// (info).
func writeSurrogateTests(ctx context.Context, db *sql.DB, dbPath string, w io.Writer) error {
	tests, err := readSurrogates(ctx, db)
	if err != nil {
		return fmt.Errorf("info: %w", err)
	}
	rows, err := db.QueryContext(ctx, `SELECT analysis_id, name FROM analyses ORDER BY analysis_id`)
	if err != nil {
		return fmt.Errorf("info: %w", err)
	}
	defer rows.Close()
	for rows.Next() {
		var id int
		var name string
		if err := rows.Scan(&id, &name); err != nil {
			return fmt.Errorf("info: %w", err)
		}
		t := tests[id]
		name = schema.Printable(name) // a stored name may hold control characters
		if len(t) == 0 {
			fmt.Fprintf(w, "analysis %d (%s): no surrogate test; add one with 'topostate surrogates --db %s --analysis %d --n 99'\n", id, name, shellWord(dbPath), id)
			continue
		}
		fmt.Fprintf(w, "analysis %d (%s): %s\n", id, name, surrogateHeadline(t))
		printSurrogates(w, "  ", "  ", t)
	}
	return rows.Err()
}

// demoSurrogates adds the surrogate test to the demo's analysis, as
// 'topostate surrogates' would, and prints it in plain words (n = 0: skip);
// self is how the user calls this program (selfCommand).
func demoSurrogates(c *cli.Context, out io.Writer, self, dbPath, name string, n int) error {
	if n == 0 {
		return nil
	}
	fmt.Fprintf(out, "2b. %s surrogates --db %s --analysis %s --n %d\n", self, shellWord(dbPath), name, n)
	fmt.Fprintln(out, "   Do the states exist? Every series is replaced by phase-randomised copies that keep its")
	fmt.Fprintln(out, "   spectra and static correlations but have no states; the same fit is run on each.")
	db, err := schema.Open(dbPath, false, nil)
	if err != nil {
		return err
	}
	defer db.Close()
	var prog ingest.Progress
	if p := newProgress(c.App.ErrWriter, c.Bool("quiet")); p != nil {
		prog = p
	}
	res, err := ingest.AddSurrogates(c.Context, db, name, "", ingest.SurrogateSettings{N: n}, false, 0, prog)
	if err != nil {
		return err
	}
	printSurrogates(out, "   ", "   ", toShown(res.Rows))
	fmt.Fprintln(out)
	return nil
}
