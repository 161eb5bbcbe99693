package ingest

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"time"

	"github.com/topostate/topostate/schema"
)

// The surrogate stage of the staged pipeline (docs/methods.md §10): after
// fit, shard i of n runs the surrogate indices floor((i-1)(N+1)/n) ..
// floor(i(N+1)/n)-1 of the runs 0..N (run 0 the original series) and
// writes their statistics to surrogates/shard=<i>.json; merge reads the
// shards in order. Every run draws from its own seeds (seed, run, series),
// so the rows equal those of 'ingest --surrogates N'.

// surrogateShard is the file a surrogate shard writes: the statistics of
// runs Lo..Lo+len(Values)-1 (null: an undefined value, NaN).
type surrogateShard struct {
	Lo     int          `json:"first_run"`
	Values [][]*float64 `json:"values"`
}

func (w *Work) surrogatePath(shard int) string {
	return filepath.Join(w.Dir, "surrogates", fmt.Sprintf("shard=%d.json", shard))
}

// Surrogates runs the surrogate-test runs of one shard (the plan's
// --surrogates N must be at least 1; the fit stage must have finished).
func (w *Work) Surrogates(ctx context.Context, sh Shard, workers int, prog Progress) (*ShardSummary, error) {
	start := time.Now()
	if err := w.checkShard(sh); err != nil {
		return nil, err
	}
	unlock, err := w.startStage("surrogates", sh.I)
	if err != nil {
		return nil, err
	}
	defer unlock()
	o := w.Manifest.Options
	if o.Surrogates == 0 {
		return nil, &UsageError{Err: fmt.Errorf("the plan in %s has no surrogate test (plan with --surrogates N)", w.Dir)}
	}
	fit, err := w.readMark("fit", 0)
	if err != nil {
		return nil, err
	}
	st, err := w.stages(workers, prog)
	if err != nil {
		return nil, err
	}
	st.k = fit.States
	set := o.SurrogateSettings().withDefaults(o)
	lo, hi := sh.Range(set.N + 1)
	st.prog.Stage(fmt.Sprintf("surrogate runs %d..%d, shard %s", lo, hi-1, sh), hi-lo)
	out := surrogateShard{Lo: lo}
	err = st.surrogateRange(ctx, set, lo, hi, func(run int, v []float64) error {
		row := make([]*float64, len(v))
		for q, x := range v {
			if !math.IsNaN(x) {
				row[q] = &x
			}
		}
		out.Values = append(out.Values, row)
		return nil
	})
	if err != nil {
		return nil, err
	}
	if err := writeJSON(w.surrogatePath(sh.I), out); err != nil {
		return nil, err
	}
	st.prog.Finish()
	sum := &ShardSummary{Shard: sh, Series: hi - lo, Rows: map[string]int64{"surrogate_runs": int64(hi - lo)}, Seconds: time.Since(start).Seconds()}
	return sum, w.writeMark(stageMark{Stage: "surrogates", Shard: sh.I, FitID: fit.FitID, Series: hi - lo, Rows: sum.Rows, Seconds: sum.Seconds}, []string{w.surrogatePath(sh.I)})
}

// readSurrogates pools the runs of every surrogate shard in order and
// returns the rows, checking each shard used the last fit.
func (w *Work) readSurrogates(fit *stageMark) ([]SurrogateRow, SurrogateSettings, error) {
	o := w.Manifest.Options
	set := o.SurrogateSettings().withDefaults(o)
	runs := make([][]float64, 0, set.N+1)
	for i := 1; i <= w.Manifest.Shards; i++ {
		mk, err := w.readMark("surrogates", i)
		if err != nil {
			return nil, set, err
		}
		if mk.FitID != fit.FitID {
			return nil, set, fmt.Errorf("ingest: surrogate shard %d/%d was run with another fit than the last one in %s; run stage surrogates --shard %d/%d again",
				i, w.Manifest.Shards, w.Dir, i, w.Manifest.Shards)
		}
		if err := w.verify(mk); err != nil {
			return nil, set, err
		}
		b, err := os.ReadFile(w.surrogatePath(i))
		if err != nil {
			return nil, set, fmt.Errorf("ingest: %w", err)
		}
		var sh surrogateShard
		if err := json.Unmarshal(b, &sh); err != nil {
			return nil, set, fmt.Errorf("ingest: %s: %w", w.surrogatePath(i), err)
		}
		if lo, hi := (Shard{I: i, N: w.Manifest.Shards}).Range(set.N + 1); sh.Lo != lo || len(sh.Values) != hi-lo || len(runs) != lo {
			return nil, set, fmt.Errorf("ingest: %s holds runs from %d (%d of them), want %d..%d; run stage surrogates --shard %d/%d again",
				w.surrogatePath(i), sh.Lo, len(sh.Values), lo, hi-1, i, w.Manifest.Shards)
		}
		want := len(surrogateStats(fit.States))
		for _, row := range sh.Values {
			if len(row) != want {
				return nil, set, fmt.Errorf("ingest: %s: a run has %d statistics, want %d", w.surrogatePath(i), len(row), want)
			}
			v := make([]float64, len(row))
			for q, x := range row {
				v[q] = math.NaN()
				if x != nil {
					v[q] = *x
				}
			}
			runs = append(runs, v)
		}
	}
	return surrogateRows(fit.States, runs), set, nil
}

// mergeSurrogates writes the surrogate rows of the work folder, when the
// plan has a surrogate test.
func (w *Work) mergeSurrogates(ctx context.Context, sw *schema.Writer, fit *stageMark) ([]SurrogateRow, error) {
	if w.Manifest.Options.Surrogates == 0 {
		return nil, nil
	}
	rows, set, err := w.readSurrogates(fit)
	if err != nil {
		return nil, err
	}
	return rows, writeSurrogates(ctx, sw, rows, set)
}
