// Package chart draws night charts with gonum.org/v1/plot (moved from
// cmd/nightloom so that the web pages can draw them too).
package chart

// Night charts drawn with gonum.org/v1/plot: altitude against the site's
// local time, twilight bands, the Moon, every charted target's altitude
// (dashed grey where the local horizon profile hides it), the runs of a
// plan drawn thick over their target's curve, closures, and a legend in a
// panel of its own. The curves are computed here, from the site and targets,
// with the constraints grid (the same sampling the daemon plans on).

import (
	"errors"
	"fmt"
	"image/color"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"time"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/font"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
	"gonum.org/v1/plot/vg/vgsvg"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
)

// Run is one assignment to draw over its target's curve.
type Run struct {
	Start, End time.Time
	Label      string // e.g. the filter
}

// Curve is one target on the chart.
type Curve struct {
	Name   string
	Target *constraints.Target
	Runs   []Run
}

// Span is a shaded interval (a closure).
type Span struct {
	Start, End time.Time
	Label      string
}

// Spec says what to draw.
type Spec struct {
	Title      string
	Site       *constraints.Site
	Start, End time.Time     // the time axis
	Step       time.Duration // sampling of the curves
	Curves     []Curve
	Closures   []Span
	Marks      []Span // vertical lines at Start (End unused), e.g. "replanned from"
	// Theme is the colours; nil means Light.
	Theme *Theme
}

// Theme is the chart's colours. Light is the printed chart's (the night
// left white so that the curves stand out); Dark keeps a dark-adapted eye's
// night vision (no white, dim red-brown text), for the web pages.
type Theme struct {
	Background, Text, Grid      color.Color
	Day, Civil, Nautical, Astro color.Color
	Closure, Moon, Hidden, Mark color.Color
	// Palette holds distinct colours for the targets.
	Palette []color.RGBA
}

// Light is the default theme. Twilight bands grow more saturated toward
// the Sun; the night is left white so that the curves stand out.
var Light = Theme{
	Background: color.White,
	Text:       color.Black,
	Grid:       color.RGBA{0, 0, 0, 30},
	Day:        color.RGBA{255, 240, 190, 255},
	Civil:      color.RGBA{150, 175, 220, 255},
	Nautical:   color.RGBA{190, 206, 235, 255},
	Astro:      color.RGBA{226, 233, 246, 255},
	Closure:    color.NRGBA{215, 40, 40, 70},
	Moon:       color.RGBA{150, 110, 0, 255},
	Hidden:     color.RGBA{150, 150, 150, 255},
	Mark:       color.RGBA{200, 30, 30, 255},
	// A qualitative scheme of our own, dark enough to read on the pale
	// bands.
	Palette: []color.RGBA{
		{31, 100, 180, 255}, {230, 110, 0, 255}, {30, 150, 60, 255}, {200, 30, 40, 255},
		{130, 80, 190, 255}, {130, 80, 50, 255}, {220, 60, 160, 255}, {90, 90, 90, 255},
		{160, 160, 20, 255}, {20, 170, 190, 255}, {0, 60, 110, 255}, {120, 0, 60, 255},
	},
}

// Dark is the night theme: a near-black night, twilight bands as dim blues
// growing lighter toward the Sun, daylight a dim amber, text a dim warm
// grey (common practice for dark-adapted eyes, no source: keep everything
// dim and warm).
var Dark = Theme{
	Background: color.RGBA{10, 8, 8, 255},
	Text:       color.RGBA{190, 150, 140, 255},
	Grid:       color.RGBA{255, 200, 190, 28},
	Day:        color.RGBA{70, 50, 20, 255},
	Civil:      color.RGBA{40, 46, 78, 255},
	Nautical:   color.RGBA{28, 32, 56, 255},
	Astro:      color.RGBA{18, 20, 36, 255},
	Closure:    color.NRGBA{200, 40, 40, 80},
	Moon:       color.RGBA{200, 170, 90, 255},
	Hidden:     color.RGBA{110, 100, 100, 255},
	Mark:       color.RGBA{230, 60, 60, 255},
	Palette: []color.RGBA{
		{90, 150, 230, 255}, {240, 140, 40, 255}, {80, 190, 100, 255}, {230, 80, 80, 255},
		{170, 130, 230, 255}, {190, 140, 100, 255}, {230, 110, 190, 255}, {170, 170, 170, 255},
		{200, 200, 70, 255}, {70, 200, 210, 255}, {110, 160, 220, 255}, {200, 90, 130, 255},
	},
}

// unix is the chart's x coordinate of an instant.
func unix(t time.Time) float64 { return float64(t.UnixNano()) / 1e9 }

