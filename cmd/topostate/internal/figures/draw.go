package figures

import (
	"fmt"
	"image/color"
	"io"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"unicode/utf8"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/text"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
	"gonum.org/v1/plot/vg/vgsvg"
)

// Figure is one image: a heading over a grid of panels (and, for the
// centroid matrices, a colour bar on the right).
type Figure struct {
	Name     string // file name without extension
	Heading  string
	Subtitle string         // smaller lines under the heading, parts separated by " · "
	Panels   [][]*plot.Plot // rows of panels; nil leaves a cell empty
	Side     *plot.Plot     // drawn in a strip at the right (colour bar), or nil
	Width    vg.Length
	Height   vg.Length

	subLines []string // Subtitle broken to the figure's width
}

// Panel and layout sizes, in points (1/72 inch).
const (
	panelW   = 216 // 3 inches
	panelH   = 180
	headingH = 36
	sideW    = 84
	sideGap  = 18 // white between the last column of panels and the colour bar's label
	margin   = 6
)

// Figures builds every figure the data allow: Betti-0 and Betti-1 curves,
// the elbow curve (when k was chosen by the elbow), occupancy and dwell
// time, transition matrices and centroid matrices.
func Figures(d *Data) ([]*Figure, error) {
	var out []*Figure
	for _, dim := range []int{0, 1} {
		out = append(out, bettiFigure(d, dim))
	}
	if len(d.Elbow) > 0 {
		out = append(out, elbowFigure(d))
	}
	occ, err := metricFigure(d, "occupancy", "Fractional occupancy by state and group",
		"share of each series' windows assigned to the state · box: median and quartiles, whiskers: 1.5 IQR · dot: one series",
		"fractional occupancy (share of windows)", d.Occupancy, true)
	if err != nil {
		return nil, err
	}
	dwell, err := metricFigure(d, "dwell", "Mean dwell time by state and group",
		"each series' mean length of an uninterrupted run in the state (windows × step × TR) · series that never visit a state have no dot there",
		"mean dwell time (s)", d.Dwell, false)
	if err != nil {
		return nil, err
	}
	out = append(out, occ, dwell, transitionFigure(d), centroidFigure(d))
	return out, nil
}

// grid lays n panels out in rows of at most cols.
func grid(n, cols int) (rows, c int) {
	c = min(n, cols)
	return (n + c - 1) / c, c
}

func newFigure(name, heading, subtitle string, rows, cols int, w, h float64, side bool) *Figure {
	f := &Figure{Name: name, Heading: heading, Subtitle: subtitle, Panels: make([][]*plot.Plot, rows)}
	for r := range f.Panels {
		f.Panels[r] = make([]*plot.Plot, cols)
	}
	f.Width = vg.Points(float64(cols)*w + 2*margin)
	if side {
		f.Width += vg.Points(sideW + sideGap)
	}
	f.subLines = wrap(subtitle, subtitleSize, f.Width-vg.Points(2*margin+8))
	f.Height = vg.Points(float64(rows)*h + headingH + 2*margin + 11*float64(max(0, len(f.subLines)-1)))
	return f
}

const subtitleSize = 8.5

// wrap breaks txt at its " · " separators into lines that fit in width at
// size points (a single part wider than that stays whole; fitted shrinks it).
func wrap(txt string, size float64, width vg.Length) []string {
	if txt == "" {
		return nil
	}
	sty := fitted("", size, width, color.Black)
	var lines []string
	cur := ""
	for _, part := range strings.Split(txt, " · ") {
		next := part
		if cur != "" {
			next = cur + " · " + part
		}
		if cur != "" && sty.Width(next) > width {
			lines = append(lines, cur)
			next = part
		}
		cur = next
	}
	return append(lines, cur)
}

// fitted returns a text style of at most size points in which txt fits
// in width (down to 6 points).
func fitted(txt string, size float64, width vg.Length, c color.Color) text.Style {
	sty := text.Style{Color: c, Font: face(vg.Points(size)), Handler: plot.DefaultTextHandler, XAlign: draw.XLeft, YAlign: draw.YTop}
	if w := sty.Width(txt); w > width {
		sty.Font = face(vg.Points(math.Max(6, size*float64(width)/float64(w))))
	}
	return sty
}

