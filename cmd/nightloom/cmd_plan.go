package main

// `nightloom plan ...`: make, show, list, replan, next, watch and chart.

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"os/signal"
	"strings"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/protobuf/types/known/durationpb"

	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

func planCommands() []command {
	return []command{
		{name: "make", summary: "plan a site's open blocks over one or more nights", run: runPlanMake},
		{name: "show", summary: "show one plan: its assignments and unplaced blocks", run: runPlanShow},
		{name: "list", summary: "list a site's plan versions, newest first", run: runPlanList},
		{name: "replan", summary: "plan the rest of a plan again from an instant, with closures", run: runPlanReplan},
		{name: "next", summary: "the run the telescope should start next", run: runPlanNext},
		{name: "watch", summary: "print every new plan version of a site as it is stored", run: runPlanWatch},
		{name: "chart", summary: "draw a plan's night as a PNG or SVG chart", run: runPlanChart},
		{name: "export", summary: "a plan as CSV (one row per run) or iCalendar (one event per run)", run: runPlanExport},
	}
}

// planContext is what a plan table needs besides the plan: the site (for
// its time zone) and the blocks and target names (for unplaced blocks).
type planContext struct {
	site   *pb.Site
	clock  clock
	blocks map[string]*pb.Block
	names  map[string]string
}

func (a *api) loadPlanContext(siteID string) (*planContext, error) {
	ctx, cancel := a.ctx()
	defer cancel()
	sr, err := a.sites.GetSite(ctx, &pb.GetSiteRequest{SiteId: siteID})
	if err != nil {
		return nil, a.callErr("GetSite", err)
	}
	blocks, err := a.allBlocks(&pb.ListBlocksRequest{SiteId: siteID})
	if err != nil {
		return nil, err
	}
	names, err := a.targetNames()
	if err != nil {
		return nil, err
	}
	pc := &planContext{site: sr.GetSite(), clock: newClock(sr.GetSite().GetTimeZone()),
		blocks: make(map[string]*pb.Block, len(blocks)), names: names}
	for _, b := range blocks {
		pc.blocks[b.GetId()] = b
	}
	return pc, nil
}