// hourTicks puts a labelled tick at every full hour of the local clock and
// an unlabelled one at every half hour.
type hourTicks struct{ loc *time.Location }

func (h hourTicks) Ticks(min, max float64) []plot.Tick {
	var ts []plot.Tick
	t := time.Unix(int64(min), 0).In(h.loc).Truncate(30 * time.Minute)
	span := max - min
	every := 1
	if span > 20*3600 {
		every = 2
	}
	for ; unix(t) <= max; t = t.Add(30 * time.Minute) {
		if unix(t) < min {
			continue
		}
		lt := t.In(h.loc)
		label := ""
		if lt.Minute() == 0 && lt.Hour()%every == 0 {
			label = lt.Format("15:04")
		}
		ts = append(ts, plot.Tick{Value: unix(t), Label: label})
	}
	return ts
}

// degTicks labels the altitude axis every 10 degrees.
type degTicks struct{}

func (degTicks) Ticks(min, max float64) []plot.Tick {
	var ts []plot.Tick
	for v := math.Ceil(min/5) * 5; v <= max; v += 5 {
		label := ""
		if math.Mod(v, 10) == 0 {
			label = fmt.Sprintf("%.0f°", v)
		}
		ts = append(ts, plot.Tick{Value: v, Label: label})
	}
	return ts
}

// band is a run of grid steps with one darkness level.
type band struct {
	from, to time.Time
	level    constraints.Darkness
}

func darknessBands(g *constraints.Grid) []band {
	var out []band
	for i := 0; i < g.N; i++ {
		t0 := g.Time(i)
		t1 := t0.Add(g.Step)
		if i == g.N-1 {
			t1 = g.End()
		}
		d := g.Dark[i]
		if n := len(out); n > 0 && out[n-1].level == d {
			out[n-1].to = t1
			continue
		}
		out = append(out, band{t0, t1, d})
	}
	return out
}

func rect(x0, x1, y0, y1 float64) plotter.XYs {
	return plotter.XYs{{X: x0, Y: y0}, {X: x1, Y: y0}, {X: x1, Y: y1}, {X: x0, Y: y1}}
}

func filled(xys plotter.XYs, c color.Color) *plotter.Polygon {
	p, err := plotter.NewPolygon(xys)
	if err != nil {
		panic(err) // programmer error: a rectangle always has 4 vertices
	}
	p.Color = c
	p.LineStyle.Width = 0
	return p
}

func newLine(xys plotter.XYs, c color.Color, width vg.Length, dashes ...vg.Length) *plotter.Line {
	l, err := plotter.NewLine(xys)
	if err != nil {
		panic(err) // programmer error: the points are finite
	}
	l.Color = c
	l.Width = width
	l.Dashes = dashes
	return l
}

// interpAlt interpolates a track's altitude (degrees) at t.
func interpAlt(g *constraints.Grid, alt []float64, t time.Time) float64 {
	x := float64(t.Sub(g.Start)) / float64(g.Step)
	i := int(math.Floor(x))
	if i < 0 {
		return alt[0]
	}
	if i >= len(alt)-1 {
		return alt[len(alt)-1]
	}
	f := x - float64(i)
	return alt[i]*(1-f) + alt[i+1]*f
}