// Draw draws the figure on a canvas of its size.
func (f *Figure) Draw(c vg.CanvasSizer) {
	dc := draw.New(c)
	dc.SetColor(color.White)
	dc.Fill(rectPath(dc.Rectangle))
	avail := dc.Max.X - dc.Min.X - vg.Points(2*margin+8)
	top := vg.Point{X: dc.Min.X + vg.Points(margin+4), Y: dc.Max.Y - vg.Points(margin)}
	dc.FillText(fitted(f.Heading, 12, avail, color.Black), top, f.Heading)
	top.Y -= vg.Points(5)
	for _, line := range f.subLines {
		top.Y -= vg.Points(11)
		dc.FillText(fitted(line, subtitleSize, avail, color.Gray{0x55}), top, line)
	}
	head := vg.Points(headingH + 11*float64(max(0, len(f.subLines)-1)))
	body := draw.Crop(dc, vg.Points(margin), -vg.Points(margin), vg.Points(margin), -(head + vg.Points(margin)))
	if f.Side != nil {
		side := draw.Crop(body, body.Max.X-body.Min.X-vg.Points(sideW), 0, vg.Points(20), -vg.Points(20))
		f.Side.Draw(side)
		body = draw.Crop(body, 0, -vg.Points(sideW+sideGap), 0, 0)
	}
	rows, cols := len(f.Panels), len(f.Panels[0])
	tiles := draw.Tiles{Rows: rows, Cols: cols, PadX: vg.Points(10), PadY: vg.Points(8)}
	canv := plot.Align(f.Panels, tiles, body)
	for r := range f.Panels {
		for c, p := range f.Panels[r] {
			if p != nil {
				p.Draw(canv[r][c])
			}
		}
	}
}

func rectPath(r vg.Rectangle) vg.Path {
	var p vg.Path
	p.Move(r.Min)
	p.Line(vg.Point{X: r.Max.X, Y: r.Min.Y})
	p.Line(r.Max)
	p.Line(vg.Point{X: r.Min.X, Y: r.Max.Y})
	p.Close()
	return p
}

// Write writes the figure as path (.png at dpi dots per inch, or .svg).
// The image is written to a temporary file beside path and renamed into
// place when whole, so a failed run leaves an existing file as it was.
func (f *Figure) Write(path string, dpi int) (err error) {
	out, err := os.CreateTemp(filepath.Dir(path), "."+filepath.Base(path)+"-*.tmp")
	if err != nil {
		return fmt.Errorf("figures: %w", err)
	}
	defer os.Remove(out.Name()) // a no-op after the rename
	defer func() {
		if cerr := out.Close(); err == nil && cerr != nil {
			err = fmt.Errorf("figures: %w", cerr)
		}
		if err == nil {
			err = os.Chmod(out.Name(), 0o644)
		}
		if err == nil {
			err = os.Rename(out.Name(), path)
		}
		if err != nil && !strings.HasPrefix(err.Error(), "figures:") {
			err = fmt.Errorf("figures: %w", err)
		}
	}()
	var w io.WriterTo
	switch filepath.Ext(path) {
	case ".png":
		c := vgimg.NewWith(vgimg.UseWH(f.Width, f.Height), vgimg.UseDPI(dpi))
		f.Draw(c)
		w = vgimg.PngCanvas{Canvas: c}
	case ".svg":
		c := vgsvg.New(f.Width, f.Height)
		f.Draw(c)
		w = c
	default:
		return fmt.Errorf("figures: %s: want a .png or .svg file", path)
	}
	if _, err := w.WriteTo(out); err != nil {
		return fmt.Errorf("figures: %s: %w", path, err)
	}
	return nil
}

