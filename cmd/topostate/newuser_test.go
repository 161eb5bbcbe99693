package main

import (
	"strings"
	"testing"

	"github.com/topostate/topostate/queries"
)

// A group value that no subject has is refused in every bundled group
// query (and in a user's SQL calling the macro), with the values present
// and the case-only match; never rows of n = 0 with exit 0 (issue: a
// mistyped group value).
func TestGroupValueTypoRefused(t *testing.T) {
	all, err := queries.List(queries.FS)
	if err != nil {
		t.Fatal(err)
	}
	groupQueries := 0
	for _, q := range all {
		if _, ok := q.Param("group_a"); !ok {
			continue
		}
		groupQueries++
		t.Run(q.Name, func(t *testing.T) {
			code, stdout, stderr := topostate("query", "--db", warehouse, q.Name, "--param", "group_a=b", "--param", "group_b=A", "-f", "csv", "--param", "n_perm=99")
			if _, ok := q.Param("n_perm"); !ok {
				code, stdout, stderr = topostate("query", "--db", warehouse, q.Name, "--param", "group_a=b", "--param", "group_b=A", "-f", "csv")
			}
			if code != 2 || stdout != "" ||
				!strings.Contains(stderr, "group_a value 'b' matches no subject") ||
				!strings.Contains(stderr, "the values there are: A, B") ||
				!strings.Contains(stderr, "did you mean 'B'?") {
				t.Errorf("exit %d\nstdout: %s\nstderr: %s", code, stdout, stderr)
			}
			code, _, stderr = topostate("query", "--db", warehouse, q.Name, "--param", "group_a=A", "--param", "group_b=Z")
			if code != 2 || !strings.Contains(stderr, "group_b value 'Z'") || strings.Contains(stderr, "did you mean") {
				t.Errorf("group_b=Z: exit %d: %s", code, stderr)
			}
		})
	}
	if groupQueries < 4 {
		t.Errorf("%d bundled group queries; expected at least 4", groupQueries)
	}
	code, _, stderr := topostate("query", "--db", warehouse, "--sql",
		"SELECT count(*) FROM subject_groups(1, 'group', 'a', 'B')")
	if code != 2 || !strings.Contains(stderr, "did you mean 'A'?") {
		t.Errorf("own SQL: exit %d: %s", code, stderr)
	}
	// The right values still work.
	code, stdout, stderr := topostate("query", "--db", warehouse, "transitions_by_group", "--param", "group_a=B", "--param", "group_b=A", "-f", "csv")
	if code != 0 || !strings.Contains(stdout, "group,from_state") {
		t.Errorf("B vs A: exit %d: %s %s", code, stdout, stderr)
	}
}