// Build computes the curves and lays out the plot and its legend.
func Build(spec Spec) (*plot.Plot, *plot.Legend, error) {
	step := spec.Step
	if step <= 0 {
		step = 2 * time.Minute
	}
	// One step past the end so that the curves reach the axis' end.
	g, err := constraints.NewGrid(spec.Site, spec.Start, spec.End.Add(step), step, constraints.Options{NoSkyBrightness: true})
	if err != nil {
		return nil, nil, err
	}
	loc := spec.Site.Location
	if loc == nil {
		loc = time.UTC
	}
	th := spec.theme()
	sans := font.Font{Typeface: "Liberation", Variant: "Sans"}
	plot.DefaultFont, plotter.DefaultFont = sans, sans
	p := plot.New()
	p.Title.Text = spec.Title
	p.Title.TextStyle.Font.Size = vg.Points(13)
	p.X.Label.Text = "local time (" + zoneLabel(loc, spec.Start) + ")"
	p.Y.Label.Text = "altitude"
	p.X.Tick.Marker = hourTicks{loc}
	p.Y.Tick.Marker = degTicks{}
	leg := plot.NewLegend()
	leg.Top, leg.Left = true, true
	leg.TextStyle.Font.Size = vg.Points(9)
	leg.ThumbnailWidth = vg.Points(22)
	leg.Padding = vg.Points(2.5)

	// Sky bands, behind everything.
	seen := map[constraints.Darkness]bool{}
	bandStyle := []struct {
		level constraints.Darkness
		col   color.Color
		name  string
	}{
		{constraints.Day, th.Day, "daylight (Sun above -0.83°)"},
		{constraints.CivilTwilight, th.Civil, "civil twilight (Sun -0.83° to -6°)"},
		{constraints.NauticalTwilight, th.Nautical, "nautical twilight (-6° to -12°)"},
		{constraints.AstronomicalTwilight, th.Astro, "astronomical twilight (-12° to -18°)"},
	}
	for _, b := range darknessBands(g) {
		for _, s := range bandStyle {
			if s.level == b.level {
				p.Add(filled(rect(unix(b.from), unix(b.to), 0, 90), s.col))
				seen[s.level] = true
			}
		}
	}
	for _, c := range spec.Closures {
		p.Add(filled(rect(unix(c.Start), unix(c.End), 0, 90), th.Closure))
	}
	gr := plotter.NewGrid()
	gr.Vertical.Color = th.Grid
	gr.Horizontal.Color = th.Grid
	p.Add(gr)

	// The Moon.
	var moon plotter.XYs
	for i := 0; i < g.N; i++ {
		moon = append(moon, plotter.XY{X: unix(g.Time(i)), Y: g.MoonAlt[i] * ephem.Rad2Deg})
	}
	moonLine := newLine(moon, th.Moon, vg.Points(1.4), vg.Points(7), vg.Points(3))
	p.Add(moonLine)
	// Geocentric illuminated fraction at the middle of the chart, the
	// quantity SkyService.Night reports.
	illum, _ := g.Snap[g.N/2].MoonIllumination()
	moonName := fmt.Sprintf("Moon (%.0f %% lit)", 100*illum)

	// Targets: visible stretches solid, hidden ones dashed grey, runs thick.
	var hiddenSample *plotter.Line
	type entry struct {
		name string
		line *plotter.Line
	}
	var entries []entry
	var labels plotter.XYLabels
	for k, c := range spec.Curves {
		col := th.Palette[k%len(th.Palette)]
		tr, err := g.Track(c.Target)
		if err != nil {
			return nil, nil, fmt.Errorf("%s: %w", c.Name, err)
		}
		alt := make([]float64, g.N)
		hidden := make([]bool, g.N)
		for i := 0; i < g.N; i++ {
			alt[i] = float64(tr.Alt[i]) * ephem.Rad2Deg
			hidden[i] = float64(tr.Alt[i]) < spec.Site.Horizon.AltitudeAt(float64(tr.Az[i]))
		}
		var first *plotter.Line
		for i := 0; i < g.N; {
			j := i
			for j < g.N && hidden[j] == hidden[i] {
				j++
			}
			// Each stretch runs to the first sample of the next so the
			// pieces join.
			end := min(j+1, g.N)
			var xys plotter.XYs
			for s := i; s < end; s++ {
				xys = append(xys, plotter.XY{X: unix(g.Time(s)), Y: alt[s]})
			}
			if len(xys) >= 2 {
				if hidden[i] {
					l := newLine(xys, th.Hidden, vg.Points(0.9), vg.Points(3), vg.Points(2.5))
					p.Add(l)
					if hiddenSample == nil && slicesMaxY(xys[:j-i]) > 0 {
						hiddenSample = l
					}
				} else {
					l := newLine(xys, col, vg.Points(1.1))
					p.Add(l)
					if first == nil {
						first = l
					}
				}
			}
			i = j
		}
		for _, r := range c.Runs {
			xys := plotter.XYs{{X: unix(r.Start), Y: interpAlt(g, alt, r.Start)}}
			for i := 0; i < g.N; i++ {
				if t := g.Time(i); t.After(r.Start) && t.Before(r.End) {
					xys = append(xys, plotter.XY{X: unix(t), Y: alt[i]})
				}
			}
			xys = append(xys, plotter.XY{X: unix(r.End), Y: interpAlt(g, alt, r.End)})
			p.Add(newLine(xys, col, vg.Points(4.5)))
			if r.Label != "" {
				m := r.Start.Add(r.End.Sub(r.Start) / 2)
				labels.XYs = append(labels.XYs, plotter.XY{X: unix(m), Y: math.Min(interpAlt(g, alt, m)+2.2, 88)})
				labels.Labels = append(labels.Labels, r.Label)
			}
		}
		thumb := newLine(nil, col, vg.Points(4))
		if first == nil {
			first = thumb
		}
		entries = append(entries, entry{c.Name, thumb})
	}
	if len(labels.XYs) > 0 {
		lb, err := plotter.NewLabels(labels)
		if err != nil {
			return nil, nil, err
		}
		for i := range lb.TextStyle {
			lb.TextStyle[i].Font.Size = vg.Points(7.5)
			lb.TextStyle[i].XAlign = draw.XCenter
		}
		p.Add(lb)
	}
	for _, m := range spec.Marks {
		l := newLine(plotter.XYs{{X: unix(m.Start), Y: 0}, {X: unix(m.Start), Y: 90}}, th.Mark, vg.Points(1.2), vg.Points(2), vg.Points(2))
		p.Add(l)
		leg.Add(m.Label, l)
	}

	for _, e := range entries {
		leg.Add(e.name, e.line)
	}
	leg.Add(moonName, moonLine)
	if hiddenSample != nil {
		leg.Add("behind the local horizon", newLine(nil, th.Hidden, vg.Points(1.2), vg.Points(3), vg.Points(2.5)))
	}
	if len(spec.Closures) > 0 {
		leg.Add("closure ("+spec.Closures[0].Label+")", filled(rect(0, 1, 0, 1), th.Closure))
	}
	for _, s := range bandStyle {
		if seen[s.level] {
			leg.Add(s.name, filled(rect(0, 1, 0, 1), s.col))
		}
	}
	p.BackgroundColor = th.Background
	p.Title.TextStyle.Color = th.Text
	leg.TextStyle.Color = th.Text
	for _, ax := range []*plot.Axis{&p.X, &p.Y} {
		ax.Label.TextStyle.Color = th.Text
		ax.Tick.Label.Color = th.Text
		ax.LineStyle.Color = th.Text
		ax.Tick.LineStyle.Color = th.Text
	}
	// Last: Add widens the axes to the data it is given.
	p.X.Min, p.X.Max = unix(spec.Start), unix(spec.End)
	p.Y.Min, p.Y.Max = 0, 90
	return p, &leg, nil
}

