package main

import (
	"errors"
	"fmt"
	"path/filepath"
	"strings"

	"github.com/urfave/cli/v2"

	"github.com/topostate/topostate/cmd/topostate/internal/figures"
)

func plotCommand() *cli.Command {
	return &cli.Command{
		Name:      "plot",
		Usage:     "draw an analysis's figures (Betti curves, elbow, occupancy, dwell, transitions, centroids) as PNG and SVG",
		ArgsUsage: " ",
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "db", Value: "topostate.duckdb", Usage: "warehouse `FILE` (opened read-only)"},
			analysisFlag("left out: the only analysis in the warehouse (several: refused, listing them)"),
			&cli.StringFlag{Name: "out", Usage: "`FOLDER` for the image files (created when missing)"},
			&cli.StringFlag{Name: "group", Value: "group", Usage: "subjects-table `COLUMN` whose values are the groups compared (\"\": one group)"},
			&cli.StringFlag{Name: "format", Value: "png,svg", Usage: "image `FORMATS`, comma-separated: png, svg"},
			&cli.IntFlag{Name: "dpi", Value: 144, Usage: "resolution of the PNG files in `DPI` (dots per inch)"},
		},
		Action: func(c *cli.Context) error {
			if c.NArg() > 0 {
				return usagef("plot takes no arguments (got %q)", c.Args().First())
			}
			if c.String("out") == "" {
				return usagef("plot: --out FOLDER is required")
			}
			var formats []string
			for _, f := range strings.Split(c.String("format"), ",") {
				f = strings.ToLower(strings.TrimSpace(f))
				if f != "png" && f != "svg" {
					return usagef("plot: --format %q: want png, svg or png,svg", c.String("format"))
				}
				formats = append(formats, f)
			}
			if dpi := c.Int("dpi"); dpi < 36 || dpi > 1200 {
				return usagef("plot: --dpi %d: want 36 to 1200", dpi)
			}
			db, err := openRead(c.Context, c.String("db"))
			if err != nil {
				return err
			}
			defer db.Close()
			d, err := figures.Load(c.Context, db, c.String("analysis"), c.String("group"), !c.IsSet("group"))
			if errors.Is(err, figures.ErrUsage) {
				return usageError{fmt.Errorf("plot: %w", err)}
			}
			if err != nil {
				return err
			}
			for _, n := range d.Notes {
				fmt.Fprintf(c.App.ErrWriter, "plot: note: %s\n", n)
			}
			figs, err := figures.Figures(d)
			if err != nil {
				return err
			}
			for _, f := range figs {
				for _, ext := range formats {
					if err := refuseClobber("plot", "--out", filepath.Join(c.String("out"), f.Name+"."+ext), c.String("db")); err != nil {
						return err
					}
				}
			}
			files, err := figures.WriteAll(d, c.String("out"), formats, c.Int("dpi"))
			if err != nil {
				return err
			}
			fmt.Fprintf(c.App.Writer, "%d figure files for analysis %d (%q) written to %s:\n", len(files), d.AnalysisID, d.Name, c.String("out"))
			for _, f := range files {
				fmt.Fprintf(c.App.Writer, "  %s\n", f)
			}
			return nil
		},
	}
}
