package main

import (
	"bufio"
	"errors"
	"fmt"
	"io/fs"
	"math/rand/v2"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"

	"github.com/urfave/cli/v2"

	"github.com/topostate/topostate/compute"
	"github.com/topostate/topostate/ingest"
)

func simulateCommand() *cli.Command {
	return &cli.Command{
		Name:  "simulate",
		Usage: "write a synthetic cohort (invented data with known states) in the input layout",
		Description: "Null cohorts for checking false-positive rates (docs/methods.md §12):\n" +
			"   nothing differs:         --group-effect 0 (the default)\n" +
			"   only dwell times differ: --group-effect 0.02 (identical state networks in both groups)\n" +
			"   no states at all:        --states 1 (one stationary process)",
		Flags: []cli.Flag{
			&cli.StringFlag{Name: "out", Aliases: []string{"o"}, Usage: "new or empty `FOLDER` to write the cohort into (a folder holding anything is refused: simulate never mixes into or replaces files)"},
			&cli.IntFlag{Name: "subjects", Value: 20, Usage: "number of subjects (alternating groups A and B)"},
			&cli.IntFlag{Name: "regions", Value: 30, Usage: "regions per series"},
			&cli.IntFlag{Name: "timepoints", Value: 600, Usage: "time points per series"},
			&cli.IntFlag{Name: "states", Value: 3, Usage: "latent connectivity states"},
			&cli.Float64Flag{Name: "tr", Value: 2.0, Usage: "repetition time written to the sidecars, seconds"},
			&cli.Float64Flag{Name: "stickiness", Value: 0.97, Usage: "per-time-point probability of staying in a state"},
			&cli.Float64Flag{Name: "group-effect", Usage: "added to group B's stickiness (longer dwell times; the state networks stay identical between groups)"},
			&cli.Float64Flag{Name: "noise", Value: 0.5, Usage: "measurement noise relative to the signal"},
			&cli.Float64Flag{Name: "offset", Value: 1000, Usage: "constant scanner-like offset added to every region"},
			&cli.Float64Flag{Name: "autocorr", Value: compute.DefaultAutocorr, Usage: "lag-1 autocorrelation of the latent AR(1) signals per time point, in [0, 1); 0 = independent time points"},
			&cli.Uint64Flag{Name: "seed", Value: 1, Usage: "seed; same seed, same cohort"},
			// For the benchmark harness's state-recovery check (scripts/bench).
			&cli.BoolFlag{Name: "truth", Hidden: true, Usage: "also write truth.tsv: the latent state of every subject at every time point"},
		},
		Action: func(c *cli.Context) error {
			if c.String("out") == "" {
				return usagef("simulate: --out FOLDER is required")
			}
			if err := refuseNonEmpty("simulate", "--out", c.String("out")); err != nil {
				return err
			}
			if err := ingest.CheckTR(c.Float64("tr")); err != nil {
				return usagef("simulate: --tr: %v", err)
			}
			spec := compute.CohortSpec{
				Subjects: c.Int("subjects"), Regions: c.Int("regions"), Timepoints: c.Int("timepoints"),
				States: c.Int("states"), TR: c.Float64("tr"), Stickiness: c.Float64("stickiness"),
				GroupEffect: c.Float64("group-effect"), Noise: c.Float64("noise"), Offset: c.Float64("offset"),
				Autocorr: c.Float64("autocorr"), White: c.Float64("autocorr") == 0,
				Seed: c.Uint64("seed"),
			}
			groups := map[string]string{"A": "A", "B": "B"}
			subs, err := writeSynthetic(c.String("out"), spec, groups, "score")
			if err != nil {
				return err
			}
			if c.Bool("truth") {
				if err := writeTruth(filepath.Join(c.String("out"), "truth.tsv"), subs); err != nil {
					return err
				}
			}
			fmt.Fprintf(c.App.Writer, "wrote %d synthetic subjects (%d regions x %d time points, %d states, latent lag-1 autocorrelation %g) to %s\n",
				spec.Subjects, spec.Regions, spec.Timepoints, spec.States, c.Float64("autocorr"), c.String("out"))
			return nil
		},
	}
}

// refuseNonEmpty refuses a folder that exists and holds anything (exit 2):
// a command that writes a whole new cohort there would otherwise mix its
// invented series into a real cohort, or replace some of its files. There
// is no option to allow it; remove the folder or choose another.
func refuseNonEmpty(cmd, flag, dir string) error {
	f, err := os.Open(dir)
	if errors.Is(err, fs.ErrNotExist) {
		return nil
	}
	if err != nil {
		return usagef("%s: %s %s: %v", cmd, flag, dir, err)
	}
	defer f.Close()
	if st, err := f.Stat(); err == nil && !st.IsDir() {
		return usagef("%s: %s %s is a file, not a folder", cmd, flag, dir)
	}
	names, _ := f.Readdirnames(4)
	if len(names) == 0 {
		return nil
	}
	sort.Strings(names)
	more := ""
	if len(names) == 4 {
		names, more = names[:3], ", ..."
	}
	return usagef("%s: %s %s is not empty (it holds %s%s); %s writes only into a new or empty folder, so nothing there is mixed or replaced: choose another folder",
		cmd, flag, dir, strings.Join(names, ", "), more, cmd)
}

// writeSynthetic simulates a cohort and writes it with invented covariates:
// group (names from groups), age in years, and a symptom-like score (column
// scoreName) that is higher on average in group B.
func writeSynthetic(dir string, spec compute.CohortSpec, groups map[string]string, scoreName string) ([]compute.SimSubject, error) {
	subs, err := compute.SimulateCohort(spec)
	if err != nil {
		return nil, usageError{err}
	}
	regions := make([]string, spec.Regions)
	for j := range regions {
		regions[j] = fmt.Sprintf("node%03d", j+1)
	}
	ids := make([]string, len(subs))
	series := make([]compute.Series, len(subs))
	rows := make([]ingest.SyntheticParticipant, len(subs))
	rng := rand.New(rand.NewPCG(spec.Seed, 0xc0fa))
	for i, s := range subs {
		ids[i], series[i] = s.ID, s.Series
		age := 22 + rng.IntN(44)
		score := 8 + 3*rng.NormFloat64()
		if s.Group == "B" {
			score += 4
		}
		ageCell := strconv.Itoa(age)
		if i%9 == 8 {
			ageCell = "n/a" // a missing value, as real sheets have
		}
		rows[i] = ingest.SyntheticParticipant{ID: s.ID, Cells: []string{groups[s.Group], ageCell, strconv.FormatFloat(score, 'f', 1, 64)}}
	}
	tr := spec.TR
	if tr == 0 {
		tr = 2
	}
	return subs, ingest.WriteCohort(dir, regions, tr, ids, series, []string{"group", "age", scoreName}, rows)
}

// writeTruth writes the generator's latent states: one row per subject and
// time point (1-based, as in the series file), states numbered from 1.
func writeTruth(path string, subs []compute.SimSubject) error {
	f, err := os.OpenFile(path, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o644) // never over another file
	if err != nil {
		return fmt.Errorf("topostate: %w", err)
	}
	w := bufio.NewWriter(f)
	fmt.Fprintln(w, "participant_id\ttimepoint\tstate")
	for _, s := range subs {
		for t, st := range s.Truth {
			fmt.Fprintf(w, "%s\t%d\t%d\n", s.ID, t+1, st+1)
		}
	}
	if err := w.Flush(); err != nil {
		f.Close()
		return fmt.Errorf("topostate: %w", err)
	}
	return f.Close()
}
