package main

// `nightloom plan chart` and the chart of `nightloom sky --chart`.

import (
	"errors"
	"fmt"
	"image/color"
	"io"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"gonum.org/v1/plot"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
	"gonum.org/v1/plot/vg/vgimg"
	"gonum.org/v1/plot/vg/vgsvg"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
	"github.com/nightloom/nightloom/internal/chart"
	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

func runPlanChart(args []string, stdout, stderr io.Writer) error {
	r := newRemote("plan chart", stderr)
	id := r.fs.String("plan", "", "id of the plan; required")
	out := r.fs.String("out", "", "chart file, .png or .svg; required")
	step := r.fs.Duration("step", 2*time.Minute, "sampling of the curves")
	margin := r.fs.Duration("margin", 30*time.Minute, "time shown before and after the plan's interval")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *id == "" {
		return flagError("plan", "required: the plan's id")
	}
	if *out == "" {
		return flagError("out", "required: a .png or .svg file name")
	}
	if *step < constraints.MinStep {
		return flagError("step", "must be at least %v", constraints.MinStep)
	}
	if *margin < 0 || *margin > 6*time.Hour {
		return flagError("margin", "must be within 0..6h")
	}
	if err := checkChartName("out", *out); err != nil {
		return err
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	spec, err := a.planChartSpec(*id, *step, *margin)
	if err != nil {
		return err
	}
	if err := writeChart(spec, *out); err != nil {
		return err
	}
	fmt.Fprintf(stdout, "wrote %s\n", *out)
	return nil
}

func checkChartName(flagName, path string) error {
	if n := len(path); n < 5 || (path[n-4:] != ".png" && path[n-4:] != ".svg") {
		return flagError(flagName, "want a file name ending in .png or .svg, got %q", path)
	}
	return nil
}

// planChartSpec fetches a plan, its site and its targets and lays out the
// chart of the plan's night.
func (a *api) planChartSpec(planID string, step, margin time.Duration) (chart.Spec, error) {
	ctx, cancel := a.ctx()
	defer cancel()
	pr, err := a.plans.GetPlan(ctx, &pb.GetPlanRequest{PlanId: planID})
	if err != nil {
		return chart.Spec{}, a.callErr("GetPlan", err)
	}
	plan := pr.GetPlan()
	sr, err := a.sites.GetSite(ctx, &pb.GetSiteRequest{SiteId: plan.GetSiteId()})
	if err != nil {
		return chart.Spec{}, a.callErr("GetSite", err)
	}
	site, err := chart.SiteFromProto(sr.GetSite())
	if err != nil {
		return chart.Spec{}, err
	}
	// One curve per target, in the order of its first run.
	byTarget := map[string]int{}
	var curves []chart.Curve
	for _, x := range plan.GetAssignments() {
		k, ok := byTarget[x.GetTargetId()]
		if !ok {
			tr, err := a.targets.GetTarget(ctx, &pb.GetTargetRequest{TargetId: x.GetTargetId()})
			if err != nil {
				return chart.Spec{}, a.callErr("GetTarget", err)
			}
			t, err := chart.TargetFromProto(tr.GetTarget())
			if err != nil {
				return chart.Spec{}, err
			}
			k = len(curves)
			byTarget[x.GetTargetId()] = k
			curves = append(curves, chart.Curve{Name: tr.GetTarget().GetName(), Target: t})
		}
		curves[k].Runs = append(curves[k].Runs, chart.Run{Start: x.GetStart().AsTime(), End: x.GetEnd().AsTime(), Label: x.GetFilter()})
	}
	for k := range curves {
		curves[k].Name = runSummary(curves[k])
	}
	iv := plan.GetInterval()
	spec := chart.Spec{Site: site, Step: step, Curves: curves,
		Start: iv.GetStart().AsTime().Add(-margin), End: iv.GetEnd().AsTime().Add(margin)}
	night := "interval"
	if plan.GetNight() != nil {
		night = "night of " + dateString(plan.GetNight())
	}
	spec.Title = fmt.Sprintf("%s, %s: plan version %d (%s), %d runs", sr.GetSite().GetName(), night, plan.GetVersion(),
		enumName(plan.GetOrigin().String(), "PLAN_ORIGIN_"), len(plan.GetAssignments()))
	for _, c := range plan.GetClosures() {
		reason := c.GetReason()
		if reason == "" {
			reason = "closed"
		}
		spec.Closures = append(spec.Closures, chart.Span{Start: c.GetInterval().GetStart().AsTime(), End: c.GetInterval().GetEnd().AsTime(), Label: reason})
	}
	if f := plan.GetReplanFrom(); f != nil && plan.GetOrigin() != pb.PlanOrigin_PLAN_ORIGIN_MAKE_PLAN {
		spec.Marks = append(spec.Marks, chart.Span{Start: f.AsTime(), Label: "replanned from " + f.AsTime().In(site.Location).Format("15:04")})
	}
	return spec, nil
}

// runSummary names a curve in the legend: the target and its filters with
// the time spent in each, e.g. "LN 2207: Ha 1h20m, OIII 40m".
func runSummary(c chart.Curve) string {
	per := map[string]time.Duration{}
	var order []string
	for _, r := range c.Runs {
		if _, ok := per[r.Label]; !ok {
			order = append(order, r.Label)
		}
		per[r.Label] += r.End.Sub(r.Start)
	}
	sort.Strings(order)
	s := c.Name + ":"
	for i, f := range order {
		if i > 0 {
			s += ","
		}
		s += " " + f + " " + fmtDuration(per[f].Round(time.Minute))
	}
	return s
}

// skyChart draws one target over the night (local mean-solar noon to noon)
// that contains the instant at, with the instant marked.
func skyChart(path string, o *ephem.Observer, loc *time.Location, at time.Time, name string, t *constraints.Target) error {
	lonH := o.LonRad * ephem.Rad2Deg / 15
	day := at.Add(time.Duration(lonH*float64(time.Hour)) - 12*time.Hour).UTC()
	n := ephem.NightOf(o, day.Year(), day.Month(), day.Day())
	start, end := n.Start, n.End
	if s, ok := n.Get(ephem.Sunset); ok {
		start = s.Add(-time.Hour)
	}
	if r, ok := n.Get(ephem.Sunrise); ok && r.After(start) {
		end = r.Add(time.Hour)
	}
	site := constraints.NewSite(*o)
	site.Location = loc
	spec := chart.Spec{Site: site, Start: start, End: end, Step: 2 * time.Minute,
		Curves: []chart.Curve{{Name: name, Target: t}},
		Marks:  []chart.Span{{Start: at, Label: "--at " + at.In(loc).Format("15:04")}},
		Title: fmt.Sprintf("%s from %.4f°, %.4f°, night of %s (flat horizon)", name, o.LatRad*ephem.Rad2Deg,
			o.LonRad*ephem.Rad2Deg, day.Format("2006-01-02"))}
	return writeChart(spec, path)
}

// chartSky is `sky --chart`: the target given by --ra/--dec or --orbit.
func chartSky(path, tz string, o *ephem.Observer, at time.Time, star *ephem.Star, orbit ephem.Mover, ra, dec, orbitPath string) error {
	if star == nil && orbit == nil {
		return flagError("chart", "needs a target: --ra/--dec, --orbit, --body or --elements")
	}
	loc := time.FixedZone("LMT", int(math.Round(o.LonRad*ephem.Rad2Deg/15*3600)))
	if tz != "" {
		l, err := time.LoadLocation(tz)
		if err != nil {
			return flagError("tz", "unknown time zone %q", tz)
		}
		loc = l
	}
	t := &constraints.Target{Star: star, Orbit: orbit}
	name := "RA " + ra + "°, Dec " + dec + "°"
	if orbit != nil {
		name = strings.TrimSuffix(filepath.Base(orbitPath), filepath.Ext(orbitPath))
	}
	t.Name = name
	return skyChart(path, o, loc, at, name, t)
}

// writeChart draws the spec to path (chart.WriteFile), naming the --out flag
// when the file name is neither .png nor .svg.
func writeChart(spec chart.Spec, path string) error {
	if err := chart.WriteFile(spec, path); err != nil {
		if errors.Is(err, chart.ErrFormat) {
			return flagError("out", "want a .png or .svg file name, got %q", path)
		}
		return err
	}
	return nil
}

// chartDPI is the PNG resolution of every chart the client draws.
const chartDPI = chart.DPI

// savePlot draws p on a w x h canvas and writes it to path: SVG when the
// name ends in .svg, else PNG at chartDPI on white.
func savePlot(p *plot.Plot, w, h vg.Length, path string) error {
	var canvas vg.CanvasWriterTo
	if strings.ToLower(filepath.Ext(path)) == ".svg" {
		canvas = vgsvg.New(w, h)
	} else {
		c := vgimg.NewWith(vgimg.UseWH(w, h), vgimg.UseDPI(chartDPI), vgimg.UseBackgroundColor(color.White))
		canvas = vgimg.PngCanvas{Canvas: c}
	}
	p.Draw(draw.New(canvas))
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	if _, err := canvas.WriteTo(f); err != nil {
		f.Close()
		return err
	}
	return f.Close()
}
