package figures

import (
	"fmt"
	"image"
	"image/color"
	"math"
	"testing"

	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/vg"
)

// box is an axis-aligned rectangle on the page, in points.
type box struct{ minX, minY, maxX, maxY float64 }

func (a box) overlaps(b box, slack float64) bool {
	return a.minX+slack < b.maxX && b.minX+slack < a.maxX && a.minY+slack < b.maxY && b.minY+slack < a.maxY
}

// drawn is one text or filled shape as it lands on the page.
type drawn struct {
	text string // "" for a filled path
	box  box
	col  color.Color
}

// affine is x' = a*x + c*y + e, y' = b*x + d*y + f.
type affine struct{ a, b, c, d, e, f float64 }

func (m affine) apply(x, y float64) (float64, float64) {
	return m.a*x + m.c*y + m.e, m.b*x + m.d*y + m.f
}

func (m affine) then(n affine) affine { // m applied after n: m ∘ n
	return affine{
		a: m.a*n.a + m.c*n.b, b: m.b*n.a + m.d*n.b,
		c: m.a*n.c + m.c*n.d, d: m.b*n.c + m.d*n.d,
		e: m.a*n.e + m.c*n.f + m.e, f: m.b*n.e + m.d*n.f + m.f,
	}
}

// recorder is a vg.CanvasSizer that draws nothing but records where every
// string and every filled path lands on the page, following the canvas
// transforms (gonum draws rotated text by rotating the canvas). The text
// box of a string at pt is [pt.X, pt.X + width] x [pt.Y - descent,
// pt.Y + cap height] of its font face. Fills in white (the backgrounds of
// the page and of each panel) are not recorded.
type recorder struct {
	w, h  vg.Length
	m     affine
	stack []affine
	col   color.Color
	out   []drawn
}

func newRecorder(w, h vg.Length) *recorder {
	return &recorder{w: w, h: h, m: affine{a: 1, d: 1}}
}

func (r *recorder) Size() (vg.Length, vg.Length)        { return r.w, r.h }
func (r *recorder) SetLineWidth(vg.Length)              {}
func (r *recorder) SetLineDash([]vg.Length, vg.Length)  {}
func (r *recorder) SetColor(c color.Color)              { r.col = c }
func (r *recorder) Stroke(vg.Path)                      {}
func (r *recorder) DrawImage(vg.Rectangle, image.Image) {}
func (r *recorder) Push()                               { r.stack = append(r.stack, r.m) }
func (r *recorder) Pop()                                { r.m, r.stack = r.stack[len(r.stack)-1], r.stack[:len(r.stack)-1] }
func (r *recorder) Translate(p vg.Point) {
	r.m = r.m.then(affine{a: 1, d: 1, e: float64(p.X), f: float64(p.Y)})
}
func (r *recorder) Scale(x, y float64) { r.m = r.m.then(affine{a: x, d: y}) }
func (r *recorder) Rotate(rad float64) {
	s, c := math.Sincos(rad)
	r.m = r.m.then(affine{a: c, b: s, c: -s, d: c})
}

func (r *recorder) bound(pts [][2]float64) box {
	b := box{math.Inf(1), math.Inf(1), math.Inf(-1), math.Inf(-1)}
	for _, p := range pts {
		x, y := r.m.apply(p[0], p[1])
		b.minX, b.minY = math.Min(b.minX, x), math.Min(b.minY, y)
		b.maxX, b.maxY = math.Max(b.maxX, x), math.Max(b.maxY, y)
	}
	return b
}

func (r *recorder) Fill(p vg.Path) {
	var pts [][2]float64
	for _, c := range p {
		switch c.Type {
		case vg.MoveComp, vg.LineComp:
			pts = append(pts, [2]float64{float64(c.Pos.X), float64(c.Pos.Y)})
		case vg.ArcComp:
			x, y, rad := float64(c.Pos.X), float64(c.Pos.Y), float64(c.Radius)
			pts = append(pts, [2]float64{x - rad, y - rad}, [2]float64{x + rad, y + rad})
		}
	}
	if r.col == nil {
		r.col = color.Black
	}
	if cr, cg, cb, ca := r.col.RGBA(); cr == 0xFFFF && cg == 0xFFFF && cb == 0xFFFF && ca == 0xFFFF {
		return
	}
	if len(pts) > 0 {
		r.out = append(r.out, drawn{box: r.bound(pts), col: r.col})
	}
}

