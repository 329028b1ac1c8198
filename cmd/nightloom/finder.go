package main

// `nightloom catalogue finder`: the track of an orbit target over several
// nights among the catalogue's stars and deep-sky objects, drawn with
// gonum.org/v1/plot on a gnomonic (tangent-plane) projection, east to the
// left and north up as on the sky, with the date at each night's point.

import (
	"fmt"
	"image/color"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
	"time"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
	"gonum.org/v1/plot/vg/vgsvg"

	"github.com/nightloom/nightloom/catalogue"
	"github.com/nightloom/nightloom/ephem"
)

// Finder chart layout: a square plot, stars to finderStarLimit.
const (
	finderSize      = 9 * vg.Inch
	finderDPI       = 120
	finderMarginDeg = 1.5
	finderMinRadius = 3.0
)

// geocentricTrack returns the orbit target's geocentric astrometric ICRS
// place at each instant (light time included; ephem.Conic.Observe).
func geocentricTrack(c ephem.Mover, times []time.Time) []catalogue.TrackPoint {
	out := make([]catalogue.TrackPoint, len(times))
	for i, t := range times {
		tt := ephem.NewInstant(t).TT
		ep, ev := ephem.EarthHeliocentric(tt)
		v := c.Observe(tt, ep, ev, ephem.Vec3{}, ephem.Vec3{})
		ra, dec, _ := ephem.VecToSpherical(v.Astrometric)
		out[i] = catalogue.TrackPoint{Time: t, RADeg: ra * ephem.Rad2Deg, DecDeg: dec * ephem.Rad2Deg}
	}
	return out
}

func runCatalogueFinder(args []string, stdout, stderr io.Writer) error {
	fs := newFlagSet("catalogue finder", stderr)
	orbitPath := fs.String("orbit", "", "orbit target: JSON file with q_au, e, i_deg, node_deg, peri_deg, perihelion_tt, m1, k1 (as for sky --orbit); required")
	from := fs.String("from", "", "first night's instant, RFC 3339 (e.g. 2027-01-10T06:00:00Z); the track is drawn at this time of day each night; required")
	nights := fs.Int("nights", 7, "number of nights, 2..60")
	out := fs.String("out", "finder.png", "output file, .png or .svg")
	starLimit := fs.Float64("star-limit", 6.5, "faintest star drawn (the catalogue holds stars to 6.5 and every named star)")
	dsoLimit := fs.Float64("dso-limit", 10, "faintest deep-sky object drawn")
	title := fs.String("title", "", "chart title (default: the orbit file's name)")
	if err := parseFlags(fs, args); err != nil {
		return err
	}
	if *orbitPath == "" {
		return flagError("orbit", "required: an orbit file")
	}
	if err := checkChartName("out", *out); err != nil {
		return err
	}
	start, err := time.Parse(time.RFC3339Nano, *from)
	if *from == "" || err != nil {
		return flagError("from", "want RFC 3339 (e.g. 2027-01-10T06:00:00Z), got %q", *from)
	}
	if start.Year() < 1800 || start.Year() > 2200 {
		return flagError("from", "year %d outside 1800-2200", start.Year())
	}
	if *nights < 2 || *nights > 60 {
		return flagError("nights", "must be within 2..60, got %d", *nights)
	}
	for name, v := range map[string]float64{"star-limit": *starLimit, "dso-limit": *dsoLimit} {
		if !(v >= -2 && v <= 20) {
			return flagError(name, "must be within [-2, 20]")
		}
	}
	orbit, fixed, err := readOrbit(*orbitPath)
	if err != nil {
		return err
	}
	if fixed != nil || orbit == nil {
		return flagError("orbit", "%s is a fixed target; a finder chart follows a moving one", *orbitPath)
	}
	// Nightly points and an hourly line between them.
	var nightly, fine []time.Time
	for i := 0; i < *nights; i++ {
		nightly = append(nightly, start.Add(time.Duration(i)*24*time.Hour))
	}
	for t := start; !t.After(nightly[len(nightly)-1]); t = t.Add(time.Hour) {
		fine = append(fine, t)
	}
	cat := catalogue.Default()
	ptsNight, ptsFine := geocentricTrack(orbit, nightly), geocentricTrack(orbit, fine)
	field, err := cat.Finder(ptsFine, finderMarginDeg, finderMinRadius, *starLimit, *dsoLimit)
	if err != nil {
		return flagError("nights", "%s", strings.TrimPrefix(err.Error(), "catalogue: "))
	}
	if *title == "" {
		*title = strings.TrimSuffix(filepath.Base(*orbitPath), filepath.Ext(*orbitPath))
	}
	crossings := cat.Crossings(ptsFine)
	if err := writeFinder(*out, *title, field, ptsNight, crossings); err != nil {
		return err
	}
	// The track in words: where it is each night, and where it crosses.
	tw := newTable(stdout)
	fmt.Fprintln(tw, "date (UTC)\tRA (ICRS)\tDec\tconstellation")
	for _, p := range ptsNight {
		k := cat.ConstellationOf(p.RADeg, p.DecDeg)
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\n", p.Time.UTC().Format("2006-01-02 15:04"), hms(p.RADeg), dms(p.DecDeg), k.Name)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	for _, c := range crossings {
		fmt.Fprintf(stdout, "moves from %s into %s between %s and %s UTC\n", c.From.Name, c.To.Name,
			c.After.UTC().Format("2006-01-02 15:04"), c.By.UTC().Format("15:04"))
	}
	fmt.Fprintf(stderr, "wrote %s (%d stars, %d deep-sky objects, field %.1f deg across)\n", *out, len(field.Stars), len(field.DeepSky), 2*field.RadiusDeg)
	return nil
}

