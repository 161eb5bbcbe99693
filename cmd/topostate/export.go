package main

import (
	"errors"
	"fmt"
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
			&cli.StringFlag{Name: "format", Aliases: []string{"f"}, Value: "parquet", Usage: "parquet or csv"},
			&cli.StringSliceFlag{Name: "tables", Usage: "only these `TABLES` (comma-separated or repeated; default all)"},
			&cli.StringFlag{Name: "analysis", Usage: "only the rows of this analysis (`ID`, name or latest; default all)"},
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
			files, err := queries.Export(c.Context, db.Conn, queries.ExportOptions{
				Dir: c.String("out"), Format: format, Tables: c.StringSlice("tables"), Analysis: c.String("analysis"),
				Protect: []string{c.String("db")}})
			var pe *queries.ParamError
			if errors.As(err, &pe) {
				return usageError{err}
			}
			if err != nil {
				return err
			}
			tw := tabwriter.NewWriter(c.App.Writer, 0, 2, 2, ' ', 0)
			fmt.Fprintln(tw, "table\trows\tfile")
			for _, f := range files {
				fmt.Fprintf(tw, "%s\t%d\t%s\n", f.Table, f.Rows, f.Path)
			}
			return tw.Flush()
		},
	}
}
