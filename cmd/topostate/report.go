package main

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"

	"github.com/urfave/cli/v2"

	"github.com/topostate/topostate/cmd/topostate/internal/figures"
	"github.com/topostate/topostate/cmd/topostate/internal/report"
	"github.com/topostate/topostate/ingest"
	"github.com/topostate/topostate/queries"
)

func reportCommand() *cli.Command {
	return &cli.Command{
		Name:      "report",
		Usage:     "write one analysis as a self-contained HTML page: settings, cohort, figures and group contrasts",
		ArgsUsage: " ",
		Description: "Writes one HTML file that needs nothing else (figures inlined as SVG, no scripts, fonts or\n" +
			"links to fetch): the analysis settings, a cohort summary, the choice of k, the figures of\n" +
			"'topostate plot', and for every pair of groups the bundled queries state_dwell_by_group,\n" +
			"filtration_tests_by_group and transitions_by_group, with Benjamini-Hochberg adjusted p-values.\n" +
			"With --adjust COLUMNS, also adjusted_group_contrast: the group contrasts adjusted for those covariates.",
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "db", Value: "topostate.duckdb", Usage: "warehouse `FILE` (opened read-only)"},
			analysisFlag("left out: the only analysis in the warehouse (several: refused, listing them)"),
			&cli.StringFlag{Name: "out", Aliases: []string{"o"}, Usage: "the HTML `FILE` to write"},
			&cli.StringFlag{Name: "group", Value: "group", Usage: "subjects-table `COLUMN` whose values are the groups compared (\"\": one group)"},
			&cli.IntFlag{Name: "n-perm", Value: 9999, Usage: "`N` relabellings of every permutation test but the Betti-curve test"},
			&cli.IntFlag{Name: "curve-n-perm", Value: 999, Usage: "`N` relabellings of the Betti-curve test (filtration_tests_by_group; each relabelling sums whole curves)"},
			&cli.Int64Flag{Name: "seed", Value: 1, Usage: "permutation `SEED`"},
			&cli.StringFlag{Name: "adjust-all", Usage: "also adjust all inferential p-values of the report as one family: `METHOD` bh (Benjamini-Hochberg) or by (Benjamini-Yekutieli, any dependence)"},
			&cli.StringFlag{Name: "adjust", Usage: "comma-separated subjects `COLUMNS` (e.g. age,sex,site): add group contrasts adjusted for them (bundled query adjusted_group_contrast)"},
		},
		Action: func(c *cli.Context) error {
			if c.NArg() > 0 {
				return usagef("report takes no arguments (got %q)", c.Args().First())
			}
			out := c.String("out")
			if out == "" {
				return usagef("report: --out FILE is required")
			}
			for _, f := range []string{"n-perm", "curve-n-perm"} {
				if n := c.Int(f); n < 1 || n > 10_000_000 {
					return usagef("report: --%s %d: want 1 to 10000000", f, n)
				}
			}
			if a := c.String("adjust-all"); a != "" && a != "bh" && a != "by" {
				return usagef("report: --adjust-all %q: want bh or by", a)
			}
			if err := refuseClobber("report", "--out", out, c.String("db")); err != nil {
				return err
			}
			db, err := openRead(c.Context, c.String("db"))
			if err != nil {
				return err
			}
			defer db.Close()
			conn, err := db.Conn(c.Context)
			if err != nil {
				return fmt.Errorf("report: %w", err)
			}
			defer conn.Close()
			if err := queries.Register(c.Context, conn, queries.FS); err != nil {
				return err
			}
			r, err := report.Build(c.Context, db, conn, report.Options{
				Analysis: c.String("analysis"), Group: c.String("group"), DefaultGroup: !c.IsSet("group"),
				NPerm: c.Int("n-perm"), CurveNPerm: c.Int("curve-n-perm"), Seed: c.Int64("seed"), DBPath: c.String("db"), Adjust: adjustList(c.String("adjust")),
				Caution: caution, Generator: "topostate " + ingest.Version, AdjustAll: c.String("adjust-all"),
			})
			var perr *queries.ParamError
			if errors.Is(err, figures.ErrUsage) || errors.As(err, &perr) {
				return usageError{err}
			}
			if err != nil {
				return err
			}
			for _, n := range r.Notes {
				fmt.Fprintf(c.App.ErrWriter, "report: note: %s\n", n)
			}
			if err := writeFileAtomic(out, r); err != nil {
				return err
			}
			fmt.Fprintf(c.App.Writer, "report for analysis %d (%q) written to %s (%s)\n", r.Analysis.ID, r.Analysis.Name, out, plural(len(r.Contrasts), "group contrast"))
			return nil
		},
	}
}

// adjustList splits --adjust at commas; "" gives nil (no adjusted table).
func adjustList(s string) []string {
	var out []string
	for _, p := range strings.Split(s, ",") {
		if p = strings.TrimSpace(p); p != "" {
			out = append(out, p)
		}
	}
	return out
}

// writeFileAtomic renders r into a temporary file beside path and renames
// it into place, so a failed run leaves no half-written page.
func writeFileAtomic(path string, r *report.Report) error {
	dir := filepath.Dir(path)
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return fmt.Errorf("report: %w", err)
	}
	tmp, err := os.CreateTemp(dir, ".report-*.tmp")
	if err != nil {
		return fmt.Errorf("report: %w", err)
	}
	defer os.Remove(tmp.Name())
	err = r.Render(tmp)
	if cerr := tmp.Close(); err == nil && cerr != nil {
		err = fmt.Errorf("report: %w", cerr)
	}
	if err != nil {
		return err
	}
	if err := os.Chmod(tmp.Name(), 0o644); err != nil {
		return fmt.Errorf("report: %w", err)
	}
	if err := os.Rename(tmp.Name(), path); err != nil {
		return fmt.Errorf("report: %w", err)
	}
	return nil
}

func plural(n int, noun string) string {
	if n == 1 {
		return "1 " + noun
	}
	return fmt.Sprintf("%d %ss", n, noun)
}