// WriteAll writes every figure of d into dir in each format ("png",
// "svg") and returns the files written.
func WriteAll(d *Data, dir string, formats []string, dpi int) ([]string, error) {
	figs, err := Figures(d)
	if err != nil {
		return nil, err
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("figures: %w", err)
	}
	var files []string
	for _, f := range figs {
		for _, ext := range formats {
			p := filepath.Join(dir, f.Name+"."+ext)
			if err := f.Write(p, dpi); err != nil {
				return files, err
			}
			files = append(files, p)
		}
	}
	return files, nil
}

// groupTitle is the title of a legend of groups: "group", or "group
// (site)" when the groups are the values of a column not called group,
// so values such as 1, 2, 3 are not read as states.
func (d *Data) groupTitle() string {
	if d.Group == "" || d.Group == "group" {
		return "group"
	}
	return "group (" + d.Group + ")"
}

// groupPanelTitle names group g over a panel of its own (transitions):
// the label, after "site = " when the column is not called group.
func (d *Data) groupPanelTitle(g int) string {
	if d.Group == "" || d.Group == "group" {
		return d.groupLabel(g, d.Groups[g].Series)
	}
	return d.Group + " = " + d.groupLabel(g, d.Groups[g].Series)
}

// groupLabel names group g in a legend or panel title with its n. n counts
// subjects, the unit of the group tests; when a subject has several
// sessions the series are given too, and a curve drawn from fewer series
// than the group has (states some series never visited) says so.
func (d *Data) groupLabel(g, series int) string {
	gr := d.Groups[g]
	switch {
	case series != gr.Series:
		return fmt.Sprintf("%s (%d of %d series)", gr.Name, series, gr.Series)
	case gr.Subjects != gr.Series:
		return fmt.Sprintf("%s (n=%d subjects, %d series)", gr.Name, gr.Subjects, gr.Series)
	}
	return fmt.Sprintf("%s (n=%d)", gr.Name, gr.Subjects)
}

// bettiFigure: one panel per state, a line per group (the mean curve) in a
// band of +/- one standard error. The threshold axis is narrowed to where
// some curve changes (all panels alike), since the curves are flat far
// from the network's edge weights.
func bettiFigure(d *Data, dim int) *Figure {
	heading, yLabel, what := "Betti-0 curves by state", "Betti-0 (components)", "connected components"
	if dim == 1 {
		heading, yLabel, what = "Betti-1 curves by state", "Betti-1 (independent cycles)", "independent cycles"
	}
	sub := fmt.Sprintf("analysis %s · %s of each series' state network keeping the edges with weight > e · line: group mean, band: ± 1 standard error · n: subjects; \"m of M series\": only m of the group's M series visited the state", d.Name, what)
	rows, cols := grid(d.States, 3)
	f := newFigure(fmt.Sprintf("betti%d", dim), heading, sub, rows, cols, panelW, panelH, false)
	lo, hi := bettiRange(d, dim)
	for s := 1; s <= d.States; s++ {
		p := newPlot(fmt.Sprintf("state %d", s), "threshold e (correlation r)", yLabel)
		p.Y.Min = 0
		p.X.Min, p.X.Max = lo, hi
		p.Legend.Top, p.Legend.Left = true, dim == 0
		titled := false
		for _, c := range d.Betti {
			if c.State != s || c.Dim != dim {
				continue
			}
			col := groupColour(c.Group)
			var band, line plotter.XYs
			for i, e := range c.Threshold {
				if e < lo || e > hi {
					continue
				}
				band = append(band, plotter.XY{X: e, Y: c.Mean[i] + c.SE[i]})
				line = append(line, plotter.XY{X: e, Y: c.Mean[i]})
			}
			for i := len(c.Threshold) - 1; i >= 0; i-- {
				if e := c.Threshold[i]; e >= lo && e <= hi {
					band = append(band, plotter.XY{X: e, Y: math.Max(0, c.Mean[i]-c.SE[i])})
				}
			}
			if len(line) == 0 {
				continue
			}
			if poly, err := plotter.NewPolygon(band); err == nil {
				poly.Color = tint(col, 0x48)
				poly.LineStyle.Width = 0
				p.Add(poly)
			}
			l, err := plotter.NewLine(line)
			if err != nil {
				continue
			}
			l.Color, l.Width = col, vg.Points(1.4)
			p.Add(l)
			if !titled {
				p.Legend.Add(d.groupTitle())
				titled = true
			}
			p.Legend.Add(d.groupLabel(c.Group, c.N), l)
		}
		f.Panels[(s-1)/cols][(s-1)%cols] = p
	}
	return f
}

