package report

import (
	"bytes"
	_ "embed"
	"fmt"
	"html/template"
	"io"
	"strings"

	"github.com/topostate/topostate/cmd/topostate/internal/figures"
)

//go:embed report.html.tmpl
var pageText string

//go:embed report.css
var styleText string

// Sections are the ids of the page's sections, in order; each is an
// <section id=...> with an <h2> heading and an entry in the contents.
var Sections = []string{"cohort", "settings", "states", "centroids", "dynamics", "transitions", "topology", "covariates", "reading"}

var page = template.Must(template.New("report").Funcs(template.FuncMap{
	"figure": func(figs map[string]Figure, name string) *Figure {
		if f, ok := figs[name]; ok {
			return &f
		}
		return nil
	},
	"inc": func(i int) int { return i + 1 },
}).Parse(pageText))

// style is the page's style sheet: report.css and one rule per group
// colour of the figures (classes g0..g7 for swatches; ga<i>/gb<i> for the
// two sides of a contrast).
func style() template.CSS {
	var b strings.Builder
	b.WriteString(styleText)
	for g := range figures.MaxGroups {
		c := figures.GroupColourHex(g)
		fmt.Fprintf(&b, ".g%d{--c:%s}\n.ga%d{--ca:%s}\n.gb%d{--cb:%s}\n", g, c, g, c, g, c)
	}
	// Static text and colours of the figures' fixed palette only.
	return template.CSS(b.String())
}

// Render writes the report as one HTML page.
func (r *Report) Render(w io.Writer) error {
	var buf bytes.Buffer
	err := page.Execute(&buf, struct {
		*Report
		CSS      template.CSS
		Sections []string
	}{r, style(), Sections})
	if err != nil {
		return fmt.Errorf("report: %w", err)
	}
	if _, err := buf.WriteTo(w); err != nil {
		return fmt.Errorf("report: %w", err)
	}
	return nil
}