func (r *recorder) FillString(f font.Face, pt vg.Point, txt string) {
	if txt == "" || f.Font.Size == 0 {
		return
	}
	// Vertically from the descent to the cap height, taken as 0.75 em
	// (Liberation Sans' is about 0.73 em, from memory): the font's ascent
	// includes the space above capitals that gonum's own line spacing
	// leaves out, so two legend lines would overlap on paper only.
	x0, y0 := float64(pt.X), float64(pt.Y-f.Extents().Descent)
	x1, y1 := float64(pt.X+f.Width(txt)), float64(pt.Y+0.75*f.Font.Size)
	r.out = append(r.out, drawn{text: txt, box: r.bound([][2]float64{{x0, y0}, {x1, y0}, {x0, y1}, {x1, y1}}), col: r.col})
}

// record draws f on a recorder and returns what it drew.
func record(f *Figure) []drawn {
	r := newRecorder(f.Width, f.Height)
	f.Draw(r)
	return r.out
}

// textOverlaps lists the pairs of texts of f whose boxes overlap by more
// than half a point.
func textOverlaps(f *Figure) []string {
	var texts []drawn
	for _, d := range record(f) {
		if d.text != "" {
			texts = append(texts, d)
		}
	}
	var bad []string
	for i := range texts {
		for j := i + 1; j < len(texts); j++ {
			if texts[i].box.overlaps(texts[j].box, 0.5) {
				bad = append(bad, fmt.Sprintf("%q %v and %q %v", texts[i].text, texts[i].box, texts[j].text, texts[j].box))
			}
		}
	}
	return bad
}

// synthCentroids is Data for the centroid figure alone: k states of p
// regions with weights in (-0.8, 0.8), named when names is not nil.
func synthCentroids(k, p int, fisher bool, names []string) *Data {
	d := &Data{Name: "synthetic", States: k, Regions: p, FisherZ: fisher, RegionNames: names}
	for s := range k {
		m := make([][]float64, p)
		for i := range m {
			m[i] = make([]float64, p)
			for j := range m[i] {
				m[i][j] = 0.8 * math.Sin(float64(1+s)*float64(i*p+j)+float64(i+j))
				if i == j {
					m[i][j] = math.NaN()
				}
			}
		}
		d.Centroids = append(d.Centroids, m)
	}
	return d
}

// The colour bar's label (its unit) lies clear of every panel: its box
// overlaps no text (tick labels, titles) and no heat-map cell of any
// panel by 3 points (a rule of our own, common practice, no source), for one and two rows of panels, few and many regions, numbers
// and names, r and Fisher z. It once ran into the last panel's ticks.
func TestColourBarLabelClear(t *testing.T) {
	long := make([]string, 20)
	for i := range long {
		long[i] = fmt.Sprintf("left_area_%02d", i+1)
	}
	cases := []struct {
		name string
		d    *Data
	}{
		{"fixture", load(t, openRO(t))},
		{"3 states, 36 regions, z", synthCentroids(3, 36, true, nil)},
		{"4 states, 100 regions", synthCentroids(4, 100, false, nil)},
		{"2 states, 20 named regions, z", synthCentroids(2, 20, true, long)},
		{"6 states, 8 named regions", synthCentroids(6, 8, false, long[:8])},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			f := centroidFigure(c.d)
			unit := "correlation r"
			if c.d.FisherZ {
				unit = "Fisher z"
			}
			all := record(f)
			var label *drawn
			for i := range all {
				if all[i].text == unit {
					if label != nil {
						t.Fatalf("%q drawn twice", unit)
					}
					label = &all[i]
				}
			}
			if label == nil {
				t.Fatalf("no %q on the figure", unit)
			}
			const gap = 3 // points of white the label keeps around it
			clear := box{label.box.minX - gap, label.box.minY - gap, label.box.maxX + gap, label.box.maxY + gap}
			cells := 0
			for _, d := range all {
				if d.box == label.box {
					continue
				}
				if d.text == "" {
					cells++
				}
				if d.box.overlaps(clear, 0) {
					t.Errorf("the label %q %v overlaps %q %v", unit, label.box, d.text, d.box)
				}
			}
			if want := c.d.States * c.d.Regions * c.d.Regions; cells < want {
				t.Errorf("recorded %d fills, want at least the %d cells", cells, want)
			}
		})
	}
}

// No two texts of any figure overlap: tick labels, legends (with their
// titles), panel titles, headings and the colour bar.
func TestTextDoesNotOverlap(t *testing.T) {
	figs, err := Figures(load(t, openRO(t)))
	if err != nil {
		t.Fatal(err)
	}
	figs = append(figs, centroidFigure(synthCentroids(4, 36, true, nil)), centroidFigure(synthCentroids(3, 12, false,
		[]string{"visual_1", "visual_2", "motor_1", "motor_2", "motor_3", "auditory", "default_a", "default_b", "default_c", "salience", "control_1", "control_2"})))
	for _, f := range figs {
		for _, bad := range textOverlaps(f) {
			t.Errorf("%s: %s", f.Name, bad)
		}
	}
}
