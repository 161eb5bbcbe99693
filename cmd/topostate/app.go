package main

import (
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"os/signal"
	"strings"
	"sync/atomic"
	"syscall"

	"github.com/urfave/cli/v2"

	"github.com/topostate/topostate/ingest"
	"github.com/topostate/topostate/schema"
)

// Exit codes: scripts can tell a bad call from a failed run.
const (
	exitOK      = 0
	exitFailure = 1
	exitUsage   = 2
)

// usageError marks an error in how the command was called.
type usageError struct{ err error }

func (e usageError) Error() string { return e.err.Error() }
func (e usageError) Unwrap() error { return e.err }

func usagef(format string, a ...any) error { return usageError{fmt.Errorf(format, a...)} }

const caution = "Research use only: results are not a diagnosis and must not guide the care of a patient; defer to clinical judgement."

func newApp(stdin io.Reader, stdout, stderr io.Writer) *cli.App {
	app := &cli.App{
		Name:  "topostate",
		Usage: "a SQL-queryable warehouse of resting-state connectivity states, their dynamics and topology",
		Description: "topostate ingest reads a cohort of region time series, finds recurring connectivity states\n" +
			"(sliding-window correlations clustered by k-means), measures how long each subject stays in each\n" +
			"state and how often it switches, describes each state's network by its Betti-0 and Betti-1 curves,\n" +
			"and writes everything into one DuckDB file.\n\n" + caution,
		Version:         ingest.Version,
		Reader:          stdin,
		Writer:          stdout,
		ErrWriter:       stderr,
		HideHelpCommand: true,
		ExitErrHandler:  func(*cli.Context, error) {},
		OnUsageError: func(c *cli.Context, err error, sub bool) error {
			if sub && c.Command != nil {
				return usageError{fmt.Errorf("%w; see 'topostate %s --help'", err, c.Command.Name)}
			}
			return usageError{fmt.Errorf("%w; see 'topostate --help'", err)}
		},
		CommandNotFound: func(c *cli.Context, name string) {
			fmt.Fprintf(c.App.ErrWriter, "topostate: no command %q; see 'topostate --help'\n", name)
		},
		Commands: []*cli.Command{
			demoCommand(),
			ingestCommand(),
			stageCommand(),
			simulateCommand(),
			infoCommand(),
			dropCommand(),
			surrogatesCommand(),
			upgradeCommand(),
			queryCommand(),
			exportCommand(),
			plotCommand(),
			reportCommand(),
		},
	}
	for _, c := range app.Commands {
		c.OnUsageError = app.OnUsageError
		for _, s := range c.Subcommands {
			s.OnUsageError = app.OnUsageError
		}
	}
	return app
}

// run is the whole program; main only exits with its code.
func run(args []string, stdin io.Reader, stdout, stderr io.Writer) int {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	var finished atomic.Bool
	defer finished.Store(true) // runs before stop: no message for a normal end
	announced := make(chan struct{})
	context.AfterFunc(ctx, func() {
		defer close(announced)
		stop() // a second Ctrl-C ends the process at once
		if !finished.Load() {
			fmt.Fprintln(stderr, "topostate: stop requested; stopping at the next safe point (Ctrl-C again stops at once; the warehouse keeps only whole analyses either way)")
		}
	})
	app := newApp(stdin, stdout, stderr)
	notFound := false
	app.CommandNotFound = func(c *cli.Context, name string) {
		notFound = true
		fmt.Fprintf(stderr, "topostate: no command %q; see 'topostate --help'\n", name)
	}
	err := app.RunContext(ctx, args)
	if notFound {
		return exitUsage
	}
	if err == nil {
		return exitOK
	}
	if errors.Is(err, context.Canceled) {
		<-announced // the acknowledgement comes before the verdict, however fast the stop
		fmt.Fprintln(stderr, "topostate: interrupted; nothing from this run was written")
		return exitFailure
	}
	msg := err.Error()
	if !strings.HasPrefix(msg, "topostate") && !strings.Contains(msg[:min(len(msg), 12)], ":") {
		msg = "topostate: " + msg
	}
	fmt.Fprintln(stderr, msg)
	var ue usageError
	var iu *ingest.UsageError
	if errors.As(err, &ue) || errors.As(err, &iu) {
		return exitUsage
	}
	return exitFailure
}

// analysisFlag is the --analysis option of query, plot, report, export and
// drop: one spelling and one rule (queries.FindAnalysis) everywhere. left
// says what leaving it out means for the command.
func analysisFlag(left string) *cli.StringFlag {
	return &cli.StringFlag{Name: "analysis", Usage: "the analysis: an `ID`, a name, or latest (the newest); " + left}
}

// openRead opens a warehouse read-only and checks its layout.
func openRead(ctx context.Context, path string) (*sqlDB, error) {
	db, err := schema.Open(path, true, nil)
	if err != nil {
		return nil, err
	}
	if err := schema.CheckLayout(ctx, db); err != nil {
		db.Close()
		return nil, err
	}
	return db, nil
}