// bettiRange is the threshold interval where some mean curve of dimension
// dim differs from its value at either end of the grid, widened by two
// grid steps; the whole grid when every curve is flat.
func bettiRange(d *Data, dim int) (lo, hi float64) {
	lo, hi = math.Inf(1), math.Inf(-1)
	gridLo, gridHi := math.Inf(1), math.Inf(-1)
	for _, c := range d.Betti {
		n := len(c.Threshold)
		if c.Dim != dim || n < 2 {
			continue
		}
		gridLo, gridHi = math.Min(gridLo, c.Threshold[0]), math.Max(gridHi, c.Threshold[n-1])
		step := c.Threshold[1] - c.Threshold[0]
		first, last := c.Mean[0], c.Mean[n-1]
		for i := range n {
			if c.Mean[i] != first {
				lo = math.Min(lo, c.Threshold[max(0, i-1)]-2*step)
				break
			}
		}
		for i := n - 1; i >= 0; i-- {
			if c.Mean[i] != last {
				hi = math.Max(hi, c.Threshold[min(n-1, i+1)]+2*step)
				break
			}
		}
	}
	if math.IsInf(gridLo, 0) {
		return -1, 1
	}
	if !(lo < hi) {
		return gridLo, gridHi
	}
	return math.Max(lo, gridLo), math.Min(hi, gridHi)
}

// elbowFigure: WCSS against k, the chord between its ends, the chosen k
// marked, and the other rule's pick when it differs.
func elbowFigure(d *Data) *Figure {
	f := newFigure("elbow", "Choosing the number of states k",
		fmt.Sprintf("analysis %s · within-cluster sum of squares of the fitting windows for each k tried", d.Name), 1, 1, 2*panelW, 1.3*panelH, false)
	p := newPlot("", "number of states k", "within-cluster sum of squares")
	xy := make(plotter.XYs, len(d.Elbow))
	for i, e := range d.Elbow {
		xy[i] = plotter.XY{X: float64(e.K), Y: e.WCSS}
	}
	chord, _ := plotter.NewLine(plotter.XYs{xy[0], xy[len(xy)-1]})
	chord.Color, chord.Width, chord.Dashes = color.Gray{0x99}, vg.Points(0.8), []vg.Length{vg.Points(1), vg.Points(2)}
	line, pts, _ := plotter.NewLinePoints(xy)
	line.Color, line.Width = color.Black, vg.Points(1.2)
	pts.Shape, pts.Color, pts.Radius = draw.CircleGlyph{}, color.Black, vg.Points(2.5)
	p.Add(chord, line, pts)
	p.Legend.Add("choosing k")
	p.Legend.Add("chord from the first to the last k", chord)
	p.X.Tick.Marker = integerTicks(1, strconv.Itoa)
	p.X.Min, p.X.Max = float64(d.Elbow[0].K)-0.5, float64(d.Elbow[len(d.Elbow)-1].K)+0.5
	lo, hi := xy[0].Y, xy[0].Y
	for _, v := range xy {
		lo, hi = math.Min(lo, v.Y), math.Max(hi, v.Y)
	}
	p.Y.Min, p.Y.Max = lo-0.05*(hi-lo), hi+0.2*(hi-lo)
	for _, e := range d.Elbow {
		var label string
		var glyph draw.GlyphDrawer
		var col color.Color
		switch {
		case e.Chosen && e.SecondDf && d.KRule != "second-diff":
			label, glyph, col = fmt.Sprintf("used: k = %d (%s; the largest second difference agrees)", e.K, kRuleLabel(d.KRule)), draw.RingGlyph{}, markColour
		case e.Chosen:
			label, glyph, col = fmt.Sprintf("used: k = %d (%s)", e.K, kRuleLabel(d.KRule)), draw.RingGlyph{}, markColour
		case e.SecondDf:
			label, glyph, col = fmt.Sprintf("largest second difference: k = %d (not used)", e.K), draw.TriangleGlyph{}, groupColours[0]
		default:
			continue
		}
		mark, _ := plotter.NewScatter(plotter.XYs{{X: float64(e.K), Y: e.WCSS}})
		mark.Shape, mark.Color, mark.Radius = glyph, col, vg.Points(5)
		rule, _ := plotter.NewLine(plotter.XYs{{X: float64(e.K), Y: p.Y.Min}, {X: float64(e.K), Y: p.Y.Max}})
		rule.Color, rule.Width, rule.Dashes = col, vg.Points(1), []vg.Length{vg.Points(4), vg.Points(3)}
		p.Add(rule, mark)
		p.Legend.Add(label, mark)
	}
	p.Legend.Top = true
	f.Panels[0][0] = p
	return f
}

