package main

// `nightloom ephemeris`, `nightloom visibility` and `nightloom events`: the
// daemon's SkyService.

import (
	"fmt"
	"io"
	"time"

	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

func runEphemeris(args []string, stdout, stderr io.Writer) error {
	r := newRemote("ephemeris", stderr)
	file := r.fs.String("file", "", "EphemerisRequest as protobuf JSON (a stored target id or an inline target); flags override")
	site := r.fs.String("site", "", "id of the site; required unless the file gives it")
	target := r.fs.String("target", "", "id of a stored target")
	from := r.fs.String("from", "", "first instant, RFC 3339")
	to := r.fs.String("to", "", "end of the table, RFC 3339 (excluded)")
	step := r.fs.Duration("step", 0, "time between rows, e.g. 10m (0: server default, 1h)")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	req := &pb.EphemerisRequest{}
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
		req.Subject = &pb.EphemerisRequest_TargetId{TargetId: *target}
	}
	if req.Subject == nil {
		return flagError("target", "required: a stored target's id (or an inline target in --file)")
	}
	if *from != "" || *to != "" {
		if *from == "" || *to == "" {
			return flagError("from", "--from and --to go together")
		}
		s, err := parseInstant("from", *from)
		if err != nil {
			return err
		}
		e, err := parseInstant("to", *to)
		if err != nil {
			return err
		}
		req.Interval = &pb.TimeInterval{Start: s, End: e}
	}
	if req.Interval == nil {
		return flagError("from", "required: --from and --to")
	}
	if *step < 0 {
		return flagError("step", "must be positive")
	}
	if *step > 0 {
		req.Step = durationpb.New(*step)
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.sky.Ephemeris(ctx, req)
	if err != nil {
		return a.callErr("Ephemeris", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	sr, err := a.sites.GetSite(ctx, &pb.GetSiteRequest{SiteId: req.GetSiteId()})
	if err != nil {
		return a.callErr("GetSite", err)
	}
	c := newClock(sr.GetSite().GetTimeZone())
	tw := newTable(stdout)
	fmt.Fprintf(tw, "local (%s)\tUTC\tRA (ICRS)\tDec (ICRS)\tcon\talt\taz\tairmass\tHA\tmoon sep\tsun elong\tsky\tsun alt\tsky state\tr AU\tdelta AU\tmag\trate \"/min\n", c.loc)
	for _, row := range resp.GetRows() {
		p := row.GetPointing()
		am, sky := "-", "-"
		if row.Airmass != nil {
			am = fmt.Sprintf("%.2f", row.GetAirmass())
		}
		if row.SkyBrightnessVMagArcsec2 != nil {
			sky = fmt.Sprintf("%.2f", row.GetSkyBrightnessVMagArcsec2())
		}
		alt := fmt.Sprintf("%+.2f", p.GetAltitudeDeg())
		if !row.GetAboveHorizonProfile() {
			alt += "*"
		}
		r, d, m, rate := "", "", "", ""
		if o := row.GetOrbit(); o != nil {
			r, d = fmt.Sprintf("%.4f", o.GetHeliocentricDistanceAu()), fmt.Sprintf("%.4f", o.GetGeocentricDistanceAu())
			if o.Magnitude != nil {
				m = fmt.Sprintf("%.2f", o.GetMagnitude())
			}
			rate = fmt.Sprintf("%+.2f %+.2f", o.GetRate().GetRaCosDecArcsecPerMin(), o.GetRate().GetDecArcsecPerMin())
		}
		t := row.GetTime().AsTime()
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%.2f\t%s\t%+.2f\t%.1f\t%.1f\t%s\t%+.1f\t%s\t%s\t%s\t%s\t%s\n",
			t.In(c.loc).Format("2006-01-02 15:04"), t.UTC().Format("15:04"), hms(p.GetRaIcrsDeg()), dms(p.GetDecIcrsDeg()),
			row.GetConstellation(), alt, p.GetAzimuthDeg(), am, p.GetHourAngleDeg(), row.GetMoonSeparationDeg(), row.GetSolarElongationDeg(), sky,
			row.GetSunAltitudeDeg(), enumName(row.GetDarkness().String(), "DARKNESS_LEVEL_"), r, d, m, rate)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	fmt.Fprintln(stdout, "angles in deg; * marks rows behind the local horizon profile; sky in V mag/arcsec2; con: IAU constellation")
	return nil
}

func runVisibility(args []string, stdout, stderr io.Writer) error {
	r := newRemote("visibility", stderr)
	file := r.fs.String("file", "", "VisibilityRequest as protobuf JSON (e.g. a target with a constraint set); flags override")
	site := r.fs.String("site", "", "id of the site (required with a target)")
	block := r.fs.String("block", "", "id of a block")
	target := r.fs.String("target", "", "id of a stored target (no constraints but the site's own)")
	night := r.fs.String("night", "", "the night of YYYY-MM-DD")
	from := r.fs.String("from", "", "start of an explicit interval, RFC 3339")
	to := r.fs.String("to", "", "end of an explicit interval, RFC 3339")
	step := r.fs.Duration("step", 0, "grid step (0: server default, 60s)")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	req := &pb.VisibilityRequest{}
	if *file != "" {
		if err := readRequest(*file, req); err != nil {
			return err
		}
	}
	if *site != "" {
		req.SiteId = *site
	}
	switch {
	case *block != "" && *target != "":
		return flagError("block", "give either --block or --target, not both")
	case *block != "":
		req.Subject = &pb.VisibilityRequest_BlockId{BlockId: *block}
	case *target != "":
		req.Subject = &pb.VisibilityRequest_TargetId{TargetId: *target}
	}
	if req.Subject == nil {
		return flagError("block", "required: --block or --target (or a subject in --file)")
	}
	if _, isBlock := req.Subject.(*pb.VisibilityRequest_BlockId); !isBlock && req.GetSiteId() == "" {
		return flagError("site", "required with a target")
	}
	switch {
	case *night != "" && (*from != "" || *to != ""):
		return flagError("night", "give either --night or --from/--to, not both")
	case *night != "":
		d, err := parseDate("night", *night)
		if err != nil {
			return err
		}
		req.Span = &pb.VisibilityRequest_Night{Night: d}
	case *from != "" || *to != "":
		if *from == "" || *to == "" {
			return flagError("from", "--from and --to go together")
		}
		s, err := parseInstant("from", *from)
		if err != nil {
			return err
		}
		e, err := parseInstant("to", *to)
		if err != nil {
			return err
		}
		req.Span = &pb.VisibilityRequest_Interval{Interval: &pb.TimeInterval{Start: s, End: e}}
	}
	if req.Span == nil {
		return flagError("night", "required: --night or --from/--to")
	}
	if *step < 0 {
		return flagError("step", "must be positive")
	}
	if *step > 0 {
		req.Step = durationpb.New(*step)
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.sky.Visibility(ctx, req)
	if err != nil {
		return a.callErr("Visibility", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	siteID := req.GetSiteId()
	if siteID == "" {
		br, err := a.queue.GetBlock(ctx, &pb.GetBlockRequest{BlockId: req.GetBlockId()})
		if err != nil {
			return a.callErr("GetBlock", err)
		}
		siteID = br.GetBlock().GetSiteId()
	}
	sr, err := a.sites.GetSite(ctx, &pb.GetSiteRequest{SiteId: siteID})
	if err != nil {
		return a.callErr("GetSite", err)
	}
	c := newClock(sr.GetSite().GetTimeZone())
	fmt.Fprintf(stdout, "evaluated %s, step %s; visible %s\n\n", c.interval(resp.GetInterval()), dur(resp.GetStep()),
		dur(resp.GetVisibleTime()))
	// Windows and blocked spans interleave in time; print them as one
	// chronological table.
	type row struct {
		start *timestamppb.Timestamp
		line  string
	}
	var rows []row
	for _, wdw := range resp.GetWindows() {
		fits := ""
		if !wdw.GetFitsShortestRun() {
			fits = ", too short for the shortest run"
		}
		rows = append(rows, row{wdw.GetInterval().GetStart(), fmt.Sprintf("%s\t%s\t%s-%s\tobservable\tmax alt %.1f deg, min airmass %.2f, quality best %.3g mean %.3g%s",
			c.hm(wdw.GetInterval().GetStart()), c.hm(wdw.GetInterval().GetEnd()), c.hmUTC(wdw.GetInterval().GetStart()),
			c.hmUTC(wdw.GetInterval().GetEnd()), wdw.GetMaxAltitudeDeg(), wdw.GetMinAirmass(), wdw.GetBestQuality(),
			wdw.GetMeanQuality(), fits)})
	}
	for _, b := range resp.GetBlocked() {
		rows = append(rows, row{b.GetInterval().GetStart(), fmt.Sprintf("%s\t%s\t%s-%s\tblocked\t%s",
			c.hm(b.GetInterval().GetStart()), c.hm(b.GetInterval().GetEnd()), c.hmUTC(b.GetInterval().GetStart()),
			c.hmUTC(b.GetInterval().GetEnd()), enumName(b.GetReason().String(), "REASON_"))})
	}
	for i := 1; i < len(rows); i++ { // insertion sort: the lists are short
		for j := i; j > 0 && rows[j].start.AsTime().Before(rows[j-1].start.AsTime()); j-- {
			rows[j], rows[j-1] = rows[j-1], rows[j]
		}
	}
	tw := newTable(stdout)
	fmt.Fprintf(tw, "from\tto\tUTC\tstate\tdetail\n")
	for _, r := range rows {
		fmt.Fprintln(tw, r.line)
	}
	return tw.Flush()
}

func runEvents(args []string, stdout, stderr io.Writer) error {
	r := newRemote("events", stderr)
	site := r.fs.String("site", "", "id of the site; required")
	date := r.fs.String("date", "", "the night of YYYY-MM-DD; required")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *site == "" {
		return flagError("site", "required: the site's id")
	}
	if *date == "" {
		return flagError("date", "required, as YYYY-MM-DD")
	}
	d, err := parseDate("date", *date)
	if err != nil {
		return err
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.sky.Night(ctx, &pb.NightRequest{SiteId: *site, Date: d})
	if err != nil {
		return a.callErr("Night", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	sr, err := a.sites.GetSite(ctx, &pb.GetSiteRequest{SiteId: *site})
	if err != nil {
		return a.callErr("GetSite", err)
	}
	c := newClock(sr.GetSite().GetTimeZone())
	ev := []struct {
		name string
		t    *timestamppb.Timestamp
	}{{"sunset", resp.GetSunset()}, {"civil dusk", resp.GetCivilDusk()}, {"nautical dusk", resp.GetNauticalDusk()},
		{"astronomical dusk", resp.GetAstronomicalDusk()}, {"astronomical dawn", resp.GetAstronomicalDawn()},
		{"nautical dawn", resp.GetNauticalDawn()}, {"civil dawn", resp.GetCivilDawn()}, {"sunrise", resp.GetSunrise()},
		{"moonrise", resp.GetMoonrise()}, {"moonset", resp.GetMoonset()}}
	var evs []nightEvent
	for _, e := range ev {
		evs = append(evs, nightEvent{name: e.name, t: e.t.AsTime(), ok: e.t != nil})
	}
	dd, _ := time.Parse("2006-01-02", *date)
	if err := printEvents(stdout, c.loc, evs, localMidnight(dd.Year(), dd.Month(), dd.Day(), c.loc)); err != nil {
		return err
	}
	fmt.Fprintf(stdout, "astronomical darkness %s, of it without the Moon %s\n",
		dur(resp.GetAstronomicalDark()), dur(resp.GetMoonlessDark()))
	if pi := resp.GetPlanningInterval(); pi != nil {
		fmt.Fprintf(stdout, "a plan for this night covers %s\n", c.interval(pi))
	}
	return nil
}
