package report

import (
	"bytes"
	"encoding/base64"
	"fmt"
	"html"
	"image/color"
	"math"
	"strconv"
	"strings"

	"golang.org/x/image/font/sfnt"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/font/liberation"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/text"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgsvg"
)

// The plots are drawn by gonum.org/v1/plot into its SVG canvas. That
// canvas writes text as <text> elements naming a font family and leaves
// the font to the viewer, or embeds it again in every plot; a viewer
// without the font would substitute one whose widths differ from those
// the layout was computed with. So every plot uses one face, Liberation
// Sans (SIL Open Font License), and the page embeds it once, as a data
// URL in its own style sheet.

// plotFont is the one face of every plot.
var plotFont = font.Font{Typeface: "Liberation", Variant: "Sans"}

// Plot size, in points; the page scales it to the column width.
const (
	plotWidth  = 480
	plotHeight = 250
)

// renderer draws plots with its own font cache, holding the one face.
type renderer struct {
	fonts   *font.Cache
	handler text.Handler
}

func newRenderer() (*renderer, error) {
	var coll font.Collection
	for _, f := range liberation.Collection() {
		if f.Font.Typeface == plotFont.Typeface && f.Font.Variant == plotFont.Variant &&
			f.Font.Style == plotFont.Style && f.Font.Weight == plotFont.Weight {
			coll = append(coll, f)
		}
	}
	if len(coll) != 1 {
		return nil, fmt.Errorf("report: the font %s is not in the liberation collection", plotFont.Name())
	}
	fonts := font.NewCache(coll)
	return &renderer{fonts: fonts, handler: text.Plain{Fonts: fonts}}, nil
}

// fontFace writes the @font-face rule that the plots' text refers to: the
// family name is read from the font itself, as the SVG canvas does.
func (r *renderer) fontFace() (string, error) {
	face := r.fonts.Lookup(plotFont, 10)
	var buf sfnt.Buffer
	family, err := face.Face.Name(&buf, sfnt.NameIDFamily)
	if err != nil {
		return "", fmt.Errorf("report: font family: %w", err)
	}
	var raw bytes.Buffer
	if _, err := face.Face.WriteSourceTo(nil, &raw); err != nil {
		return "", fmt.Errorf("report: font data: %w", err)
	}
	return fmt.Sprintf("@font-face{font-family:%q;font-style:normal;font-weight:normal;src:url(data:font/ttf;base64,%s) format(\"truetype\")}",
		family, base64.StdEncoding.EncodeToString(raw.Bytes())), nil
}

// The series styles: colours that stay apart for the common kinds of
// colour blindness, and glyph shapes that stay apart in grey print.
var (
	seriesColors = []color.Color{
		color.RGBA{0x00, 0x72, 0xb2, 0xff}, // blue
		color.RGBA{0xd5, 0x5e, 0x00, 0xff}, // vermilion
		color.RGBA{0x00, 0x9e, 0x73, 0xff}, // bluish green
		color.RGBA{0xcc, 0x79, 0xa7, 0xff}, // reddish purple
	}
	seriesGlyphs = []draw.GlyphDrawer{draw.CircleGlyph{}, draw.TriangleGlyph{}, draw.SquareGlyph{}, draw.CrossGlyph{}}
)

