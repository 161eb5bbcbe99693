package main

import (
	"database/sql"
	"fmt"
	"text/tabwriter"

	"github.com/urfave/cli/v2"

	"github.com/topostate/topostate/schema"
)

type sqlDB = sql.DB

func infoCommand() *cli.Command {
	return &cli.Command{
		Name:  "info",
		Usage: "list the analyses in a warehouse with their settings and sizes",
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "db", Value: "topostate.duckdb", Usage: "warehouse `FILE`"},
		},
		Action: func(c *cli.Context) error {
			db, err := openRead(c.Context, c.String("db"))
			if err != nil {
				return err
			}
			defer db.Close()
			rows, err := db.QueryContext(c.Context, `
				SELECT analysis_id, name, strftime(created_at, '%Y-%m-%d %H:%M'), tool_version, n_subjects,
				       n_regions, n_states, n_windows, fit_windows,
				       CASE WHEN (parameters->>'window_seconds')::DOUBLE > 0 THEN (parameters->>'window_seconds') || 's' ELSE parameters->>'window' END,
				       CASE WHEN (parameters->>'step_seconds')::DOUBLE > 0 THEN (parameters->>'step_seconds') || 's' ELSE parameters->>'step' END, parameters->>'taper', parameters->>'fisher_z',
				       parameters->>'seed', input_dir,
				       (SELECT count(*) FROM excluded_inputs e WHERE e.analysis_id = a.analysis_id)
				FROM analyses a ORDER BY analysis_id`)
			if err != nil {
				return fmt.Errorf("info: %w", err)
			}
			defer rows.Close()
			tw := tabwriter.NewWriter(c.App.Writer, 0, 2, 2, ' ', 0)
			fmt.Fprintln(tw, "id\tname\tcreated (UTC)\tversion\tseries\tregions\tstates\twindows\tfit\twindow/step\ttaper\tfisher z\tseed\texcluded\tinput")
			n := 0
			for rows.Next() {
				var id, subj, reg, k, fit, excl int
				var nwin int64
				var name, created, ver, win, step, taper, fz, seed, input string
				if err := rows.Scan(&id, &name, &created, &ver, &subj, &reg, &k, &nwin, &fit, &win, &step, &taper, &fz, &seed, &input, &excl); err != nil {
					return fmt.Errorf("info: %w", err)
				}
				fmt.Fprintf(tw, "%d\t%s\t%s\t%s\t%d\t%d\t%d\t%d\t%d\t%s/%s\t%s\t%s\t%s\t%d\t%s\n",
					id, schema.Printable(name), created, ver, subj, reg, k, nwin, fit, win, step, taper, fz, seed, excl, schema.Printable(input))
				n++
			}
			if err := rows.Err(); err != nil {
				return fmt.Errorf("info: %w", err)
			}
			if n == 0 {
				fmt.Fprintf(c.App.Writer, "%s holds no analyses yet; add one with 'topostate ingest --input FOLDER --db %s'\n", c.String("db"), c.String("db"))
				return nil
			}
			if err := tw.Flush(); err != nil {
				return err
			}
			if err := writeKChoices(c.Context, db, c.App.Writer); err != nil {
				return err
			}
			return writeSurrogateTests(c.Context, db, c.String("db"), c.App.Writer)
		},
	}
}