// kRuleLabel names the --k-rule that picked k, for the elbow figure's
// legend (docs/methods.md §3).
func kRuleLabel(rule string) string {
	switch rule {
	case "strength":
		return "prediction strength"
	case "gap":
		return "gap statistic"
	case "chord":
		return "farthest from the chord"
	case "second-diff":
		return "largest second difference"
	}
	return "rule " + rule
}

// metricFigure: per state, one box per group (median, quartiles, whiskers
// to the furthest value within 1.5 IQR) with every series drawn as a dot
// beside it.
func metricFigure(d *Data, name, heading, sub, yLabel string, values [][][]float64, unit bool) (*Figure, error) {
	G := len(d.Groups)
	w := math.Max(2*panelW, float64(90+d.States*(36*G+24)))
	f := newFigure(name, heading, fmt.Sprintf("analysis %s · %s", d.Name, sub), 1, 1, w, 1.3*panelH, false)
	p := newPlot("", "connectivity state", yLabel)
	step := 0.8 / float64(G)
	boxW := vg.Points(math.Min(22, 150/float64(G)))
	legend := make([]*plotter.Scatter, G)
	for s := range d.States {
		for g := range G {
			vs := values[s][g]
			if len(vs) == 0 {
				continue
			}
			loc := float64(s+1) + (float64(g)-float64(G-1)/2)*step
			col := groupColour(g)
			box, err := plotter.NewBoxPlot(boxW, loc, plotter.Values(vs))
			if err != nil {
				return nil, fmt.Errorf("figures: %s state %d: %w", name, s+1, err)
			}
			box.BoxStyle.Color, box.MedianStyle.Color, box.WhiskerStyle.Color = col, col, col
			box.MedianStyle.Width = vg.Points(2)
			box.GlyphStyle.Radius = 0 // outliers are drawn with the dots
			p.Add(box)
			dots := make(plotter.XYs, len(vs))
			for i, v := range vs {
				// Golden-ratio spread: deterministic, evenly filled jitter.
				j := math.Mod(float64(i)*0.6180339887498949, 1) - 0.5
				dots[i] = plotter.XY{X: loc + 0.7*step*j, Y: v}
			}
			sc, _ := plotter.NewScatter(dots)
			sc.Color, sc.Radius, sc.Shape = tint(col, 0xB0), vg.Points(1.8), draw.CircleGlyph{}
			p.Add(sc)
			legend[g] = sc
		}
	}
	p.Legend.Add(d.groupTitle())
	for g, sc := range legend {
		if sc != nil {
			p.Legend.Add(d.groupLabel(g, d.Groups[g].Series), sc)
		}
	}
	p.Legend.Top = true
	p.X.Min, p.X.Max = 0.5, float64(d.States)+0.5
	p.X.Tick.Marker = integerTicks(1, strconv.Itoa)
	p.Y.Min = 0
	if unit {
		p.Y.Max = 1.08 // room for the legend
	} else {
		p.Y.Max *= 1.15
	}
	f.Panels[0][0] = p
	return f, nil
}

