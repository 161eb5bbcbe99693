package main

import (
	"errors"
	"fmt"
	"strings"
	"text/tabwriter"

	"github.com/urfave/cli/v2"

	"github.com/topostate/topostate/queries"
)

func exportCommand() *cli.Command {
	return &cli.Command{
		Name:  "export",
		Usage: "write warehouse tables as Parquet or CSV files with a data dictionary, for other software",
		Description: "Writes one file per table into --out (OUT/<table>.parquet or .csv) and OUT/data_dictionary.<ext>:\n" +
			"one row per column with its type, meaning and unit. OUT/codebook.csv lists the same columns for\n" +
			"R, Stata and SPSS users: label, type, unit, allowed values, value labels and how missing values look.\n" +
			"CSV: a header row, UTF-8, '.' decimals, and NULL (and NaN) as empty cells, as R, Stata, SPSS and\n" +
			"pandas read them.",
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "db", Value: "topostate.duckdb", Usage: "warehouse `FILE` (opened read-only)"},
			&cli.StringFlag{Name: "out", Aliases: []string{"o"}, Usage: "`FOLDER` for the files (created when missing)"},
			&cli.StringFlag{Name: "format", Aliases: []string{"f"}, Value: "parquet", Usage: "file `FORMAT`: parquet or csv"},
			&cli.StringSliceFlag{Name: "tables", Usage: "only these `TABLES` (comma-separated or repeated; default all)"},
			analysisFlag("only its rows; left out: every analysis, each row carrying its analysis_id"),
		},
		Action: func(c *cli.Context) error {
			if c.String("out") == "" {
				return usagef("export: --out FOLDER is required")
			}
			format, err := queries.ParseFormat(c.String("format"))
			if err != nil || (format != queries.FormatParquet && format != queries.FormatCSV) {
				return usagef("export: --format %q: want parquet or csv", c.String("format"))
			}
			db, err := queries.Open(c.Context, c.String("db"))
			if err != nil {
				return err
			}
			defer db.Close()
			which, err := exportedAnalyses(c, db, c.String("analysis"))
			if err != nil {
				return err
			}
			files, err := queries.Export(c.Context, db.Conn, queries.ExportOptions{
				Dir: c.String("out"), Format: format, Tables: c.StringSlice("tables"), Analysis: c.String("analysis"),
				Protect: []string{c.String("db")}})
			var pe *queries.ParamError
			if errors.As(err, &pe) {
				return usageError{fmt.Errorf("export: %w", err)}
			}
			if err != nil {
				return err
			}
			fmt.Fprintln(c.App.Writer, which)
			tw := tabwriter.NewWriter(c.App.Writer, 0, 2, 2, ' ', 0)
			fmt.Fprintln(tw, "table\trows\tfile")
			for _, f := range files {
				fmt.Fprintf(tw, "%s\t%d\t%s\n", f.Table, f.Rows, f.Path)
			}
			return tw.Flush()
		},
	}
}

// exportedAnalyses names the analyses an export writes: the one --analysis
// chose (queries.FindAnalysis), or every analysis when it was left out.
func exportedAnalyses(c *cli.Context, db *queries.DB, v string) (string, error) {
	if v != "" {
		a, err := queries.FindAnalysis(c.Context, db.Conn, v)
		if err != nil {
			return "", usageError{fmt.Errorf("export: --analysis: %w", err)}
		}
		return "analysis " + a.String(), nil
	}
	rows, err := db.Conn.QueryContext(c.Context, `SELECT analysis_id, name FROM analyses ORDER BY analysis_id`)
	if err != nil {
		return "", fmt.Errorf("export: %w", err)
	}
	defer rows.Close()
	var all []string
	for rows.Next() {
		var a queries.Analysis
		if err := rows.Scan(&a.ID, &a.Name); err != nil {
			return "", fmt.Errorf("export: %w", err)
		}
		all = append(all, a.String())
	}
	if len(all) == 0 {
		return "no analyses (the warehouse holds none yet)", rows.Err()
	}
	return "every analysis (rows carry analysis_id): " + strings.Join(all, ", "), rows.Err()
}
