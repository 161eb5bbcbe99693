package main

import (
	"errors"
	"fmt"
	"io/fs"
	"os"

	"github.com/urfave/cli/v2"

	"github.com/topostate/topostate/schema"
)

func upgradeCommand() *cli.Command {
	return &cli.Command{
		Name:      "upgrade",
		Usage:     "bring a warehouse written by an older topostate to this build's layout, in place",
		ArgsUsage: " ",
		Description: fmt.Sprintf("Adds the tables and columns of layout %d that the file lacks (new columns are empty (NULL)\n"+
			"for the analyses already stored) in one transaction, and records the new version. Nothing stored is\n"+
			"changed or removed, except that a column name an earlier version stored in Latin-1 is renamed to UTF-8. Read-only commands (info, query, export, plot, report) refuse an older file\n"+
			"rather than change it; ingest, stage merge and drop upgrade it themselves. Older topostate builds\n"+
			"cannot read the file afterwards.", schema.Version),
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "db", Value: "topostate.duckdb", Usage: "warehouse `FILE`"},
		},
		Action: func(c *cli.Context) error {
			if c.NArg() > 0 {
				return usagef("upgrade takes no arguments (got %q)", c.Args().First())
			}
			path := c.String("db")
			if _, err := os.Stat(path); errors.Is(err, fs.ErrNotExist) {
				return fmt.Errorf("upgrade: %s does not exist", path)
			}
			from, err := upgradeFile(c, path)
			if err != nil {
				return err
			}
			for _, r := range renamedNames {
				fmt.Fprintf(c.App.Writer, "%s: %s\n", path, r)
			}
			if from == schema.Version && len(renamedNames) > 0 {
				fmt.Fprintf(c.App.Writer, "%s has layout version %d\n", path, schema.Version)
				return nil
			}
			if from == schema.Version {
				fmt.Fprintf(c.App.Writer, "%s already has layout version %d; nothing to do\n", path, schema.Version)
				return nil
			}
			fmt.Fprintf(c.App.Writer, "%s upgraded from layout version %d to %d\n", path, from, schema.Version)
			return nil
		},
	}
}

func upgradeFile(c *cli.Context, path string) (int64, error) {
	db, err := schema.Open(path, false, nil)
	if err != nil {
		return 0, err
	}
	defer db.Close()
	// Names an earlier version stored as they were read (not UTF-8) stop
	// DuckDB's catalog views, so they are renamed first.
	if renamedNames, err = schema.RepairNames(c.Context, db); err != nil {
		return 0, err
	}
	return schema.Upgrade(c.Context, db)
}

// renamedNames are the renames of upgradeFile's last run, for printing.
var renamedNames []string