// svg draws p as an SVG element for inline use; label names it for
// screen readers.
func (r *renderer) svg(p *Plot, label string) (string, error) {
	plt := plot.New()
	r.style(plt)
	plt.X.Label.Text, plt.Y.Label.Text = p.X.Label, p.Y.Label
	legend := false
	for i, s := range p.Series {
		if len(s.Points) == 0 {
			continue
		}
		xys := make(plotter.XYs, len(s.Points))
		for j, pt := range s.Points {
			xys[j] = plotter.XY{X: p.X.place(pt.X), Y: p.Y.place(pt.Y)}
		}
		col := seriesColors[i%len(seriesColors)]
		var thumbs []plot.Thumbnailer
		switch p.Kind {
		case Bars:
			b := &bars{xys: xys, color: col}
			plt.Add(b)
			thumbs = append(thumbs, b)
		case Lines:
			l, err := plotter.NewLine(xys)
			if err != nil {
				return "", err
			}
			l.Color, l.Width = col, vg.Points(1)
			plt.Add(l)
			thumbs = append(thumbs, l)
			fallthrough
		case Points:
			sc, err := plotter.NewScatter(xys)
			if err != nil {
				return "", err
			}
			sc.GlyphStyle = draw.GlyphStyle{Color: col, Radius: vg.Points(2.5), Shape: seriesGlyphs[i%len(seriesGlyphs)]}
			plt.Add(sc)
			thumbs = append(thumbs, sc)
		}
		if s.Name != "" && len(p.Series) > 1 {
			plt.Legend.Add(s.Name, thumbs...)
			legend = true
		}
	}
	r.axis(&plt.X, p.X, false)
	r.axis(&plt.Y, p.Y, p.Kind == Bars)
	if p.Kind == Bars && p.X.Categories == nil && !p.X.Log {
		plt.X.Min, plt.X.Max = plt.X.Min-0.6, plt.X.Max+0.6 // whole bars at the ends
	}
	if p.Kind == Bars && !p.Y.Log {
		plt.Y.Min = 0 // bars stand on zero
	}
	if legend && !p.Y.Log {
		plt.Y.Max += 0.25 * (plt.Y.Max - plt.Y.Min) // room for the legend above the data
	}
	plt.Legend.Top, plt.Legend.Left = true, p.Kind != Bars

	c := vgsvg.NewWith(vgsvg.UseWH(plotWidth, plotHeight))
	plt.Draw(draw.New(c))
	var out bytes.Buffer
	if _, err := c.WriteTo(&out); err != nil {
		return "", err
	}
	s := out.String()
	// Inline SVG in HTML takes no XML declaration; the element starts at
	// <svg.
	i := strings.Index(s, "<svg")
	if i < 0 {
		return "", fmt.Errorf("report: the SVG canvas wrote no <svg> element")
	}
	return `<svg role="img" aria-label="` + html.EscapeString(label) + `" ` + s[i+len("<svg "):], nil
}

// style sets every text of plt to the one face, through this renderer's
// own font cache.
func (r *renderer) style(plt *plot.Plot) {
	plt.TextHandler = r.handler
	set := func(s *text.Style, size vg.Length) {
		s.Font = font.From(plotFont, size)
		s.Handler = r.handler
	}
	set(&plt.Title.TextStyle, 12)
	set(&plt.Legend.TextStyle, 9)
	for _, a := range []*plot.Axis{&plt.X, &plt.Y} {
		set(&a.Label.TextStyle, 10)
		set(&a.Tick.Label, 9)
	}
}

// axis sets the scale, range and ticks of a. A log axis under bars starts
// a decade below its least value, so that the least bar has a height.
func (r *renderer) axis(a *plot.Axis, m Axis, bars bool) {
	switch {
	case m.Categories != nil:
		ticks := make([]plot.Tick, len(m.Categories))
		for i, name := range m.Categories {
			ticks[i] = plot.Tick{Value: float64(i), Label: name}
		}
		a.Tick.Marker = plot.ConstantTicks(ticks)
		a.Tick.Length = 0
		a.Min, a.Max = -0.6, float64(len(m.Categories))-0.4
	case m.Log:
		// Values are placed by their logarithms on a linear axis (see
		// place): gonum's LogScale reserves room for an axis label as if
		// the label sat at the midpoint of the values, which on a log
		// axis is near the top, and so squeezes the plot.
		lo, hi := math.Floor(a.Min), math.Ceil(a.Max)
		if bars && lo >= a.Min {
			lo--
		}
		if hi <= lo {
			hi = lo + 1
		}
		a.Min, a.Max = lo, hi
		a.Tick.Marker = decades{}
	default:
		a.Tick.Marker = integerTicks{}
	}
}

