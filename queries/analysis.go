package queries

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"strconv"
	"strings"
)

// The one rule every command (query, export, plot, report, drop) follows to
// pick an analysis, so the same words always mean the same analysis:
//
//   - nothing given: the warehouse's only analysis; with several, the
//     command refuses and lists them (it never guesses);
//   - an integer: the analysis with that analysis_id;
//   - "latest": the highest analysis_id (the newest), only when asked for;
//   - any other text: the analysis with that name.
//
// An analysis that is not there is an error wrapping ErrNoAnalysis that
// lists the analyses present; several analyses and nothing given is an
// error wrapping ErrAnalysisAmbiguous.

// ErrAnalysisAmbiguous is wrapped by the error for a warehouse holding
// several analyses when none was named.
var ErrAnalysisAmbiguous = errors.New("no analysis chosen")

// Querier is what the resolver needs of a connection: *sql.DB, *sql.Conn
// and *sql.Tx all have it.
type Querier interface {
	QueryContext(ctx context.Context, query string, args ...any) (*sql.Rows, error)
	QueryRowContext(ctx context.Context, query string, args ...any) *sql.Row
}

// Analysis names one analyses row: its id, name and how many analyses the
// warehouse holds (for messages such as "analysis 2 of 3").
type Analysis struct {
	ID    int64
	Name  string
	Count int
}

// String is the analysis as messages name it: 2 ("rest-b").
func (a Analysis) String() string { return fmt.Sprintf("%d (%q)", a.ID, a.Name) }

// FindAnalysis applies the rule above to v (trimmed): "" for the only
// analysis, an id, "latest" or a name.
func FindAnalysis(ctx context.Context, q Querier, v string) (Analysis, error) {
	v = strings.TrimSpace(v)
	all, err := listAnalyses(ctx, q)
	if err != nil {
		return Analysis{}, err
	}
	if len(all) == 0 {
		return Analysis{}, fmt.Errorf("%w: the warehouse holds no analyses yet (run topostate ingest)", ErrNoAnalysis)
	}
	pick := func(a Analysis) (Analysis, error) { a.Count = len(all); return a, nil }
	switch n, perr := strconv.ParseInt(v, 10, 64); {
	case v == "":
		if len(all) == 1 {
			return pick(all[0])
		}
		return Analysis{}, fmt.Errorf("%w: the warehouse holds %d analyses: %s; choose one with --analysis (an id, a name, or latest for the newest)",
			ErrAnalysisAmbiguous, len(all), analysisList(all))
	case v == "latest":
		return pick(all[len(all)-1])
	case perr == nil:
		for _, a := range all {
			if a.ID == n {
				return pick(a)
			}
		}
	}
	for _, a := range all {
		if a.Name == v {
			return pick(a)
		}
	}
	return Analysis{}, fmt.Errorf("%w %q; the warehouse holds: %s (give an id, a name or latest)", ErrNoAnalysis, v, analysisList(all))
}

// ResolveAnalysis is FindAnalysis returning the analysis_id only.
func ResolveAnalysis(ctx context.Context, q Querier, v string) (int64, error) {
	a, err := FindAnalysis(ctx, q, v)
	return a.ID, err
}

func listAnalyses(ctx context.Context, q Querier) ([]Analysis, error) {
	rows, err := q.QueryContext(ctx, `SELECT analysis_id, name FROM analyses ORDER BY analysis_id`)
	if err != nil {
		return nil, fmt.Errorf("queries: find analysis: %w", err)
	}
	defer rows.Close()
	var all []Analysis
	for rows.Next() {
		var a Analysis
		if err := rows.Scan(&a.ID, &a.Name); err != nil {
			return nil, fmt.Errorf("queries: find analysis: %w", err)
		}
		all = append(all, a)
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("queries: find analysis: %w", err)
	}
	return all, nil
}

func analysisList(all []Analysis) string {
	s := make([]string, len(all))
	for i, a := range all {
		s[i] = a.String()
	}
	return strings.Join(s, ", ")
}
