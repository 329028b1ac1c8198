package main

// `nightloom comet magnitude|refit|history`: a comet's measured magnitudes
// and the refit of its magnitude law (ApparitionService).

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
	"google.golang.org/protobuf/types/known/timestamppb"

	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

func cometCommands() []command {
	return []command{
		{name: "magnitude", summary: "report a measured total magnitude of a comet", run: runCometMagnitude},
		{name: "refit", summary: "fit M1 and K1 to the comet's magnitudes; --apply makes the fit its law; --chart draws the light curve", run: runCometRefit},
		{name: "history", summary: "the comet's magnitudes and the fits made so far", run: runCometHistory},
	}
}

func runCometMagnitude(args []string, stdout, stderr io.Writer) error {
	r := newRemote("comet magnitude", stderr)
	target := r.fs.String("target", "", "id of the comet target; required")
	at := r.fs.String("at", "", "when it was measured, RFC 3339; required")
	mag := r.fs.Float64("mag", math.NaN(), "total magnitude; required")
	sigma := r.fs.Float64("sigma-mag", 0.3, "1-sigma uncertainty, mag")
	id := r.fs.String("id", "", "id of the observation (default: derived from target, time and magnitude, so a retry counts once)")
	note := r.fs.String("note", "", "free text: observer, instrument, method")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *target == "" {
		return flagError("target", "required: the comet's target id")
	}
	when, err := time.Parse(time.RFC3339Nano, *at)
	if err != nil {
		return flagError("at", "want an RFC 3339 instant, got %q", *at)
	}
	if math.IsNaN(*mag) || math.IsInf(*mag, 0) {
		return flagError("mag", "required: the measured magnitude")
	}
	if !(*sigma > 0) {
		return flagError("sigma-mag", "must be positive")
	}
	if *id == "" {
		*id = fmt.Sprintf("obs-%s-%d-%.2f", *target, when.Unix(), *mag)
		if len(*id) > 64 {
			*id = (*id)[:64]
		}
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := pb.NewApparitionServiceClient(a.cc).ReportMagnitudes(ctx, &pb.ReportMagnitudesRequest{TargetId: *target,
		Observations: []*pb.MagnitudeObservation{{Id: *id, Time: timestamppb.New(when), Magnitude: *mag, SigmaMag: *sigma, Note: *note}}})
	if err != nil {
		return a.callErr("ReportMagnitudes", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	if resp.GetAdded() == 0 {
		fmt.Fprintf(stdout, "observation %s was stored already\n", *id)
	} else {
		fmt.Fprintf(stdout, "stored observation %s\n", *id)
	}
	return nil
}

func runCometRefit(args []string, stdout, stderr io.Writer) error {
	r := newRemote("comet refit", stderr)
	target := r.fs.String("target", "", "id of the comet target; required")
	apply := r.fs.Bool("apply", false, "make the fitted law the target's law (plans then predict with it)")
	chart := r.fs.String("chart", "", "draw the light curve (observations, old law, fitted law against date) to this .png or .svg file")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *target == "" {
		return flagError("target", "required: the comet's target id")
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
	resp, err := pb.NewApparitionServiceClient(a.cc).RefitMagnitudeLaw(ctx, &pb.RefitMagnitudeLawRequest{TargetId: *target, Apply: *apply})
	if err != nil {
		return a.callErr("RefitMagnitudeLaw", err)
	}
	if *chart != "" {
		if err := writeLightCurve(*chart, resp.GetTarget().GetName(), resp.GetFit()); err != nil {
			return err
		}
		fmt.Fprintf(stderr, "wrote %s\n", *chart)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	return printFit(stdout, resp.GetTarget().GetName(), resp.GetFit())
}

func runCometHistory(args []string, stdout, stderr io.Writer) error {
	r := newRemote("comet history", stderr)
	target := r.fs.String("target", "", "id of the comet target; required")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *target == "" {
		return flagError("target", "required: the comet's target id")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := pb.NewApparitionServiceClient(a.cc).MagnitudeHistory(ctx, &pb.MagnitudeHistoryRequest{TargetId: *target})
	if err != nil {
		return a.callErr("MagnitudeHistory", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	tw := newTable(stdout)
	fmt.Fprintln(tw, "observation\ttime (UTC)\tmag\tsigma\tnote")
	for _, o := range resp.GetObservations() {
		fmt.Fprintf(tw, "%s\t%s\t%.2f\t%.2f\t%s\n", o.GetId(), o.GetTime().AsTime().UTC().Format("2006-01-02 15:04"), o.GetMagnitude(), o.GetSigmaMag(), o.GetNote())
	}
	fmt.Fprintln(tw, "\nfit\tmade (UTC)\tM1\tK1\tapplied")
	for _, f := range resp.GetFits() {
		k1 := fmt.Sprintf("%.2f ± %.2f", f.GetFitted().GetK1(), f.GetSigmaK1())
		if f.GetK1Fixed() {
			k1 = fmt.Sprintf("%.2f (fixed)", f.GetFitted().GetK1())
		}
		fmt.Fprintf(tw, "%s\t%s\t%.2f ± %.2f\t%s\t%v\n", f.GetId(), f.GetCreateTime().AsTime().UTC().Format("2006-01-02 15:04"),
			f.GetFitted().GetM1(), f.GetSigmaM1(), k1, f.GetApplied())
	}
	return tw.Flush()
}

func printFit(w io.Writer, name string, f *pb.MagnitudeFit) error {
	k1 := fmt.Sprintf("K1 %.2f ± %.2f", f.GetFitted().GetK1(), f.GetSigmaK1())
	if f.GetK1Fixed() {
		k1 = fmt.Sprintf("K1 %.2f held fixed (the observations do not span enough heliocentric distance)", f.GetFitted().GetK1())
	}
	fmt.Fprintf(w, "%s: M1 %.2f ± %.2f, %s; chi2 %.1f for %d degrees of freedom\n", name, f.GetFitted().GetM1(), f.GetSigmaM1(), k1,
		f.GetChi2(), f.GetDegreesOfFreedom())
	if p := f.GetPrior(); p != nil {
		fmt.Fprintf(w, "previous law: M1 %.2f, K1 %.2f\n", p.GetM1(), p.GetK1())
	}
	if f.GetApplied() {
		fmt.Fprintln(w, "applied: plans now predict with the fitted law")
	}
	tw := newTable(w)
	fmt.Fprintln(tw, "\nobservation\ttime (UTC)\tobserved\tsigma\tfitted\tresidual\tprevious law\tr AU\tdelta AU")
	for _, r := range f.GetResiduals() {
		prev := "-"
		if r.PriorMagnitude != nil {
			prev = fmt.Sprintf("%.2f", r.GetPriorMagnitude())
		}
		fmt.Fprintf(tw, "%s\t%s\t%.2f\t%.2f\t%.2f\t%+.2f\t%s\t%.3f\t%.3f\n", r.GetObservationId(), r.GetTime().AsTime().UTC().Format("2006-01-02 15:04"),
			r.GetObservedMagnitude(), r.GetSigmaMag(), r.GetFittedMagnitude(), r.GetObservedMagnitude()-r.GetFittedMagnitude(), prev,
			r.GetHeliocentricDistanceAu(), r.GetGeocentricDistanceAu())
	}
	return tw.Flush()
}

// writeLightCurve draws observations with their error bars, the previous
// law and the fitted law at the observations' instants against date
// (brighter up).
func writeLightCurve(path, name string, f *pb.MagnitudeFit) error {
	p := plot.New()
	p.Title.Text = fmt.Sprintf("%s: light curve", name)
	p.X.Label.Text = "date (UTC)"
	p.Y.Label.Text = "total magnitude"
	p.X.Tick.Marker = plot.TimeTicks{Format: "01-02"}
	var obs, fitted, prior plotter.XYs
	var errs plotter.YErrors
	for _, r := range f.GetResiduals() {
		x := float64(r.GetTime().AsTime().Unix())
		// Magnitudes are drawn negated so that brighter is up; the tick
		// labels below undo the sign.
		obs = append(obs, plotter.XY{X: x, Y: -r.GetObservedMagnitude()})
		errs = append(errs, struct{ Low, High float64 }{r.GetSigmaMag(), r.GetSigmaMag()})
		fitted = append(fitted, plotter.XY{X: x, Y: -r.GetFittedMagnitude()})
		if r.PriorMagnitude != nil {
			prior = append(prior, plotter.XY{X: x, Y: -r.GetPriorMagnitude()})
		}
	}
	if len(obs) == 0 {
		return fmt.Errorf("light curve: no observations")
	}
	sc, err := plotter.NewScatter(obs)
	if err != nil {
		return err
	}
	sc.GlyphStyle.Radius = vg.Points(2.5)
	p.Add(sc)
	eb, err := plotter.NewYErrorBars(struct {
		plotter.XYer
		plotter.YErrorer
	}{obs, errs})
	if err != nil {
		return err
	}
	p.Add(eb)
	p.Legend.Add("observed (1 sigma)", sc)
	for _, s := range []struct {
		xys   plotter.XYs
		label string
		c     color.RGBA
		dash  bool
	}{{prior, "previous law", color.RGBA{R: 0x88, G: 0x88, B: 0x88, A: 255}, true},
		{fitted, fmt.Sprintf("fitted: M1 %.2f, K1 %.2f", f.GetFitted().GetM1(), f.GetFitted().GetK1()), color.RGBA{R: 0xc0, G: 0x39, B: 0x2b, A: 255}, false}} {
		if len(s.xys) == 0 {
			continue
		}
		l, err := plotter.NewLine(s.xys)
		if err != nil {
			return err
		}
		l.Color, l.Width = s.c, vg.Points(1.5)
		if s.dash {
			l.Dashes = []vg.Length{vg.Points(4), vg.Points(3)}
		}
		p.Add(l)
		p.Legend.Add(s.label, l)
	}
	p.Y.Tick.Marker = negTicks{}
	p.Add(plotter.NewGrid())
	return savePlot(p, 9*vg.Inch, 5*vg.Inch, path)
}

// negTicks labels a negated magnitude axis with the magnitudes themselves.
type negTicks struct{}

func (negTicks) Ticks(min, max float64) []plot.Tick {
	ts := plot.DefaultTicks{}.Ticks(min, max)
	for i := range ts {
		if ts[i].Label != "" {
			ts[i].Label = fmt.Sprintf("%g", -ts[i].Value)
		}
	}
	return ts
}
