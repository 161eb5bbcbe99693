package figures

import (
	"bytes"
	"fmt"
	"html"
	"math"
	"regexp"

	"gonum.org/v1/plot/vg/vgsvg"
)

// InlineSVG returns the figure as one <svg> element for a web page: no XML
// declaration, comment or namespace attributes (an HTML parser puts <svg>
// in the SVG namespace by itself), a viewBox in points, width and height
// in CSS pixels (1 pt = 4/3 px) so a style sheet can scale it, role="img"
// and an aria-label naming the figure. The text inside is escaped by the
// SVG canvas. class, when not empty, is set on the element.
func (f *Figure) InlineSVG(class string) ([]byte, error) {
	c := vgsvg.New(f.Width, f.Height)
	f.Draw(c)
	var buf bytes.Buffer
	if _, err := c.WriteTo(&buf); err != nil {
		return nil, fmt.Errorf("figures: %s: %w", f.Name, err)
	}
	b := buf.Bytes()
	loc := svgRootRe.FindIndex(b)
	if loc == nil {
		return nil, fmt.Errorf("figures: %s: no <svg> element in the canvas output", f.Name)
	}
	w, h := f.Width.Points(), f.Height.Points()
	var out bytes.Buffer
	fmt.Fprintf(&out, `<svg viewBox="0 0 %.6g %.6g" width="%d" height="%d" role="img" aria-label="%s"`,
		w, h, int(math.Round(w*4/3)), int(math.Round(h*4/3)), html.EscapeString(f.Heading))
	if class != "" {
		fmt.Fprintf(&out, ` class="%s"`, html.EscapeString(class))
	}
	out.WriteString(">")
	out.Write(b[loc[1]:])
	return bytes.TrimSpace(out.Bytes()), nil
}

// svgRootRe matches everything up to the end of the canvas's own <svg ...>
// start tag (declaration, comment, root attributes).
var svgRootRe = regexp.MustCompile(`(?s)\A.*?<svg\b[^>]*>`)

// GroupColourHex returns the colour of group g (0-based, as in
// Data.Groups) as "#rrggbb": the palette of the figures, for pages that
// show the groups beside them.
func GroupColourHex(g int) string {
	c := groupColour(g)
	return fmt.Sprintf("#%02x%02x%02x", c.R, c.G, c.B)
}