func runPlanMake(args []string, stdout, stderr io.Writer) error {
	r := newRemote("plan make", stderr)
	file := r.fs.String("file", "", "MakePlanRequest as protobuf JSON; flags given as well override its fields")
	site := r.fs.String("site", "", "id of the site; required unless the file gives it")
	night := r.fs.String("night", "", "first night to plan, YYYY-MM-DD (the night that begins on that evening)")
	from := r.fs.String("from", "", "start of an explicit interval, RFC 3339 (instead of --night)")
	to := r.fs.String("to", "", "end of an explicit interval, RFC 3339")
	nights := r.fs.Int("nights", 0, "consecutive nights to plan from --night, 1..30 (0: 1)")
	lookahead := r.fs.Int("lookahead-nights", -1, "nights after the planned ones over which chances are estimated (-1: server default, 0: off)")
	step := r.fs.Duration("step", 0, "constraint grid step, e.g. 60s (0: server default)")
	budget := r.fs.Duration("budget", 0, "solver time budget for the whole call, e.g. 2s (0: server default)")
	seed := r.fs.Int64("seed", 0, "seed of the solver's random choices")
	network := r.fs.String("network", "", "plan every member site of this network (id or name) jointly instead of one site")
	chartDir := r.fs.String("chart-dir", "", "with --network: write one chart per member site and night into this folder")
	var closures multiFlag
	r.fs.Var(&closures, "closure", "known closure START/END[/REASON] or START/+DURATION[/REASON] (repeatable); with --network SITE=START/END[/REASON]")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *network != "" {
		if *site != "" || *file != "" || *from != "" || *to != "" {
			return flagError("network", "plans a network's nights: give --night, not --site, --file or --from/--to")
		}
		return runPlanMakeNetwork(r, *network, *night, *nights, *step, *budget, *seed, closures, *chartDir, stdout, stderr)
	}
	if *chartDir != "" {
		return flagError("chart-dir", "only with --network (for one site use `plan chart`)")
	}
	req := &pb.MakePlanRequest{}
	if *file != "" {
		if err := readRequest(*file, req); err != nil {
			return err
		}
	}
	if err := fillMakePlan(req, *site, *night, *from, *to, *nights, *lookahead, *step, *budget, *seed, closures, r.fs); err != nil {
		return err
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	n := max(req.GetNights(), 1)
	p := startProgress(stderr, fmt.Sprintf("planning %d night(s)", n))
	ctx, cancel := a.ctx()
	resp, err := a.plans.MakePlan(ctx, req)
	cancel()
	p.Stop()
	if err != nil {
		return a.callErr("MakePlan", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	pc, err := a.loadPlanContext(req.GetSiteId())
	if err != nil {
		return err
	}
	for i, pl := range resp.GetPlans() {
		if i > 0 {
			fmt.Fprintln(stdout)
		}
		if err := printPlan(stdout, pl, pc, nil); err != nil {
			return err
		}
	}
	return nil
}

// fillMakePlan applies the flags of `plan make` to a request (flags win
// over the file). Only flags that were set count.
func fillMakePlan(req *pb.MakePlanRequest, site, night, from, to string, nights, lookahead int,
	step, budget time.Duration, seed int64, closures []string, fs *flag.FlagSet) error {
	set := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	if site != "" {
		req.SiteId = site
	}
	if req.GetSiteId() == "" {
		return flagError("site", "required: the site's id")
	}
	switch {
	case night != "" && (from != "" || to != ""):
		return flagError("night", "give either --night or --from/--to, not both")
	case night != "":
		d, err := parseDate("night", night)
		if err != nil {
			return err
		}
		req.Span = &pb.MakePlanRequest_Night{Night: d}
	case from != "" || to != "":
		if from == "" || to == "" {
			return flagError("from", "--from and --to go together")
		}
		s, err := parseInstant("from", from)
		if err != nil {
			return err
		}
		e, err := parseInstant("to", to)
		if err != nil {
			return err
		}
		req.Span = &pb.MakePlanRequest_Interval{Interval: &pb.TimeInterval{Start: s, End: e}}
	}
	if req.Span == nil {
		return flagError("night", "required: the night to plan, YYYY-MM-DD (or --from/--to)")
	}
	if set["nights"] {
		if nights < 0 || nights > 30 {
			return flagError("nights", "must be within 0..30, got %d", nights)
		}
		req.Nights = int32(nights)
	}
	if set["lookahead-nights"] && lookahead >= 0 {
		if lookahead > 60 {
			return flagError("lookahead-nights", "must be within 0..60, got %d", lookahead)
		}
		v := int32(lookahead)
		req.LookaheadNights = &v
	}
	if set["step"] {
		if step <= 0 {
			return flagError("step", "must be positive, got %v", step)
		}
		req.GridStep = durationpb.New(step)
	}
	if set["budget"] {
		if budget < 0 {
			return flagError("budget", "must be >= 0, got %v", budget)
		}
		req.TimeBudget = durationpb.New(budget)
	}
	if set["seed"] {
		req.Seed = seed
	}
	for _, c := range closures {
		cl, err := parseClosure("closure", c)
		if err != nil {
			return err
		}
		req.Closures = append(req.Closures, cl)
	}
	return nil
}

func runPlanShow(args []string, stdout, stderr io.Writer) error {
	r := newRemote("plan show", stderr)
	id := r.fs.String("plan", "", "id of the plan; required")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *id == "" {
		return flagError("plan", "required: the plan's id")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.plans.GetPlan(ctx, &pb.GetPlanRequest{PlanId: *id})
	if err != nil {
		return a.callErr("GetPlan", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	pc, err := a.loadPlanContext(resp.GetPlan().GetSiteId())
	if err != nil {
		return err
	}
	return printPlan(stdout, resp.GetPlan(), pc, nil)
}

func runPlanList(args []string, stdout, stderr io.Writer) error {
	r := newRemote("plan list", stderr)
	site := r.fs.String("site", "", "id of the site; required")
	night := r.fs.String("night", "", "only plans of this night, YYYY-MM-DD")
	pageSize := r.fs.Int("page-size", 0, "plans per call (0: the server's default); every page is fetched")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *site == "" {
		return flagError("site", "required: the site's id")
	}
	req := &pb.ListPlansRequest{SiteId: *site, PageSize: int32(*pageSize)}
	if *night != "" {
		d, err := parseDate("night", *night)
		if err != nil {
			return err
		}
		req.Night = d
	}
	if *pageSize < 0 {
		return flagError("page-size", "must be >= 0")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	plans, err := allPages(a, "ListPlans", func(ctx context.Context, token string) ([]*pb.Plan, string, error) {
		req.PageToken = token
		resp, err := a.plans.ListPlans(ctx, req)
		return resp.GetPlans(), resp.GetNextPageToken(), err
	})
	if err != nil {
		return err
	}
	if r.conn.json {
		return writeJSON(stdout, &pb.ListPlansResponse{Plans: plans})
	}
	ctx, cancel := a.ctx()
	defer cancel()
	sr, err := a.sites.GetSite(ctx, &pb.GetSiteRequest{SiteId: *site})
	if err != nil {
		return a.callErr("GetSite", err)
	}
	c := newClock(sr.GetSite().GetTimeZone())
	tw := newTable(stdout)
	fmt.Fprintf(tw, "version\tid\tnight\torigin\tinterval (%s)\tassignments\tunplaced\tcreated\n", c.loc)
	for _, p := range plans {
		iv := "-"
		if p.GetInterval() != nil {
			iv = p.GetInterval().GetStart().AsTime().In(c.loc).Format("01-02 15:04") + " to " +
				p.GetInterval().GetEnd().AsTime().In(c.loc).Format("01-02 15:04")
		}
		fmt.Fprintf(tw, "%d\t%s\t%s\t%s\t%s\t%d\t%d\t%s\n", p.GetVersion(), p.GetId(), dateString(p.GetNight()),
			enumName(p.GetOrigin().String(), "PLAN_ORIGIN_"), iv, p.GetAssignmentCount(), p.GetUnplacedCount(),
			c.full(p.GetCreateTime()))
	}
	if len(plans) == 0 {
		fmt.Fprintln(tw, "(no plans)")
	}
	return tw.Flush()
}

func runPlanReplan(args []string, stdout, stderr io.Writer) error {
	r := newRemote("plan replan", stderr)
	file := r.fs.String("file", "", "ReplanRequest as protobuf JSON; flags given as well override its fields")
	site := r.fs.String("site", "", "id of the site; required unless the file gives it")
	plan := r.fs.String("plan", "", "id of the plan to replan (default: the site's latest plan containing --from)")
	from := r.fs.String("from", "", "instant to plan again from, RFC 3339 (default: the server's clock)")
	budget := r.fs.Duration("budget", 0, "solver time budget, e.g. 1s (0: server default)")
	seed := r.fs.Int64("seed", 0, "seed of the solver's random choices")
	all := r.fs.Bool("all", false, "print the whole plan, not only the assignments after --from")
	var closures multiFlag
	r.fs.Var(&closures, "closure", "closure to add, START/END[/REASON] or START/+DURATION[/REASON] (repeatable)")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	req := &pb.ReplanRequest{}
	if *file != "" {
		if err := readRequest(*file, req); err != nil {
			return err
		}
	}
	set := map[string]bool{}
	r.fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	if *site != "" {
		req.SiteId = *site
	}
	if req.GetSiteId() == "" {
		return flagError("site", "required: the site's id")
	}
	if *plan != "" {
		req.PlanId = *plan
	}
	if *from != "" {
		t, err := parseInstant("from", *from)
		if err != nil {
			return err
		}
		req.From = t
	}
	if set["budget"] {
		if *budget < 0 {
			return flagError("budget", "must be >= 0")
		}
		req.TimeBudget = durationpb.New(*budget)
	}
	if set["seed"] {
		req.Seed = *seed
	}
	for _, c := range closures {
		cl, err := parseClosure("closure", c)
		if err != nil {
			return err
		}
		req.Closures = append(req.Closures, cl)
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	p := startProgress(stderr, "replanning")
	ctx, cancel := a.ctx()
	resp, err := a.plans.Replan(ctx, req)
	cancel()
	p.Stop()
	if err != nil {
		return a.callErr("Replan", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	pc, err := a.loadPlanContext(req.GetSiteId())
	if err != nil {
		return err
	}
	fmt.Fprintf(stdout, "replanned from %s: of the old plan's assignments after that, %d kept unchanged and %d changed\n",
		pc.clock.full(resp.GetPlan().GetReplanFrom()), resp.GetAssignmentsKept(), resp.GetAssignmentsChanged())
	if err := printRunChanges(stdout, pc.clock, resp); err != nil {
		return err
	}
	fmt.Fprintln(stdout)
	var after *time.Time
	if !*all && resp.GetPlan().GetReplanFrom() != nil {
		t := resp.GetPlan().GetReplanFrom().AsTime()
		after = &t
	}
	return printPlan(stdout, resp.GetPlan(), pc, after)
}

func runPlanNext(args []string, stdout, stderr io.Writer) error {
	r := newRemote("plan next", stderr)
	site := r.fs.String("site", "", "id of the site; required")
	now := r.fs.String("now", "", "the current instant, RFC 3339 (default: the server's clock)")
	filter := r.fs.String("filter", "", "filter in the beam now (default: as the plan assumed)")
	alt := r.fs.Float64("alt", 0, "telescope altitude now, deg (with --az)")
	az := r.fs.Float64("az", -1, "telescope azimuth now, deg from north through east (with --alt)")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *site == "" {
		return flagError("site", "required: the site's id")
	}
	req := &pb.NextAssignmentRequest{SiteId: *site}
	if *now != "" {
		t, err := parseInstant("now", *now)
		if err != nil {
			return err
		}
		req.Now = t
	}
	set := map[string]bool{}
	r.fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	if set["alt"] != set["az"] {
		return flagError("az", "--alt and --az go together")
	}
	if *filter != "" || set["alt"] {
		req.State = &pb.TelescopeState{Filter: *filter}
		if set["alt"] {
			if *alt < -90 || *alt > 90 {
				return flagError("alt", "must be within -90..90")
			}
			if *az < 0 || *az >= 360 {
				return flagError("az", "must be within [0, 360)")
			}
			req.State.Position = &pb.HorizontalPosition{AltitudeDeg: *alt, AzimuthDeg: *az}
		}
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.plans.NextAssignment(ctx, req)
	if err != nil {
		return a.callErr("NextAssignment", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	if resp.GetPlanId() == "" {
		fmt.Fprintln(stdout, "no plan covers this instant")
		return nil
	}
	if resp.GetAssignment() == nil {
		fmt.Fprintf(stdout, "plan %s (version %d): nothing left to do\n", resp.GetPlanId(), resp.GetPlanVersion())
		return nil
	}
	pc, err := a.loadPlanContext(*site)
	if err != nil {
		return err
	}
	as := "as planned"
	if !resp.GetAsPlanned() {
		as = "adjusted to the current state"
	}
	fmt.Fprintf(stdout, "next run, from plan %s (version %d), %s:\n", resp.GetPlanId(), resp.GetPlanVersion(), as)
	x := resp.GetAssignment()
	tw := newTable(stdout)
	fmt.Fprintf(tw, "target\t%s (%s)\n", x.GetTargetName(), x.GetTargetId())
	fmt.Fprintf(tw, "block\t%s\n", x.GetBlockId())
	fmt.Fprintf(tw, "prepare from\t%s\n", pc.clock.full(x.GetPrepareStart()))
	fmt.Fprintf(tw, "expose\t%s to %s\n", pc.clock.full(x.GetStart()), pc.clock.full(x.GetEnd()))
	fmt.Fprintf(tw, "frames\t%d x %s through %s\n", x.GetFrames(), dur(x.GetExposure()), x.GetFilter())
	if pt := x.GetPointing(); pt != nil {
		fmt.Fprintf(tw, "pointing\tRA %s Dec %s (ICRS, topocentric), alt %.1f az %.1f deg, hour angle %+.2f deg (%s)\n",
			hms(pt.GetRaIcrsDeg()), dms(pt.GetDecIcrsDeg()), pt.GetAltitudeDeg(), pt.GetAzimuthDeg(), pt.GetHourAngleDeg(),
			enumName(pt.GetMeridianSide().String(), "MERIDIAN_SIDE_"))
	}
	if rt := x.GetRate(); rt != nil {
		track := "sidereal"
		if x.GetNonSiderealTracking() {
			track = "non-sidereal"
		}
		fmt.Fprintf(tw, "motion\t%+.3f \"/min in RA*cos(Dec), %+.3f \"/min in Dec (%s tracking)\n",
			rt.GetRaCosDecArcsecPerMin(), rt.GetDecArcsecPerMin(), track)
	}
	fmt.Fprintf(tw, "overheads\t%s\n", overheadText(x.GetOverheads()))
	return tw.Flush()
}

func runPlanWatch(args []string, stdout, stderr io.Writer) error {
	r := newRemote("plan watch", stderr)
	site := r.fs.String("site", "", "id of the site; required")
	current := r.fs.Bool("current", false, "print the site's latest plan first")
	count := r.fs.Int("count", 0, "stop after this many plans (0: until interrupted)")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *site == "" {
		return flagError("site", "required: the site's id")
	}
	if *count < 0 {
		return flagError("count", "must be >= 0")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt)
	defer stop()
	stream, err := a.plans.WatchPlans(ctx, &pb.WatchPlansRequest{SiteId: *site, SendCurrent: *current})
	if err != nil {
		return a.callErr("WatchPlans", err)
	}
	var pc *planContext
	for n := 0; *count == 0 || n < *count; n++ {
		msg, err := stream.Recv()
		if err != nil {
			if ctx.Err() != nil || errors.Is(err, io.EOF) {
				return nil
			}
			err = a.callErr("WatchPlans", err)
			if isCode(err, codes.ResourceExhausted) {
				return fmt.Errorf("%w (fell behind; watch again with --current)", err)
			}
			return err
		}
		if r.conn.json {
			if err := writeJSONLine(stdout, msg); err != nil {
				return err
			}
			continue
		}
		if pc == nil || msg.GetPlan().GetOrigin() == pb.PlanOrigin_PLAN_ORIGIN_QUEUED_BLOCK {
			if pc, err = a.loadPlanContext(*site); err != nil {
				return err
			}
		}
		if n > 0 {
			fmt.Fprintln(stdout)
		}
		fmt.Fprintln(stdout, watchHeading(msg.GetPlan(), n == 0 && *current, pc.clock))
		if err := printPlan(stdout, msg.GetPlan(), pc, nil); err != nil {
			return err
		}
		if f, ok := stdout.(*os.File); ok {
			f.Sync()
		}
	}
	return nil
}

// watchHeading says what a watched plan is: the site's latest plan when
// the stream opened (--current), or a new version, and which night or
// interval it covers, so that a reader knows which night is shown.
func watchHeading(p *pb.Plan, current bool, c clock) string {
	what := "new plan version"
	if current {
		what = "latest plan when the watch began"
	}
	span := "interval " + c.interval(p.GetInterval())
	if p.GetNight() != nil {
		span = "the night of " + dateString(p.GetNight())
	}
	return fmt.Sprintf("== %s: %s (version %d) ==", what, span, p.GetVersion())
}

// solverWords explains the solver's name (SolverStats.algorithm) to a
// reader: the main solver is a greedy start improved by adaptive
// large-neighbourhood search (README, "The objective").
func solverWords(name string) string {
	switch name {
	case "alns":
		return "greedy start + adaptive large-neighbourhood search (alns)"
	case "alns-replan":
		return "replan: greedy start + adaptive large-neighbourhood search (alns-replan)"
	case "exact-dp":
		return "exact dynamic program (exact-dp)"
	}
	return name
}

// overheadText lists the non-zero overheads and their total.
func overheadText(o *pb.Overheads) string {
	if o == nil {
		return "0s"
	}
	parts := []struct {
		name string
		d    *durationpb.Duration
	}{{"slew", o.GetSlew()}, {"settle", o.GetSettle()}, {"acquisition", o.GetAcquisition()},
		{"filter", o.GetFilterChange()}, {"focus", o.GetFocus()}, {"flip", o.GetMeridianFlip()}}
	var total time.Duration
	var s []string
	for _, p := range parts {
		if d := p.d.AsDuration(); d > 0 {
			total += d
			s = append(s, p.name+" "+fmtDuration(d))
		}
	}
	if total == 0 {
		return "0s"
	}
	return fmtDuration(total) + " (" + strings.Join(s, ", ") + ")"
}

// shortOverheads is the overhead column of a plan table: the total and
// the notable parts (filter change, focus, flip).
func shortOverheads(o *pb.Overheads) string {
	var total time.Duration
	for _, d := range []*durationpb.Duration{o.GetSlew(), o.GetSettle(), o.GetAcquisition(), o.GetFilterChange(),
		o.GetFocus(), o.GetMeridianFlip()} {
		total += d.AsDuration()
	}
	s := fmtDuration(total)
	var notes []string
	if o.GetFilterChange().AsDuration() > 0 {
		notes = append(notes, "filter")
	}
	if o.GetFocus().AsDuration() > 0 {
		notes = append(notes, "focus")
	}
	if o.GetMeridianFlip().AsDuration() > 0 {
		notes = append(notes, "flip")
	}
	if len(notes) > 0 {
		s += " " + strings.Join(notes, "+")
	}
	return s
}

// printPlan prints a plan as a table of assignments, its unplaced blocks
// with their reasons, and a summary. With after set, only assignments that
// end after it are listed (the rest of a replanned night).
func printPlan(w io.Writer, p *pb.Plan, pc *planContext, after *time.Time) error {
	c := pc.clock
	head := fmt.Sprintf("plan %s, version %d (%s)", p.GetId(), p.GetVersion(), enumName(p.GetOrigin().String(), "PLAN_ORIGIN_"))
	if p.GetPreviousPlanId() != "" {
		head += fmt.Sprintf(", replaces %s from %s", p.GetPreviousPlanId(), c.hm(p.GetReplanFrom()))
	}
	fmt.Fprintf(w, "%s\nsite %s (%s)\n", head, pc.site.GetName(), pc.site.GetId())
	if p.GetNight() != nil {
		fmt.Fprintf(w, "night of %s: %s\n", dateString(p.GetNight()), c.interval(p.GetInterval()))
	} else {
		fmt.Fprintf(w, "interval %s\n", c.interval(p.GetInterval()))
	}
	for _, cl := range p.GetClosures() {
		reason := cl.GetReason()
		if reason == "" {
			reason = "closed"
		}
		fmt.Fprintf(w, "closure %s-%s %s (%s-%s UTC): %s\n", c.hm(cl.GetInterval().GetStart()), c.hm(cl.GetInterval().GetEnd()),
			cl.GetInterval().GetStart().AsTime().In(c.loc).Format("MST"), c.hmUTC(cl.GetInterval().GetStart()),
			c.hmUTC(cl.GetInterval().GetEnd()), reason)
	}
	fmt.Fprintln(w)

	shown := p.GetAssignments()
	skipped := 0
	if after != nil {
		shown = nil
		for _, x := range p.GetAssignments() {
			if x.GetEnd().AsTime().After(*after) {
				shown = append(shown, x)
			} else {
				skipped++
			}
		}
	}
	if skipped > 0 {
		fmt.Fprintf(w, "%d assignments before %s are kept as they were; the rest of the night:\n", skipped,
			after.In(c.loc).Format("15:04 MST"))
	}
	tw := newTable(w)
	fmt.Fprintf(tw, "#\tprep\tstart\tend\tUTC\ttarget\tfilter\tframes\texp\talt deg\tairmass\tmoon deg\tside\toverheads\tnotes\n")
	for i, x := range shown {
		cs, ce := x.GetConditionsAtStart(), x.GetConditionsAtEnd()
		notes := []string{}
		if x.GetCadenceRun() > 0 {
			notes = append(notes, fmt.Sprintf("cadence run %d", x.GetCadenceRun()))
		}
		if x.GetNonSiderealTracking() {
			notes = append(notes, "non-sidereal")
		}
		if cs.Magnitude != nil {
			notes = append(notes, fmt.Sprintf("mag %.1f with extinction", cs.GetMagnitude()))
		}
		if n := brightMoonNote(pc.site, pc.blocks[x.GetBlockId()], x); n != "" {
			notes = append(notes, n)
		}
		if con := pointingConstellation(x.GetPointing()); con != "" {
			notes = append(notes, "in "+con)
		}
		side := "-"
		switch x.GetPointing().GetMeridianSide() {
		case pb.MeridianSide_MERIDIAN_SIDE_EAST:
			side = "E"
		case pb.MeridianSide_MERIDIAN_SIDE_WEST:
			side = "W"
		}
		fmt.Fprintf(tw, "%d\t%s\t%s\t%s\t%s-%s\t%s\t%s\t%d\t%s\t%.0f-%.0f\t%.2f\t%.0f\t%s\t%s\t%s\n", skipped+i+1,
			c.hm(x.GetPrepareStart()), c.hm(x.GetStart()), c.hm(x.GetEnd()), c.hmUTC(x.GetStart()), c.hmUTC(x.GetEnd()),
			x.GetTargetName(), x.GetFilter(), x.GetFrames(), dur(x.GetExposure()), cs.GetAltitudeDeg(), ce.GetAltitudeDeg(),
			max(cs.GetAirmass(), ce.GetAirmass()), min(cs.GetMoonSeparationDeg(), ce.GetMoonSeparationDeg()), side,
			shortOverheads(x.GetOverheads()), strings.Join(notes, ", "))
	}
	if len(shown) == 0 {
		fmt.Fprintln(tw, "(no assignments)")
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	fmt.Fprintf(w, "times are %s local time; UTC in the fifth column; alt at start-end, worst airmass and Moon distance of the run\n",
		c.loc)

	if len(p.GetUnplaced()) > 0 {
		fmt.Fprintf(w, "\nunplaced blocks (%d):\n", len(p.GetUnplaced()))
		tw = newTable(w)
		fmt.Fprintln(tw, "block\ttarget\tfilter\tframes left\treason\tdetail")
		for _, u := range p.GetUnplaced() {
			b := pc.blocks[u.GetBlockId()]
			name := pc.names[b.GetTargetId()]
			if name == "" {
				name = "?"
			}
			fmt.Fprintf(tw, "%s\t%s\t%s\t%d\t%s\t%s\n", u.GetBlockId(), name, b.GetFilter(), u.GetFramesLeft(),
				enumName(u.GetReason().String(), "REASON_"), u.GetDetail())
		}
		if err := tw.Flush(); err != nil {
			return err
		}
	}
	if len(p.GetCadence()) > 0 {
		fmt.Fprintf(w, "\ncadence series (%d):\n", len(p.GetCadence()))
		tw = newTable(w)
		fmt.Fprintln(tw, "block\ttarget\tevery\truns\tskipped slots (local time: reason)")
		for _, cs := range p.GetCadence() {
			b := pc.blocks[cs.GetBlockId()]
			name := pc.names[b.GetTargetId()]
			if name == "" {
				name = "?"
			}
			var sk []string
			for _, s := range cs.GetSkipped() {
				sk = append(sk, fmt.Sprintf("%s: %s", c.hm(s.GetAt()),
					strings.ReplaceAll(enumName(s.GetReason().String(), "SLOT_REASON_"), "_", " ")))
			}
			if len(sk) == 0 {
				sk = []string{"none"}
			}
			fmt.Fprintf(tw, "%s\t%s\t%s\t%d\t%s\n", cs.GetBlockId(), name, dur(cs.GetInterval()), cs.GetRunsDelivered(),
				strings.Join(sk, "; "))
		}
		if err := tw.Flush(); err != nil {
			return err
		}
	}
	if err := printCharges(w, p.GetCharges()); err != nil {
		return err
	}
	if o := p.GetObjective(); o != nil {
		fmt.Fprintf(w, "\nexposure %s, overheads %s, idle %s; objective %.0f (weighted exposure %.0f + cadence points %.0f + completion bonus %.0f)\n",
			dur(o.GetExposureTime()), dur(o.GetOverheadTime()), dur(o.GetIdleTime()), o.GetTotal(), o.GetWeightedExposure(),
			o.GetCadencePoints(), o.GetCompletionBonus())
	}
	if s := p.GetSolver(); s != nil {
		stop := ""
		if r := s.GetStopReason(); r != "" {
			stop = ", stopped: " + r
		}
		fmt.Fprintf(w, "planned by %s in %s: %d improvement rounds%s, seed %d, %d blocks on %d steps of %s\n", solverWords(s.GetAlgorithm()),
			dur(s.GetSolveTime()), s.GetIterations(), stop, s.GetSeed(), s.GetBlocksConsidered(), s.GetGridSteps(), dur(s.GetGridStep()))
	}
	return nil
}

// printRunChanges lists what a replan did to the old plan's runs that it
// did not keep, and how many of the still-feasible ones it kept.
func printRunChanges(w io.Writer, c clock, resp *pb.ReplanResponse) error {
	kept := 0
	for _, rc := range resp.GetRunChanges() {
		if rc.GetChange() == pb.RunChangeKind_RUN_CHANGE_KIND_KEPT {
			kept++
		}
	}
	if len(resp.GetRunChanges()) == 0 {
		return nil
	}
	fmt.Fprintf(w, "of the old runs starting after it, %d of %d still feasible kept; the others:\n", kept, resp.GetAssignmentsFeasible())
	tw := newTable(w)
	fmt.Fprintln(tw, "block\told start\tframes\tchange\tnew start\tframes\twhy")
	for _, rc := range resp.GetRunChanges() {
		if rc.GetChange() == pb.RunChangeKind_RUN_CHANGE_KIND_KEPT {
			continue
		}
		ns := "-"
		if rc.GetNewStart() != nil {
			ns = c.hm(rc.GetNewStart())
		}
		fmt.Fprintf(tw, "%s\t%s\t%d\t%s\t%s\t%d\t%s\n", rc.GetBlockId(), c.hm(rc.GetStart()), rc.GetFrames(),
			strings.ToLower(enumName(rc.GetChange().String(), "RUN_CHANGE_KIND_")), ns, rc.GetNewFrames(), rc.GetReason())
	}
	return tw.Flush()
}