// zoneLabel names the zone as the clock shows it: "Europe/Paris, CET".
func zoneLabel(loc *time.Location, t time.Time) string {
	abbr := t.In(loc).Format("MST")
	if loc.String() == abbr || strings.HasPrefix(abbr, "+") || strings.HasPrefix(abbr, "-") {
		return loc.String()
	}
	return loc.String() + ", " + abbr
}

// Chart size: the plot and, to its right, the legend panel.
const (
	chartWidth  = 12 * vg.Inch
	chartHeight = 6.5 * vg.Inch
	legendWidth = 3.1 * vg.Inch
	chartDPI    = 130
)

// ErrFormat refuses a file name that is neither .png nor .svg.
var ErrFormat = errors.New("chart: want a .png or .svg file name")

// WriteFile draws the spec to path, as PNG or SVG by its extension.
func WriteFile(spec Spec, path string) error {
	ext := strings.ToLower(filepath.Ext(path))
	if ext != ".png" && ext != ".svg" {
		return fmt.Errorf("%w, got %q", ErrFormat, path)
	}
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	if err := write(f, spec, ext); err != nil {
		f.Close()
		return err
	}
	return f.Close()
}

// WriteSVG draws the spec as an SVG document to w. Text (target names,
// closure reasons) is escaped by the SVG canvas (vgsvg's FillString).
func WriteSVG(w io.Writer, spec Spec) error { return write(w, spec, ".svg") }

func write(w io.Writer, spec Spec, ext string) error {
	p, leg, err := Build(spec)
	if err != nil {
		return err
	}
	var canvas vg.CanvasWriterTo
	switch ext {
	case ".png":
		c := vgimg.NewWith(vgimg.UseWH(chartWidth, chartHeight), vgimg.UseDPI(chartDPI), vgimg.UseBackgroundColor(spec.theme().Background))
		canvas = vgimg.PngCanvas{Canvas: c}
	case ".svg":
		canvas = vgsvg.New(chartWidth, chartHeight)
	}
	dc := draw.New(canvas)
	if ext == ".svg" {
		dc.SetColor(spec.theme().Background)
		dc.Fill(dc.Rectangle.Path())
	}
	p.Draw(draw.Crop(dc, 0, -legendWidth, 0, 0))
	legArea := draw.Crop(dc, chartWidth-legendWidth+vg.Points(8), -vg.Points(6), vg.Points(6), -vg.Points(30))
	leg.Draw(legArea)
	_, err = canvas.WriteTo(w)
	return err
}

// slicesMaxY is the largest Y of the points.
func slicesMaxY(xys plotter.XYs) float64 {
	m := math.Inf(-1)
	for _, p := range xys {
		m = math.Max(m, p.Y)
	}
	return m
}

func (s Spec) theme() *Theme {
	if s.Theme == nil {
		return &Light
	}
	return s.Theme
}

// DPI is the resolution of the PNG charts, for other charts drawn beside
// them (light curves, outlooks) to match.
const DPI = chartDPI