// starRadius maps a magnitude to a dot radius: a magnitude brighter is a
// bigger dot (common practice on star charts, no source).
func starRadius(mag, limit float64) vg.Length {
	return vg.Points(0.8 + 1.1*math.Max(0, limit-mag))
}

// writeFinder draws the chart. X is minus the gnomonic x (east to the left).
func writeFinder(path, title string, f catalogue.Field, nightly []catalogue.TrackPoint, crossings []catalogue.Crossing) error {
	p := plot.New()
	p.Title.Text = fmt.Sprintf("%s: %s to %s, geocentric, at %s UTC each night", title,
		nightly[0].Time.UTC().Format("2006-01-02"), nightly[len(nightly)-1].Time.UTC().Format("2006-01-02"), nightly[0].Time.UTC().Format("15:04"))
	p.X.Label.Text = fmt.Sprintf("deg from RA %s, Dec %s (gnomonic; east to the left)", hms(f.CenterRADeg), dms(f.CenterDecDeg))
	p.Y.Label.Text = "deg (north up)"
	r := f.RadiusDeg
	p.X.Min, p.X.Max, p.Y.Min, p.Y.Max = -r, r, -r, r
	p.X.Tick.Marker = reversedTicks{}
	p.Add(plotter.NewGrid())

	// Constellation boundaries (dotted, from a 240 x 240 sampling of the
	// field) and names.
	bx, by, bl := catalogue.Default().Boundaries(f, 240)
	if len(bx) > 0 {
		var bxy plotter.XYs
		for i := range bx {
			bxy = append(bxy, plotter.XY{X: -bx[i], Y: by[i]})
		}
		b, err := plotter.NewScatter(bxy)
		if err != nil {
			return err
		}
		b.GlyphStyle = draw.GlyphStyle{Color: color.RGBA{R: 90, G: 150, B: 90, A: 255}, Radius: vg.Points(0.5), Shape: draw.CircleGlyph{}}
		p.Add(b)
	}
	var cxy plotter.XYs
	var ctxt []string
	for k, at := range bl {
		cxy, ctxt = append(cxy, plotter.XY{X: -at[0], Y: at[1]}), append(ctxt, k)
	}
	if len(cxy) > 0 {
		names, err := plotter.NewLabels(plotter.XYLabels{XYs: cxy, Labels: ctxt})
		if err != nil {
			return err
		}
		for i := range names.TextStyle {
			names.TextStyle[i].Font.Size = vg.Points(14)
			names.TextStyle[i].Color = color.RGBA{R: 90, G: 150, B: 90, A: 255}
			names.TextStyle[i].XAlign = draw.XCenter
		}
		p.Add(names)
	}

	starLimit := 0.0
	for _, s := range f.Stars {
		starLimit = math.Max(starLimit, s.Entry.Mag)
	}
	for _, s := range f.Stars {
		sc, err := plotter.NewScatter(plotter.XYs{{X: -s.X, Y: s.Y}})
		if err != nil {
			return err
		}
		sc.GlyphStyle = draw.GlyphStyle{Color: color.Black, Radius: starRadius(s.Entry.Mag, starLimit), Shape: draw.CircleGlyph{}}
		p.Add(sc)
	}
	// Names of the brighter stars, and of every deep-sky object drawn.
	var lxy plotter.XYs
	var ltxt []string
	for _, s := range f.Stars {
		if s.Entry.Mag <= 3.5 {
			name := s.Entry.Name
			if name == "" {
				name = s.Entry.BayerFlamsteed()
			}
			if name != "" {
				lxy, ltxt = append(lxy, plotter.XY{X: -s.X, Y: s.Y}), append(ltxt, "  "+name)
			}
		}
	}
	dso := color.RGBA{R: 170, G: 40, B: 40, A: 255}
	for _, d := range f.DeepSky {
		sc, err := plotter.NewScatter(plotter.XYs{{X: -d.X, Y: d.Y}})
		if err != nil {
			return err
		}
		sc.GlyphStyle = draw.GlyphStyle{Color: dso, Radius: vg.Points(4), Shape: draw.RingGlyph{}}
		p.Add(sc)
		name := d.Entry.ID
		if d.Entry.Messier > 0 {
			name = fmt.Sprintf("M %d", d.Entry.Messier)
		}
		lxy, ltxt = append(lxy, plotter.XY{X: -d.X, Y: d.Y}), append(ltxt, "  "+name)
	}
	if len(lxy) > 0 {
		labels, err := plotter.NewLabels(plotter.XYLabels{XYs: lxy, Labels: ltxt})
		if err != nil {
			return err
		}
		for i := range labels.TextStyle {
			labels.TextStyle[i].Font.Size = vg.Points(7)
			labels.TextStyle[i].Color = color.Gray{Y: 60}
		}
		p.Add(labels)
	}
	// The track: a line through the hourly points, a dot and a date at each
	// night.
	track := color.RGBA{R: 20, G: 90, B: 200, A: 255}
	var line plotter.XYs
	for i := range f.TrackX {
		line = append(line, plotter.XY{X: -f.TrackX[i], Y: f.TrackY[i]})
	}
	l, err := plotter.NewLine(line)
	if err != nil {
		return err
	}
	l.LineStyle = draw.LineStyle{Color: track, Width: vg.Points(1.5)}
	p.Add(l)
	var nxy plotter.XYs
	var ntxt []string
	for _, n := range nightly {
		x, y, _ := catalogue.Gnomonic(f.CenterRADeg, f.CenterDecDeg, n.RADeg, n.DecDeg)
		nxy = append(nxy, plotter.XY{X: -x, Y: y})
		ntxt = append(ntxt, " "+n.Time.UTC().Format("01-02"))
	}
	dots, err := plotter.NewScatter(nxy)
	if err != nil {
		return err
	}
	dots.GlyphStyle = draw.GlyphStyle{Color: track, Radius: vg.Points(3.5), Shape: draw.CircleGlyph{}}
	p.Add(dots)
	dates, err := plotter.NewLabels(plotter.XYLabels{XYs: nxy, Labels: ntxt})
	if err != nil {
		return err
	}
	for i := range dates.TextStyle {
		dates.TextStyle[i].Font.Size = vg.Points(9)
		dates.TextStyle[i].Color = track
		dates.TextStyle[i].YAlign = draw.YTop
	}
	p.Add(dates)
	if len(crossings) > 0 {
		var parts []string
		for _, c := range crossings {
			parts = append(parts, fmt.Sprintf("%s -> %s on %s", c.From.Abbr, c.To.Abbr, c.By.UTC().Format("01-02")))
		}
		p.Title.Text += "\n" + strings.Join(parts, "; ")
	}

	ext := strings.ToLower(filepath.Ext(path))
	var canvas vg.CanvasWriterTo
	switch ext {
	case ".png":
		canvas = vgimg.PngCanvas{Canvas: vgimg.NewWith(vgimg.UseWH(finderSize, finderSize), vgimg.UseDPI(finderDPI), vgimg.UseBackgroundColor(color.White))}
	default:
		canvas = vgsvg.New(finderSize, finderSize)
	}
	dc := draw.New(canvas)
	if ext != ".png" {
		dc.SetColor(color.White)
		dc.Fill(dc.Rectangle.Path())
	}
	p.Draw(dc)
	w, err := os.Create(path)
	if err != nil {
		return err
	}
	if _, err := canvas.WriteTo(w); err != nil {
		w.Close()
		return err
	}
	return w.Close()
}

// reversedTicks labels the X axis with the distance east (the axis holds
// minus the gnomonic x, so that east is on the left).
type reversedTicks struct{}

func (reversedTicks) Ticks(min, max float64) []plot.Tick {
	ts := plot.DefaultTicks{}.Ticks(min, max)
	for i := range ts {
		if ts[i].Label != "" {
			ts[i].Label = strings.TrimPrefix(fmt.Sprintf("%g", -ts[i].Value), "-0")
			if ts[i].Label == "" {
				ts[i].Label = "0"
			}
		}
	}
	return ts
}
