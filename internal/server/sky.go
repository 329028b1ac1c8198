package server

import (
	"context"
	"math"
	"time"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/ephem"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// skyService implements SkyService (sky.proto) directly on ephem and
// constraints. It stores nothing.
type skyService struct {
	nightloomv1.UnimplementedSkyServiceServer
	s *Server
}

// planningInterval is the part of the night of date d that MakePlan plans
// (plan.proto): sunset to the next sunrise; where the Sun does not rise,
// to the end of the noon-to-noon window; where it is already down at the
// window's start (no sunset), from the start. ok is false where the Sun
// does not set.
func (m *siteModel) planningInterval(d time.Time) (start, end time.Time, ok bool) {
	n := ephem.NightOf(&m.cons.Observer, d.Year(), d.Month(), d.Day())
	return ephem.PlanningSpan(&m.cons.Observer, &n)
}

// subjectTarget resolves a stored or inline target of a Sky request.
func (s *Server) subjectTarget(ctx context.Context, v *violations, id string, inline *nightloomv1.Target, path string) (*nightloomv1.Target, *constraints.Target, error) {
	if inline != nil {
		t := normalizeTarget(inline)
		ct := checkTarget(v, path, t)
		return t, ct, nil
	}
	pb, ct, err := s.loadTarget(ctx, id)
	return pb, ct, err
}

func (x *skyService) Ephemeris(ctx context.Context, req *nightloomv1.EphemerisRequest) (*nightloomv1.EphemerisResponse, error) {
	var v violations
	switch sub := req.GetSubject().(type) {
	case *nightloomv1.EphemerisRequest_TargetId:
		requiredID(&v, "target_id", sub.TargetId)
	case *nightloomv1.EphemerisRequest_Target:
		if sub.Target == nil {
			v.add("target", "is required")
		} else {
			checkTarget(&v, "target", normalizeTarget(sub.Target))
		}
	default:
		v.add("subject", "one of target_id or target is required")
	}
	requiredID(&v, "site_id", req.GetSiteId())
	start, end, okI := interval(&v, "interval", req.GetInterval(), time.Nanosecond, MaxEphemerisSpan)
	step := duration(&v, "step", req.GetStep(), MinEphemerisStep, MaxEphemerisStep, DefaultEphemerisStep, false)
	if okI && v.ok() {
		if rows := int64((end.Sub(start) + step - 1) / step); rows > MaxEphemerisRows {
			v.add("step", "%d rows, at most %d: use a longer step or a shorter interval", rows, MaxEphemerisRows)
		}
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	site, _, err := x.s.loadSite(ctx, req.GetSiteId())
	if err != nil {
		return nil, err
	}
	_, target, err := x.s.subjectTarget(ctx, &v, req.GetTargetId(), req.GetTarget(), "target")
	if err != nil {
		return nil, err
	}
	resp := &nightloomv1.EphemerisResponse{}
	for i, t := 0, start; t.Before(end); i, t = i+1, start.Add(time.Duration(i+1)*step) {
		if i%256 == 0 && ctx.Err() != nil {
			return nil, ctx.Err()
		}
		resp.Rows = append(resp.Rows, ephemerisRow(site, target, t))
	}
	return resp, nil
}

func ephemerisRow(site *siteModel, target *constraints.Target, t time.Time) *nightloomv1.EphemerisRow {
	o := constraints.Observe(site.cons, target, t)
	row := &nightloomv1.EphemerisRow{
		Time: timestamppb.New(t), Pointing: pointingOf(o), AboveHorizonProfile: o.AboveProfile,
		MoonSeparationDeg: o.MoonSepDeg, SolarElongationDeg: o.SunSepDeg, SunAltitudeDeg: o.SunAltDeg,
		Darkness: darknessLevel(o.SunAltDeg), MoonAltitudeDeg: o.MoonAltDeg, MoonIllumination: o.MoonIllum,
	}
	row.Constellation = pointingConstellation(row.Pointing)
	if o.AltDeg >= 0 {
		if !math.IsInf(o.Airmass, 0) {
			row.Airmass = proto.Float64(o.Airmass)
		}
		if !math.IsNaN(o.Sky) {
			row.SkyBrightnessVMagArcsec2 = proto.Float64(o.Sky)
		}
	}
	if o.Moving {
		os := &nightloomv1.OrbitState{HeliocentricDistanceAu: o.RAU, GeocentricDistanceAu: o.DeltaAU, PhaseAngleDeg: o.PhaseDeg,
			Rate: &nightloomv1.NonSiderealRate{RaCosDecArcsecPerMin: o.RateRA, DecArcsecPerMin: o.RateDec}}
		if !math.IsNaN(o.Magnitude) {
			os.Magnitude = proto.Float64(o.Magnitude)
			if !math.IsNaN(o.ObservedMagnitude) && o.AltDeg >= 0 {
				os.ObservedMagnitude = proto.Float64(o.ObservedMagnitude)
			}
		}
		row.Orbit = os
	}
	return row
}

func (x *skyService) Night(ctx context.Context, req *nightloomv1.NightRequest) (*nightloomv1.NightResponse, error) {
	var v violations
	requiredID(&v, "site_id", req.GetSiteId())
	d, _ := localDate(&v, "date", req.GetDate(), true)
	if err := v.err(); err != nil {
		return nil, err
	}
	site, _, err := x.s.loadSite(ctx, req.GetSiteId())
	if err != nil {
		return nil, err
	}
	o := &site.cons.Observer
	n := ephem.NightOf(o, d.Year(), d.Month(), d.Day())
	resp := &nightloomv1.NightResponse{Window: &nightloomv1.TimeInterval{Start: timestamppb.New(n.Start), End: timestamppb.New(n.End)}}
	set := func(k ephem.EventKind) *timestamppb.Timestamp {
		if t, ok := n.Get(k); ok {
			return timestamppb.New(t)
		}
		return nil
	}
	resp.Sunset, resp.Sunrise = set(ephem.Sunset), set(ephem.Sunrise)
	resp.CivilDusk, resp.CivilDawn = set(ephem.CivilDusk), set(ephem.CivilDawn)
	resp.NauticalDusk, resp.NauticalDawn = set(ephem.NauticalDusk), set(ephem.NauticalDawn)
	resp.AstronomicalDusk, resp.AstronomicalDawn = set(ephem.AstronomicalDusk), set(ephem.AstronomicalDawn)
	resp.Moonrise, resp.Moonset = set(ephem.Moonrise), set(ephem.Moonset)
	mid := ephem.Prepare(ephem.NewInstant(n.Start.Add(12 * time.Hour)))
	resp.MoonIllumination, _ = mid.MoonIllumination()
	if st, en, ok := ephem.PlanningSpan(o, &n); ok {
		resp.PlanningInterval = &nightloomv1.TimeInterval{Start: timestamppb.New(st), End: timestamppb.New(en)}
	}
	dark, moonless := ephem.DarkTimes(o, n.Start, n.End)
	resp.AstronomicalDark, resp.MoonlessDark = durationpb.New(dark), durationpb.New(moonless)
	return resp, nil
}

func (x *skyService) Visibility(ctx context.Context, req *nightloomv1.VisibilityRequest) (*nightloomv1.VisibilityResponse, error) {
	s := x.s
	var v violations
	var blockID string
	switch sub := req.GetSubject().(type) {
	case *nightloomv1.VisibilityRequest_BlockId:
		blockID = sub.BlockId
		requiredID(&v, "block_id", sub.BlockId)
		optionalID(&v, "site_id", req.GetSiteId())
		if req.GetConstraints() != nil {
			v.add("constraints", "is refused with a block (the block's own are used)")
		}
		if req.GetExposure() != nil {
			v.add("exposure", "is refused with a block (the block's own is used)")
		}
		if req.GetNonSiderealTracking() {
			v.add("non_sidereal_tracking", "is refused with a block (the block's own is used)")
		}
	case *nightloomv1.VisibilityRequest_TargetId:
		requiredID(&v, "target_id", sub.TargetId)
		requiredID(&v, "site_id", req.GetSiteId())
	case *nightloomv1.VisibilityRequest_Target:
		if sub.Target == nil {
			v.add("target", "is required")
		} else {
			checkTarget(&v, "target", normalizeTarget(sub.Target))
		}
		requiredID(&v, "site_id", req.GetSiteId())
	default:
		v.add("subject", "one of block_id, target_id or target is required")
	}
	if blockID == "" {
		checkConstraintSet(&v, "constraints", req.GetConstraints())
		duration(&v, "exposure", req.GetExposure(), 0, time.Hour, 0, false)
	}
	var (
		date, ivStart, ivEnd time.Time
		byNight              bool
	)
	switch span := req.GetSpan().(type) {
	case *nightloomv1.VisibilityRequest_Night:
		date, _ = localDate(&v, "night", span.Night, true)
		byNight = true
	case *nightloomv1.VisibilityRequest_Interval:
		ivStart, ivEnd, _ = interval(&v, "interval", span.Interval, MinPlanInterval, MaxPlanInterval)
	default:
		v.add("span", "one of night or interval is required")
	}
	step := duration(&v, "step", req.GetStep(), MinGridStep, MaxGridStep, DefaultGridStep, false)
	if err := v.err(); err != nil {
		return nil, err
	}

	// The subject: a block brings its site, target and request.
	var (
		siteID  = req.GetSiteId()
		block   *nightloomv1.Block
		tpb     *nightloomv1.Target
		target  *constraints.Target
		request constraints.Request
	)
	if blockID != "" {
		rec, err := s.db.GetBlock(ctx, blockID)
		if err != nil {
			return nil, err
		}
		if siteID != "" && siteID != rec.SiteID {
			return nil, fieldError("site_id", "block %s is queued at site %s, not %s", blockID, rec.SiteID, siteID)
		}
		siteID = rec.SiteID
		if block, err = blockProto(rec, nil, s.now()); err != nil {
			return nil, err
		}
	}
	site, _, err := s.loadSite(ctx, siteID)
	if err != nil {
		return nil, err
	}
	if block != nil {
		if tpb, target, err = s.loadTarget(ctx, block.GetTargetId()); err != nil {
			return nil, err
		}
		set := constraintSet(block.GetConstraints(), hasMagLaw(tpb))
		if !byNight {
			dateLimits(set, block)
		}
		request = constraints.Request{Set: set, Exposure: block.GetExposure().AsDuration(), NonSidereal: block.GetNonSiderealTracking()}
	} else {
		if tpb, target, err = s.subjectTarget(ctx, &v, req.GetTargetId(), req.GetTarget(), "target"); err != nil {
			return nil, err
		}
		request = constraints.Request{Set: constraintSet(req.GetConstraints(), hasMagLaw(tpb)),
			Exposure: req.GetExposure().AsDuration(), NonSidereal: req.GetNonSiderealTracking()}
	}

	resp := &nightloomv1.VisibilityResponse{Step: durationpb.New(step)}
	if byNight {
		st, en, ok := site.planningInterval(date)
		if !ok {
			w0, _ := site.nightWindow(date)
			resp.Interval = &nightloomv1.TimeInterval{Start: timestamppb.New(w0), End: timestamppb.New(w0)}
			resp.VisibleTime = durationpb.New(0)
			return resp, nil
		}
		ivStart, ivEnd = st, en
	}
	resp.Interval = &nightloomv1.TimeInterval{Start: timestamppb.New(ivStart), End: timestamppb.New(ivEnd)}
	g, err := constraints.NewGrid(site.cons, ivStart, ivEnd, step, constraints.Options{})
	if err != nil {
		return nil, fieldError("step", "%v", err)
	}
	tr, err := g.Track(target)
	if err != nil {
		return nil, err
	}
	vis := g.Evaluate(tr, request)
	if byNight && block != nil && !nightAllowed(block, date) {
		for i := range vis.Reason {
			vis.Reason[i], vis.Quality[i] = constraints.ReasonDate, 0
		}
		vis.Windows = nil
	}
	// Windows are the continuous intervals the planner uses (edges to
	// constraints.EdgeResolution, every instant certified), not the grid's
	// samples, so that what Visibility shows is what a plan may use.
	var ivs []constraints.Interval
	if len(vis.Windows) > 0 {
		ivs = g.Intervals(tr, request, vis)
	}
	var shortest time.Duration
	if block != nil {
		shortest = shortestRun(site, block)
	}
	var visible time.Duration
	for _, iv := range ivs {
		t0, t1 := maxTime(iv.Start, ivStart), minTime(iv.End, ivEnd)
		if !t1.After(t0) {
			continue
		}
		win := &nightloomv1.VisibilityWindow{Interval: &nightloomv1.TimeInterval{Start: timestamppb.New(t0), End: timestamppb.New(t1)},
			MinAirmass: math.Inf(1), MaxAltitudeDeg: math.Inf(-1), FitsShortestRun: true}
		// Statistics over the grid's observable samples inside the window
		// (the nearest one for a window shorter than a step).
		var samples []int
		for i := g.Index(t0); i <= g.Index(t1.Add(-time.Nanosecond)); i++ {
			if t := g.Time(i); !t.Before(t0) && t.Before(t1) && vis.Reason[i] == constraints.OK {
				samples = append(samples, i)
			}
		}
		if len(samples) == 0 {
			samples = []int{g.Index(t0.Add(t1.Sub(t0) / 2))}
		}
		sum, n := 0.0, 0
		for _, i := range samples {
			q := float64(vis.Quality[i])
			sum += q
			n++
			win.BestQuality = math.Max(win.BestQuality, q)
			win.MaxAltitudeDeg = math.Max(win.MaxAltitudeDeg, float64(tr.Alt[i])*ephem.Rad2Deg)
			win.MinAirmass = math.Min(win.MinAirmass, float64(tr.Airmass[i]))
		}
		win.MeanQuality = sum / float64(max(n, 1))
		if block != nil {
			win.FitsShortestRun = t1.Sub(t0) >= shortest
		}
		visible += t1.Sub(t0)
		resp.Windows = append(resp.Windows, win)
	}
	resp.Blocked = blockedSpans(g, vis, resp.Windows, ivStart, ivEnd, func(t time.Time) constraints.Reason {
		return g.CheckAt(target, request, t)
	})
	resp.VisibleTime = durationpb.New(visible)
	return resp, nil
}

// blockedSpans tiles the time of [from, to) outside the windows with the
// reasons it is not observable: the grid's failing spans clipped to the
// gaps, and, where the grid's samples said observable but the continuous
// edges did not, the reason checked at that piece's middle. Neighbours
// with one reason merge.
func blockedSpans(g *constraints.Grid, vis *constraints.Visibility, wins []*nightloomv1.VisibilityWindow, from, to time.Time,
	check func(time.Time) constraints.Reason) []*nightloomv1.BlockedSpan {
	type piece struct {
		a, b time.Time
		r    constraints.Reason
	}
	var gaps []piece
	at := from
	for _, w := range wins {
		if s := w.GetInterval().GetStart().AsTime(); s.After(at) {
			gaps = append(gaps, piece{a: at, b: s})
		}
		at = w.GetInterval().GetEnd().AsTime()
	}
	if to.After(at) {
		gaps = append(gaps, piece{a: at, b: to})
	}
	spans := vis.Spans(g)
	var out []piece
	add := func(p piece) {
		if !p.b.After(p.a) {
			return
		}
		if n := len(out); n > 0 && out[n-1].r == p.r && out[n-1].b.Equal(p.a) {
			out[n-1].b = p.b
			return
		}
		out = append(out, p)
	}
	for _, gp := range gaps {
		for _, sp := range spans {
			a, b := maxTime(gp.a, sp.From), minTime(gp.b, sp.To)
			if !b.After(a) {
				continue
			}
			r := sp.Reason
			if r == constraints.OK {
				r = failing(check, a, b, vis)
			}
			add(piece{a: a, b: b, r: r})
		}
		// The grid's last step may end before to.
		if last := g.End(); gp.b.After(last) {
			a := maxTime(gp.a, last)
			add(piece{a: a, b: gp.b, r: failing(check, a, gp.b, vis)})
		}
	}
	res := make([]*nightloomv1.BlockedSpan, 0, len(out))
	for _, p := range out {
		res = append(res, &nightloomv1.BlockedSpan{Interval: &nightloomv1.TimeInterval{Start: timestamppb.New(p.a), End: timestamppb.New(p.b)},
			Reason: reasonProto(p.r)})
	}
	return res
}

// failing is the reason a piece [a, b) outside the continuous windows is
// not observable although the grid's samples around it were: checked at
// its middle, then just inside either end; if every check passes (the
// failure lies between them) the night's dominant reason.
func failing(check func(time.Time) constraints.Reason, a, b time.Time, vis *constraints.Visibility) constraints.Reason {
	const inset = 100 * time.Millisecond
	for _, t := range []time.Time{a.Add(b.Sub(a) / 2), a.Add(min(inset, b.Sub(a)/4)), b.Add(-min(inset, b.Sub(a)/4))} {
		if r := check(t); r != constraints.OK {
			return r
		}
	}
	return vis.Dominant()
}

func maxTime(a, b time.Time) time.Time {
	if a.After(b) {
		return a
	}
	return b
}

func minTime(a, b time.Time) time.Time {
	if a.Before(b) {
		return a
	}
	return b
}