// cells is a heat-map plotter of a matrix drawn as it is read: row 1 at
// the top, column 1 at the left. Cell (i, j) is centred on x = j+1,
// y = n-i. Cells overlap by a hair so no seam shows between them.
type cells struct {
	z  [][]float64
	cm *ramp
}

func (m cells) Plot(c draw.Canvas, p *plot.Plot) {
	trX, trY := p.Transforms(&c)
	n := len(m.z)
	hair := vg.Points(0.3)
	for i, row := range m.z {
		y := float64(n - i)
		for j, v := range row {
			x := float64(j + 1)
			col, err := m.cm.At(v)
			if err != nil {
				col = missingColour
			}
			r := vg.Rectangle{Min: vg.Point{X: trX(x - 0.5), Y: trY(y - 0.5)}, Max: vg.Point{X: trX(x+0.5) + hair, Y: trY(y+0.5) + hair}}
			c.SetColor(col)
			c.Fill(rectPath(r))
		}
	}
}

func (m cells) DataRange() (xmin, xmax, ymin, ymax float64) {
	return 0.5, float64(len(m.z[0])) + 0.5, 0.5, float64(len(m.z)) + 0.5
}

// matrixTicks label rows (flipped: y = n+1-row) or columns 1..n: every
// step-th number from 1, or every name when names is not nil.
func matrixTicks(n, step int, names []string, rows bool) plot.Ticker {
	return plot.TickerFunc(func(_, _ float64) []plot.Tick {
		var ts []plot.Tick
		for l := 1; l <= n; l += step {
			v := float64(l)
			if rows {
				v = float64(n + 1 - l)
			}
			label := strconv.Itoa(l)
			if names != nil {
				label = names[l-1]
			}
			ts = append(ts, plot.Tick{Value: v, Label: label})
		}
		return ts
	})
}

// heatPanel draws z as a matrix with its rows and columns numbered (every
// step-th) or, with names, named: row names at the left, column names
// turned upright under the matrix, in a font of nameSize points.
func heatPanel(title, xLabel, yLabel string, z [][]float64, cm *ramp, names *axisNames) *plot.Plot {
	p := newPlot(title, xLabel, yLabel)
	p.Add(cells{z: z, cm: cm})
	n := len(z)
	step, list := 1, []string(nil)
	if names != nil {
		step, list = names.step, names.names
	}
	p.X.Tick.Marker, p.Y.Tick.Marker = matrixTicks(len(z[0]), step, list, false), matrixTicks(n, step, list, true)
	if list != nil {
		p.X.Tick.Label.Font, p.Y.Tick.Label.Font = face(names.size), face(names.size)
		p.X.Tick.Label.Rotation = math.Pi / 2
		p.X.Tick.Label.XAlign, p.X.Tick.Label.YAlign = draw.XRight, draw.YCenter
	}
	p.X.Padding, p.Y.Padding = 0, 0
	return p
}

// axisNames says how a matrix's rows and columns are labelled: names (nil
// for numbers) in a font of size points, or every step-th number.
type axisNames struct {
	names []string
	size  vg.Length
	step  int
}

// Region names go on the centroid axes when every row can have its own
// line: at most maxNamedRegions regions, each name at most maxNameRunes
// characters, in a font of 8 points shrinking with the number of regions
// down to a floor of 6 points (a rule of our own: 20 rows of 6-point text
// fill the 150 points or so of a 216-point panel's matrix).
const (
	maxNamedRegions = 20
	maxNameRunes    = 16
)