// place is where a value stands on the axis: its decimal logarithm on a
// log axis, itself on any other.
func (a Axis) place(v float64) float64 {
	if a.Log {
		return math.Log10(v)
	}
	return v
}

// decades ticks a log axis, whose values are placed by their logarithms,
// at powers of ten, labelled, with unlabelled ticks at 2..9 times them
// when the axis spans few decades. Labels stay plain decimals from 0.0001
// to 10^6 and become 1e7, 1e-5 beyond.
type decades struct{}

func (decades) Ticks(min, max float64) []plot.Tick {
	lo, hi := int(math.Ceil(min-1e-9)), int(math.Floor(max+1e-9))
	every := 1 + (hi-lo)/8 // at most about 8 labels
	var ticks []plot.Tick
	for e := lo; e <= hi; e++ {
		if (e-lo)%every == 0 {
			ticks = append(ticks, plot.Tick{Value: float64(e), Label: decadeLabel(e)})
		} else {
			ticks = append(ticks, plot.Tick{Value: float64(e)})
		}
		if hi-lo <= 6 && e < hi {
			for m := 2; m <= 9; m++ {
				ticks = append(ticks, plot.Tick{Value: float64(e) + math.Log10(float64(m))})
			}
		}
	}
	return ticks
}

func decadeLabel(e int) string {
	if e >= -4 && e <= 6 {
		return strconv.FormatFloat(math.Pow(10, float64(e)), 'f', -1, 64)
	}
	return "1e" + strconv.Itoa(e)
}

// integerTicks labels a linear axis at whole numbers 1, 2 or 5 times a
// power of ten apart, so that step counts never show as 2.5.
type integerTicks struct{}

func (integerTicks) Ticks(min, max float64) []plot.Tick {
	span := max - min
	if !(span > 0) || math.IsInf(span, 0) {
		return nil
	}
	step := 1.0
	for i := 0; span/step > 8; i++ {
		step = []float64{2, 5, 10}[i%3] * math.Pow(10, float64(i/3))
	}
	var ticks []plot.Tick
	for v := math.Ceil(min/step) * step; v <= max; v += step {
		ticks = append(ticks, plot.Tick{Value: v, Label: strconv.FormatFloat(v, 'f', -1, 64)})
	}
	return ticks
}

// bars draws one bar per point, from the bottom of the Y axis (zero on a
// linear axis, the lowest decade on a log one), so bars work on a log axis
// as well; gonum's BarChart stands on zero, which a log axis lacks.
type bars struct {
	xys   plotter.XYs
	color color.Color
}

const barWidth = 0.7 // in X units

func (b *bars) Plot(c draw.Canvas, plt *plot.Plot) {
	trX, trY := plt.Transforms(&c)
	for _, p := range b.xys {
		x0, x1 := trX(p.X-barWidth/2), trX(p.X+barWidth/2)
		y0, y1 := trY(plt.Y.Min), trY(p.Y)
		poly := []vg.Point{{X: x0, Y: y0}, {X: x1, Y: y0}, {X: x1, Y: y1}, {X: x0, Y: y1}}
		c.FillPolygon(b.color, c.ClipPolygonXY(poly))
	}
}

func (b *bars) DataRange() (xmin, xmax, ymin, ymax float64) {
	xmin, xmax, ymin, ymax = plotter.XYRange(b.xys)
	return xmin, xmax, ymin, ymax
}

func (b *bars) Thumbnail(c *draw.Canvas) {
	pts := []vg.Point{{X: c.Min.X, Y: c.Min.Y}, {X: c.Max.X, Y: c.Min.Y}, {X: c.Max.X, Y: c.Max.Y}, {X: c.Min.X, Y: c.Max.Y}}
	c.FillPolygon(b.color, c.ClipPolygonXY(pts))
}
