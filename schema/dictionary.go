package schema

import (
	"bufio"
	"fmt"
	"regexp"
	"strings"
)

// ColumnDoc describes one warehouse column: the data dictionary's row.
type ColumnDoc struct {
	Table       string
	Column      string
	Type        string
	Nullable    bool
	Description string
	// Unit overrides the unit of a column whose unit the DDL cannot know
	// (a covariate's Units from participants.json); "" otherwise.
	Unit string
}

// TableDoc is one table with its columns, in DDL order.
type TableDoc struct {
	Name    string
	Columns []ColumnDoc
}

var (
	createRe = regexp.MustCompile(`^CREATE TABLE IF NOT EXISTS (\w+) \($`)
	columnRe = regexp.MustCompile(`^(\w+)\s+([A-Z]+(?:\([0-9, ]+\))?(?:\[\])?)((?:\s+NOT NULL|\s+PRIMARY KEY|\s+UNIQUE)*)\s*,?\s*(?:--\s*(.*))?$`)
)

// Dictionary reads the table and column descriptions from the comments of
// the embedded DDL, so the documentation cannot drift from the layout.
// Covariate columns of the subjects table are not in it: they come from
// each cohort's participants.tsv.
func Dictionary() []TableDoc {
	var out []TableDoc
	sc := bufio.NewScanner(strings.NewReader(ddlV1))
	var cur *TableDoc
	for sc.Scan() {
		line := strings.TrimSpace(sc.Text())
		if m := createRe.FindStringSubmatch(line); m != nil {
			out = append(out, TableDoc{Name: m[1]})
			cur = &out[len(out)-1]
			continue
		}
		if cur == nil {
			continue
		}
		if strings.HasPrefix(line, ");") {
			cur = nil
			continue
		}
		if m := columnRe.FindStringSubmatch(line); m != nil {
			cur.Columns = append(cur.Columns, ColumnDoc{Table: cur.Name, Column: m[1], Type: m[2],
				Nullable:    !strings.Contains(m[3], "NOT NULL") && !strings.Contains(m[3], "PRIMARY KEY"),
				Description: strings.TrimSpace(m[4])})
		}
	}
	return out
}

// Markdown renders the dictionary as the warehouse reference page.
func Markdown() string {
	var b strings.Builder
	b.WriteString("# Warehouse tables\n\n")
	b.WriteString("Generated from schema/v1.sql by `go test ./schema -update`; do not edit by hand.\n")
	b.WriteString("Every result row carries `analysis_id`; states are numbered from 1; `session_id` is '' for\n")
	b.WriteString("cohorts without sessions. The `subjects` table also has one column per participants.tsv covariate.\n")
	for _, t := range Dictionary() {
		fmt.Fprintf(&b, "\n## %s\n\n| column | type | NULL | meaning |\n|---|---|---|---|\n", t.Name)
		for _, c := range t.Columns {
			null := ""
			if c.Nullable {
				null = "yes"
			}
			fmt.Fprintf(&b, "| %s | %s | %s | %s |\n", c.Column, c.Type, null, c.Description)
		}
	}
	return b.String()
}
