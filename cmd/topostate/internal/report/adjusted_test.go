package report

import (
	"bytes"
	"context"
	"strconv"
	"strings"
	"testing"

	"github.com/topostate/topostate/queries"
	"github.com/topostate/topostate/schema"
)

// With Options.Adjust the report adds one adjusted_group_contrast table per
// pair of groups, showing the query's values exactly; without it, none.
func TestAdjustedContrasts(t *testing.T) {
	r0, b0 := fixture(t)
	if len(r0.Adjusted) != 0 || bytes.Contains(b0, []byte(`id="adjusted"`)) {
		t.Errorf("an adjusted section without --adjust")
	}
	ctx := context.Background()
	db, err := schema.Open(whPath, true, nil)
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	conn, err := db.Conn(ctx)
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	if err := queries.Register(ctx, conn, queries.FS); err != nil {
		t.Fatal(err)
	}
	r, err := Build(ctx, db, conn, Options{Analysis: analysisName, Group: "group", NPerm: testNPerm, Seed: 3,
		DBPath: "my cohort.duckdb", Caution: cautionText, Generator: "topostate test", Adjust: []string{"age", "score"}})
	if err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	if err := r.Render(&buf); err != nil {
		t.Fatal(err)
	}
	doc := parse(t, buf.Bytes())
	if len(r.Adjusted) != len(r.Contrasts) || len(r.Adjusted) == 0 {
		t.Fatalf("%d adjusted tables for %d contrasts", len(r.Adjusted), len(r.Contrasts))
	}
	if h := textOf(byID(doc, "adjusted")); !strings.Contains(h, "adjusted for age, score") {
		t.Errorf("section heading: %.200q", h)
	}
	qdb, err := queries.Open(ctx, whPath)
	if err != nil {
		t.Fatal(err)
	}
	defer qdb.Close()
	checked := 0
	for _, c := range r.Adjusted {
		p := map[string]string{"analysis": strconv.FormatInt(r.Analysis.ID, 10), "group_column": "group", "group_a": c.A, "group_b": c.B,
			"adjust": "age,score", "n_perm": strconv.Itoa(testNPerm), "seed": "3"}
		checked += matchTable(t, doc, "t-"+c.ID, runBundled(t, qdb, "adjusted_group_contrast", p), "measure", "state")
	}
	if checked < 50 {
		t.Errorf("only %d values checked", checked)
	}
	if !slicesHasCommand(r.Commands, "adjusted_group_contrast") {
		t.Errorf("no command reproduces the adjusted table")
	}
	// In this cohort site coincides with the group: refused, naming it.
	_, err = Build(ctx, db, conn, Options{Analysis: analysisName, Group: "group", NPerm: testNPerm, Adjust: []string{"age", "site"}})
	if err == nil || !strings.Contains(err.Error(), `the design is rank deficient: column "site=south" is constant or a linear combination of (intercept), (tested term), age`) {
		t.Errorf("adjust=age,site: %v", err)
	}
	// An unknown column is refused with the list of columns.
	_, err = Build(ctx, db, conn, Options{Analysis: analysisName, Group: "group", NPerm: testNPerm, Adjust: []string{"sex"}})
	if err == nil || !strings.Contains(err.Error(), `no column "sex"; its covariates are: group, age, score, site`) {
		t.Errorf("adjust=sex: %v", err)
	}
}

func slicesHasCommand(cs []Command, query string) bool {
	for _, c := range cs {
		if strings.Contains(c.Line(), " "+query+" ") {
			return true
		}
	}
	return false
}