// regionAxes chooses names or numbers for d's centroid matrices and says,
// for the subtitle, which it chose and why.
func regionAxes(d *Data) (*axisNames, string) {
	p := d.Regions
	numbered := &axisNames{step: max(1, (p+7)/8)}
	if d.RegionNames == nil {
		return numbered, "regions numbered by region_index (table regions; the series files named no regions)"
	}
	longest := ""
	for _, n := range d.RegionNames {
		if utf8.RuneCountInString(n) > utf8.RuneCountInString(longest) {
			longest = n
		}
	}
	switch {
	case p > maxNamedRegions:
		return numbered, fmt.Sprintf("regions numbered by region_index: %d regions are too many to name on the axes (at most %d; their names are in table regions)", p, maxNamedRegions)
	case utf8.RuneCountInString(longest) > maxNameRunes:
		return numbered, fmt.Sprintf("regions numbered by region_index: names such as %q are too long for the axes (at most %d characters; table regions holds them)", longest, maxNameRunes)
	}
	size := math.Max(6, math.Min(8, 120/float64(p)))
	return &axisNames{names: d.RegionNames, size: vg.Points(size), step: 1}, "regions named as in table regions"
}

// transitionFigure: per group, the k x k matrix of mean transition
// probabilities (averaged over series; a series with no window leaving a
// state does not count in that row), with the values printed.
func transitionFigure(d *Data) *Figure {
	rows, cols := grid(len(d.Groups), 3)
	k := d.States
	f := newFigure("transitions", "Mean transition probabilities by group",
		fmt.Sprintf("analysis %s · row: state of window w, column: state of window w+1 · mean over series of each series' row-normalised counts (– : no series left that state)", d.Name),
		rows, cols, panelW, panelW, false)
	cm := newRamp(sequentialStops, 0, 1)
	size := vg.Points(math.Max(5, math.Min(9, 120/float64(k))))
	for g := range d.Groups {
		p := heatPanel(d.groupPanelTitle(g), "to state (window w+1)", "from state (window w)", d.Transitions[g], cm, nil)
		var xy plotter.XYs
		var labels []string
		var styles []text.Style
		for i := range k {
			for j := range k {
				v := d.Transitions[g][i][j]
				s := "–"
				c := color.Color(color.Black)
				if !math.IsNaN(v) {
					s = fmt.Sprintf("%.2f", v)
					if bg, err := cm.At(v); err == nil && luminance(bg) < 0.3 {
						c = color.White
					}
				}
				xy = append(xy, plotter.XY{X: float64(j + 1), Y: float64(k - i)})
				labels = append(labels, s)
				styles = append(styles, text.Style{Color: c, Font: face(size), Handler: plot.DefaultTextHandler, XAlign: draw.XCenter, YAlign: draw.YCenter})
			}
		}
		if lab, err := plotter.NewLabels(plotter.XYLabels{XYs: xy, Labels: labels}); err == nil {
			lab.TextStyle = styles
			p.Add(lab)
		}
		f.Panels[g/cols][g%cols] = p
	}
	return f
}

// centroidFigure: per state, the p x p matrix of the state's centroid
// (mean window correlation, or Fisher z), on one symmetric colour scale,
// with a colour bar.
func centroidFigure(d *Data) *Figure {
	rows, cols := grid(d.States, 3)
	what, unit := "correlation r", "correlation r"
	if d.FisherZ {
		what, unit = "Fisher z = atanh(r)", "Fisher z"
	}
	axes, axesNote := regionAxes(d)
	f := newFigure("centroids", "State centroids: the connectivity pattern of each state",
		fmt.Sprintf("analysis %s · %s of every region pair at the centre of the state's cluster · %s · grey: diagonal", d.Name, what, axesNote),
		rows, cols, panelW, panelW, true)
	lim := 0.0
	for _, m := range d.Centroids {
		for _, row := range m {
			for _, v := range row {
				if !math.IsNaN(v) {
					lim = math.Max(lim, math.Abs(v))
				}
			}
		}
	}
	lim = math.Max(0.1, math.Ceil(lim*10)/10)
	cm := newRamp(divergingStops, -lim, lim)
	for s := range d.States {
		f.Panels[s/cols][s%cols] = heatPanel(fmt.Sprintf("state %d", s+1), "region", "region", d.Centroids[s], cm, axes)
	}
	bar := newPlot("", "", unit)
	bar.Add(&plotter.ColorBar{ColorMap: cm, Vertical: true})
	bar.HideX()
	bar.Y.Padding = 0
	f.Side = bar
	return f
}
