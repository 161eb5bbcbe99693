package figures

import (
	"image/color"
	"math"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/palette"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

// groupColours are the eight colours of the Okabe & Ito 2008 colour-universal
// design palette (hex values from memory), told apart by readers with the
// common colour-vision deficiencies. Yellow comes last: it is faint on white.
var groupColours = []color.NRGBA{
	{0x00, 0x72, 0xB2, 0xFF}, // blue
	{0xE6, 0x9F, 0x00, 0xFF}, // orange
	{0x00, 0x9E, 0x73, 0xFF}, // bluish green
	{0xD5, 0x5E, 0x00, 0xFF}, // vermillion
	{0xCC, 0x79, 0xA7, 0xFF}, // reddish purple
	{0x56, 0xB4, 0xE9, 0xFF}, // sky blue
	{0x00, 0x00, 0x00, 0xFF}, // black
	{0xF0, 0xE4, 0x42, 0xFF}, // yellow
}

func groupColour(g int) color.NRGBA { return groupColours[g%len(groupColours)] }

// tint returns c with the given opacity (0..255), for bands.
func tint(c color.NRGBA, alpha uint8) color.NRGBA {
	c.A = alpha
	return c
}

var (
	missingColour = color.NRGBA{0xDD, 0xDD, 0xDD, 0xFF} // cells with no value
	markColour    = groupColours[3]                     // vermillion: the chosen k
)

// Sequential (light to dark blue, lightness falling monotonically, so it
// reads in grey too) and diverging (blue - near white - vermillion, the
// two ends of the palette above) ramps for heat maps.
var (
	sequentialStops = []color.NRGBA{{0xF7, 0xF7, 0xF7, 0xFF}, {0x56, 0xB4, 0xE9, 0xFF}, {0x00, 0x72, 0xB2, 0xFF}, {0x00, 0x33, 0x55, 0xFF}}
	divergingStops  = []color.NRGBA{{0x00, 0x4A, 0x75, 0xFF}, {0x00, 0x72, 0xB2, 0xFF}, {0xF7, 0xF7, 0xF7, 0xFF}, {0xD5, 0x5E, 0x00, 0xFF}, {0x7A, 0x33, 0x00, 0xFF}}
)

// ramp is a palette.ColorMap interpolating linearly (in sRGB) between
// evenly spaced colour stops over [min, max].
type ramp struct {
	stops    []color.NRGBA
	min, max float64
	alpha    float64
}

func newRamp(stops []color.NRGBA, min, max float64) *ramp {
	return &ramp{stops: stops, min: min, max: max, alpha: 1}
}

func (r *ramp) At(v float64) (color.Color, error) {
	switch {
	case math.IsNaN(v):
		return nil, palette.ErrNaN
	case v < r.min:
		return nil, palette.ErrUnderflow
	case v > r.max:
		return nil, palette.ErrOverflow
	}
	t := 0.0
	if r.max > r.min {
		t = (v - r.min) / (r.max - r.min)
	}
	pos := t * float64(len(r.stops)-1)
	i := min(int(pos), len(r.stops)-2)
	f := pos - float64(i)
	a, b := r.stops[i], r.stops[i+1]
	mix := func(x, y uint8) uint8 { return uint8(math.Round(float64(x) + f*(float64(y)-float64(x)))) }
	return color.NRGBA{mix(a.R, b.R), mix(a.G, b.G), mix(a.B, b.B), uint8(math.Round(255 * r.alpha))}, nil
}

func (r *ramp) Max() float64       { return r.max }
func (r *ramp) SetMax(v float64)   { r.max = v }
func (r *ramp) Min() float64       { return r.min }
func (r *ramp) SetMin(v float64)   { r.min = v }
func (r *ramp) Alpha() float64     { return r.alpha }
func (r *ramp) SetAlpha(a float64) { r.alpha = a }
func (r *ramp) Palette(n int) palette.Palette {
	cs := make([]color.Color, n)
	for i := range cs {
		v := r.min + (r.max-r.min)*float64(i)/float64(max(1, n-1))
		c, _ := r.At(v)
		cs[i] = c
	}
	return colours(cs)
}

type colours []color.Color

func (c colours) Colors() []color.Color { return c }

// luminance is the relative luminance of c (sRGB, ITU-R BT.709
// coefficients), to choose black or white text over a cell.
func luminance(c color.Color) float64 {
	r, g, b, _ := c.RGBA()
	lin := func(v uint32) float64 {
		x := float64(v) / 0xFFFF
		if x <= 0.04045 {
			return x / 12.92
		}
		return math.Pow((x+0.055)/1.055, 2.4)
	}
	return 0.2126*lin(r) + 0.7152*lin(g) + 0.0722*lin(b)
}

// Type: sans-serif throughout (Liberation Sans, bundled with gonum/plot).
var sans = font.Font{Typeface: "Liberation", Variant: "Sans"}

func face(size vg.Length) font.Font { return font.From(sans, size) }

// newPlot returns a plot in the figures' style: sans-serif text, light
// grey grid lines behind the data, the title left-aligned.
func newPlot(title, xLabel, yLabel string) *plot.Plot {
	p := plot.New()
	p.Title.Text = title
	p.Title.TextStyle.Font = face(10)
	p.Title.TextStyle.XAlign = draw.XLeft
	p.Title.Padding = vg.Points(4)
	for _, a := range []*plot.Axis{&p.X, &p.Y} {
		a.Label.TextStyle.Font = face(9)
		a.Tick.Label.Font = face(8)
		a.LineStyle.Width = vg.Points(0.6)
		a.Tick.LineStyle.Width = vg.Points(0.6)
		a.Padding = vg.Points(3)
	}
	p.X.Label.Text, p.Y.Label.Text = xLabel, yLabel
	p.Legend.TextStyle.Font = face(8)
	p.Legend.ThumbnailWidth = vg.Points(14)
	p.Legend.Padding = vg.Points(1)
	return p
}

// integerTicks labels every whole number in [lo, hi] (every step-th when
// there are many), prefixing each with prefix.
func integerTicks(step int, label func(int) string) plot.Ticker {
	return plot.TickerFunc(func(lo, hi float64) []plot.Tick {
		var ts []plot.Tick
		for v := int(math.Ceil(lo)); v <= int(math.Floor(hi)); v++ {
			if (v-1)%step == 0 || step == 1 {
				ts = append(ts, plot.Tick{Value: float64(v), Label: label(v)})
			}
		}
		return ts
	})
}
