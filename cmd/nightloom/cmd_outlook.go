package main

// `nightloom outlook`: ApparitionService.Outlook, as a table of nights and
// a chart of the target's altitude when the required darkness begins
// (evening) and ends (morning), night after night.

import (
	"fmt"
	"image/color"
	"io"
	"math"
	"path/filepath"
	"strings"
	"time"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/durationpb"

	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

func runOutlook(args []string, stdout, stderr io.Writer) error {
	r := newRemote("outlook", stderr)
	file := r.fs.String("file", "", "OutlookRequest as protobuf JSON (e.g. a target inline with a constraint set); flags override")
	site := r.fs.String("site", "", "id of the site; required unless the file gives it")
	target := r.fs.String("target", "", "id of a stored target")
	from := r.fs.String("from", "", "first night, YYYY-MM-DD (the date of its evening); required unless the file gives it")
	nights := r.fs.Int("nights", 0, "number of nights, 1..366 (0: the file's, else 60)")
	darkness := r.fs.String("darkness", "", "required darkness: sunset, civil, nautical or astronomical")
	minAlt := r.fs.Float64("min-alt-deg", math.NaN(), "lowest useful altitude, deg")
	minElong := r.fs.Float64("min-elongation-deg", math.NaN(), "smallest solar elongation, deg")
	step := r.fs.Duration("step", 0, "grid step, 1m..1h (0: 5m)")
	chart := r.fs.String("chart", "", "also draw the altitude at the start and end of the required darkness to this .png or .svg file")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	req := &pb.OutlookRequest{}
	if *file != "" {
		if err := readRequest(*file, req); err != nil {
			return err
		}
	}
	if *site != "" {
		req.SiteId = *site
	}
	if req.GetSiteId() == "" {
		return flagError("site", "required: the site's id")
	}
	if *target != "" {
		req.Subject = &pb.OutlookRequest_TargetId{TargetId: *target}
	}
	if req.Subject == nil {
		return flagError("target", "required: a stored target's id (or an inline target in --file)")
	}
	if *from != "" {
		d, err := parseDate("from", *from)
		if err != nil {
			return err
		}
		req.FirstNight = d
	}
	if req.FirstNight == nil {
		return flagError("from", "required: the first night as YYYY-MM-DD")
	}
	if *nights != 0 {
		if *nights < 1 || *nights > 366 {
			return flagError("nights", "want 1..366, got %d", *nights)
		}
		req.Nights = int32(*nights)
	}
	if *darkness != "" || !math.IsNaN(*minAlt) || !math.IsNaN(*minElong) {
		if req.Constraints == nil {
			req.Constraints = &pb.ConstraintSet{}
		}
	}
	if *darkness != "" {
		d, ok := map[string]pb.Darkness{"sunset": pb.Darkness_DARKNESS_UNSPECIFIED, "civil": pb.Darkness_DARKNESS_CIVIL,
			"nautical": pb.Darkness_DARKNESS_NAUTICAL, "astronomical": pb.Darkness_DARKNESS_ASTRONOMICAL}[*darkness]
		if !ok {
			return flagError("darkness", "want sunset, civil, nautical or astronomical, got %q", *darkness)
		}
		req.Constraints.RequiredDarkness = d
	}
	if !math.IsNaN(*minAlt) {
		req.Constraints.MinAltitudeDeg = proto.Float64(*minAlt)
	}
	if !math.IsNaN(*minElong) {
		req.Constraints.MinSolarElongationDeg = proto.Float64(*minElong)
	}
	if *step < 0 {
		return flagError("step", "must be positive")
	}
	if *step > 0 {
		req.Step = durationpb.New(*step)
	}
	if *chart != "" {
		if ext := strings.ToLower(filepath.Ext(*chart)); ext != ".png" && ext != ".svg" {
			return flagError("chart", "want a .png or .svg file name, got %q", *chart)
		}
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := pb.NewApparitionServiceClient(a.cc).Outlook(ctx, req)
	if err != nil {
		return a.callErr("Outlook", err)
	}
	var name, zone string
	if sr, err := a.sites.GetSite(ctx, &pb.GetSiteRequest{SiteId: req.GetSiteId()}); err == nil {
		zone = sr.GetSite().GetTimeZone()
	} else {
		return a.callErr("GetSite", err)
	}
	if id := req.GetTargetId(); id != "" {
		if tr, err := a.targets.GetTarget(ctx, &pb.GetTargetRequest{TargetId: id}); err == nil {
			name = tr.GetTarget().GetName()
		}
	} else {
		name = req.GetTarget().GetName()
	}
	if *chart != "" {
		if err := writeOutlookChart(*chart, name, resp); err != nil {
			return err
		}
		fmt.Fprintf(stderr, "wrote %s\n", *chart)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	return printOutlook(stdout, newClock(zone), name, resp)
}

func optStr(x *float64, format string) string {
	if x == nil {
		return "-"
	}
	return fmt.Sprintf(format, *x)
}

func printOutlook(w io.Writer, c clock, name string, resp *pb.OutlookResponse) error {
	date := func(d *pb.LocalDate) string {
		if d == nil {
			return "none"
		}
		return fmt.Sprintf("%04d-%02d-%02d", d.GetYear(), d.GetMonth(), d.GetDay())
	}
	fmt.Fprintf(w, "outlook of %s: first night %s, last night %s\n\n", name, date(resp.GetFirstObservableNight()), date(resp.GetLastObservableNight()))
	tw := newTable(w)
	fmt.Fprintf(tw, "night\twindows (%s)\twhy not\tbest\talt\telong\tmag\tsky\tmoon alt/lit/sep\tdusk alt\tdawn alt\n", c.loc)
	for _, n := range resp.GetNights() {
		var ws []string
		for _, win := range n.GetWindows() {
			ws = append(ws, c.hm(win.GetStart())+"-"+c.hm(win.GetEnd()))
		}
		win, why := strings.Join(ws, " "), ""
		if win == "" {
			win = "-"
			why = enumName(n.GetReason().String(), "REASON_")
		}
		b := n.GetBest()
		best, alt, elong, mag, sky, moon := "-", "-", "-", "-", "-", "-"
		if b != nil {
			best, alt = c.hm(b.GetTime()), fmt.Sprintf("%.1f", b.GetAltitudeDeg())
			elong, mag, sky = optStr(b.SolarElongationDeg, "%.1f"), optStr(b.Magnitude, "%.1f"), optStr(b.SkyBrightnessVMagArcsec2, "%.1f")
			moon = fmt.Sprintf("%.0f/%.0f%%/%s", b.GetMoonAltitudeDeg(), 100*b.GetMoonIllumination(), optStr(b.MoonSeparationDeg, "%.0f"))
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\n", date(n.GetNight()), win, why, best, alt, elong, mag, sky, moon,
			optStr(n.DuskAltitudeDeg, "%.1f"), optStr(n.DawnAltitudeDeg, "%.1f"))
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	fmt.Fprintln(w, "angles in deg; best: the highest point in the required darkness, with its solar elongation, magnitude (with extinction), sky (V mag/arcsec2) and Moon")
	return nil
}

// writeOutlookChart draws the target's altitude when the required darkness
// begins (evening) and ends (morning) against the date, with the predicted
// magnitude at the best moment written along the curves every few nights.
func writeOutlookChart(path, name string, resp *pb.OutlookResponse) error {
	p := plot.New()
	p.Title.Text = fmt.Sprintf("%s: altitude at the start and end of the required darkness", name)
	p.X.Label.Text = "night (date of the evening)"
	p.Y.Label.Text = "altitude (deg)"
	p.X.Tick.Marker = plot.TimeTicks{Format: "01-02"}
	var dusk, dawn plotter.XYs
	var labels plotter.XYLabels
	every := max(1, len(resp.GetNights())/15)
	for i, n := range resp.GetNights() {
		d := n.GetNight()
		x := float64(time.Date(int(d.GetYear()), time.Month(d.GetMonth()), int(d.GetDay()), 0, 0, 0, 0, time.UTC).Unix())
		if n.DuskAltitudeDeg != nil {
			dusk = append(dusk, plotter.XY{X: x, Y: n.GetDuskAltitudeDeg()})
		}
		if n.DawnAltitudeDeg != nil {
			dawn = append(dawn, plotter.XY{X: x, Y: n.GetDawnAltitudeDeg()})
			if b := n.GetBest(); b != nil && b.Magnitude != nil && i%every == 0 {
				labels.XYs = append(labels.XYs, plotter.XY{X: x, Y: n.GetDawnAltitudeDeg() + 1.5})
				labels.Labels = append(labels.Labels, fmt.Sprintf("%.1f", b.GetMagnitude()))
			}
		}
	}
	if len(dusk) == 0 && len(dawn) == 0 {
		return fmt.Errorf("outlook: no night reaches the required darkness; nothing to draw")
	}
	for _, s := range []struct {
		xys   plotter.XYs
		label string
		c     color.RGBA
	}{{dusk, "evening (darkness begins)", color.RGBA{R: 0x1f, G: 0x5f, B: 0xbf, A: 255}},
		{dawn, "morning (darkness ends)", color.RGBA{R: 0xc0, G: 0x39, B: 0x2b, A: 255}}} {
		if len(s.xys) == 0 {
			continue
		}
		l, err := plotter.NewLine(s.xys)
		if err != nil {
			return err
		}
		l.Color, l.Width = s.c, vg.Points(1.6)
		p.Add(l)
		p.Legend.Add(s.label, l)
	}
	if len(labels.XYs) > 0 {
		lb, err := plotter.NewLabels(labels)
		if err != nil {
			return err
		}
		p.Add(lb)
		p.Legend.Add("numbers: predicted magnitude at the best moment")
	}
	zero := plotter.NewFunction(func(float64) float64 { return 0 })
	zero.Dashes = []vg.Length{vg.Points(3), vg.Points(3)}
	zero.Color = color.Gray{Y: 128}
	p.Add(zero)
	p.Add(plotter.NewGrid())
	p.Legend.Left = true
	return savePlot(p, 10*vg.Inch, 5.5*vg.Inch, path)
}
