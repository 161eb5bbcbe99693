package main

import (
	"context"
	"database/sql"
	"fmt"
	"io"
	"strings"

	"github.com/topostate/topostate/compute"
)

// ruleNames are the plain-language names of the --k-rule values
// (docs/methods.md §3.x).
var ruleNames = map[string]string{
	"strength":    "prediction strength (largest k whose clusters the other half's centroids reproduce, strength >= threshold)",
	"gap":         "the gap statistic (smallest k with Gap(k) >= Gap(k+1) - s(k+1))",
	"chord":       "the chord elbow (farthest point of W(k) from the chord)",
	"second-diff": "the largest second difference of W(k)",
}

// ruleName returns the plain-language name of a stored k rule; an empty
// rule (an analysis from before --k-rule) was the chord elbow.
func ruleName(rule string) string {
	if rule == "" {
		rule = "chord"
	}
	if n, ok := ruleNames[rule]; ok {
		return n
	}
	return fmt.Sprintf("rule %q", rule)
}

// kChoiceText says which rule chose k over which scan, what the other rules
// pick, on which sample W(k) was computed, and what k = 1 means.
func kChoiceText(k, kmin, kmax int, rule string, chord, second, gapK, strengthK, fitWindows int) string {
	var b strings.Builder
	fmt.Fprintf(&b, "%d, chosen by %s over k=%d..%d", k, ruleName(rule), kmin, kmax)
	var others []string
	if rule != "strength" && strengthK > 0 {
		others = append(others, fmt.Sprintf("prediction strength %d", strengthK))
	}
	if rule != "gap" && gapK > 0 {
		others = append(others, fmt.Sprintf("gap statistic %d", gapK))
	}
	if rule != "chord" && rule != "" && chord > 0 {
		others = append(others, fmt.Sprintf("chord elbow %d", chord))
	}
	if rule != "second-diff" && second > 0 {
		others = append(others, fmt.Sprintf("second difference %d", second))
	}
	if len(others) > 0 {
		fmt.Fprintf(&b, " (for reference: %s; all in table elbow)", strings.Join(others, ", "))
	}
	fmt.Fprintf(&b, "; W(k) is computed on the %d windows of the fitting sample (variance-peak windows unless all windows were asked for, at most --fit-windows), not on all windows", fitWindows)
	if k == 1 {
		b.WriteString("; k = 1 means no evidence of more than one state: there are no state dynamics to compare")
	}
	return b.String()
}

// elbowChoice is kChoiceText for a freshly fitted scan.
func elbowChoice(e *compute.Elbow, k, fitWindows int) string {
	gapK, strengthK := 0, 0
	if e.Gap != nil {
		gapK = e.Gap.K
	}
	if e.Strength != nil {
		strengthK = e.Strength.K
	}
	return kChoiceText(k, e.Points[0].K, e.Points[len(e.Points)-1].K, e.Rule, e.ChordK, e.SecondDiffK, gapK, strengthK, fitWindows)
}

// writeKChoices prints, for every analysis whose k was chosen by a scan,
// one line saying how (info). Analyses with a fixed or reused k have no
// elbow rows and are skipped.
func writeKChoices(ctx context.Context, db *sql.DB, w io.Writer) error {
	rows, err := db.QueryContext(ctx, `
		SELECT a.analysis_id, a.name, a.n_states, a.fit_windows, coalesce(a.parameters->>'k_rule', ''),
		       min(e.k), max(e.k),
		       coalesce(max(CASE WHEN e.chord_pick THEN e.k END), 0),
		       coalesce(max(CASE WHEN e.second_diff_pick THEN e.k END), 0),
		       coalesce(max(CASE WHEN e.gap_pick THEN e.k END), 0),
		       coalesce(max(CASE WHEN e.strength_pick THEN e.k END), 0)
		FROM analyses a JOIN elbow e USING (analysis_id)
		GROUP BY ALL ORDER BY a.analysis_id`)
	if err != nil {
		return fmt.Errorf("info: %w", err)
	}
	defer rows.Close()
	for rows.Next() {
		var id, k, fit, kmin, kmax, chord, second, gapK, strengthK int
		var name, rule string
		if err := rows.Scan(&id, &name, &k, &fit, &rule, &kmin, &kmax, &chord, &second, &gapK, &strengthK); err != nil {
			return fmt.Errorf("info: %w", err)
		}
		fmt.Fprintf(w, "analysis %d (%s): states %s\n", id, name, kChoiceText(k, kmin, kmax, rule, chord, second, gapK, strengthK, fit))
	}
	if err := rows.Err(); err != nil {
		return fmt.Errorf("info: %w", err)
	}
	return nil
}
