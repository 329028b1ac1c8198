package server

// Network planning glue: the second file, beside planning.go, that talks
// to the scheduler. It loads a network's members and open blocks (the
// network's own and each member's), runs scheduler.SolveNetwork on every
// member's night, and turns each member's part into an ordinary plan
// version of that site (Plan.network_id set), which plans.go's storage,
// watching and NextAssignment then serve unchanged.
//
// Several nights are planned night by night, the frames planned on one
// counting as done on the next, as scheduler.NetworkHorizon does; the
// loop is here rather than in NetworkHorizon because each member's night
// must be the interval MakePlan gives it (sunset to sunrise,
// ephem.PlanningSpan), not NetworkHorizon's darkness-bound grid.

import (
	"context"
	"errors"
	"fmt"
	"runtime"
	"slices"
	"sort"
	"time"

	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
	"github.com/nightloom/nightloom/scheduler"
)

// netMember is one member site's part of a network planning call.
type netMember struct {
	site       *siteModel
	start, end time.Time
	night      *nightloomv1.LocalDate
	closures   []*nightloomv1.Closure // merged; stored with the plan
	// Replans: the version replanned, and its runs that stay.
	old        *nightloomv1.Plan
	kept       []*nightloomv1.Assignment
	inProgress *nightloomv1.Assignment
}

// netBlock is an open block of a network planning call: the network's
// blocks may go to their allowed members, a member's own blocks only to
// it.
type netBlock struct {
	planBlock
	sites []string // nil: every member
}

// netJob is one network planning problem (one night, or a replan).
type netJob struct {
	network *nightloomv1.Network
	members []*netMember
	blocks  []*netBlock
	from    time.Time // replans; zero for MakeNetworkPlan
	args    planArgs
	origin  nightloomv1.PlanOrigin
}

// netPlanned is a solved network job: one plan body per member (in the
// job's order) and the blocks no member plans.
type netPlanned struct {
	bodies    []*nightloomv1.Plan
	unplaced  []*nightloomv1.NetworkUnplaced
	objective float64
	separate  float64
}

// networkRounds is SolveNetwork's default number of rounds.
const networkRounds = 3

// capabilityOf is what a site's telescope can do (scheduler.Capability):
// its filter wheel (nil when the site lists none) and aperture.
func capabilityOf(s *nightloomv1.Site) scheduler.Capability {
	c := scheduler.Capability{ApertureMM: s.GetInstrument().GetApertureMm()}
	if fs := s.GetInstrument().GetFilters(); len(fs) > 0 {
		c.Filters = slices.Clone(fs)
	}
	return c
}

// siteReasonOf converts a site's reason for not taking a block.
func siteReasonOf(w scheduler.SiteWhy) nightloomv1.SiteReason {
	switch w {
	case scheduler.NotAllowed:
		return nightloomv1.SiteReason_SITE_REASON_NOT_ALLOWED
	case scheduler.LacksFilter:
		return nightloomv1.SiteReason_SITE_REASON_LACKS_FILTER
	case scheduler.ApertureTooSmall:
		return nightloomv1.SiteReason_SITE_REASON_APERTURE_TOO_SMALL
	case scheduler.PixelScaleOutside:
		return nightloomv1.SiteReason_SITE_REASON_PIXEL_SCALE_OUTSIDE
	case scheduler.SiteNeverObservable:
		return nightloomv1.SiteReason_SITE_REASON_NEVER_OBSERVABLE
	case scheduler.SiteWindowTooShort:
		return nightloomv1.SiteReason_SITE_REASON_WINDOW_TOO_SHORT
	case scheduler.SiteLostToHigherValue:
		return nightloomv1.SiteReason_SITE_REASON_LOST_TO_HIGHER_VALUE
	}
	return nightloomv1.SiteReason_SITE_REASON_UNSPECIFIED
}

// solveNetwork plans a network job jointly (scheduler.SolveNetwork) and
// converts every member's part.
func (s *Server) solveNetwork(ctx context.Context, job *netJob) (*netPlanned, error) {
	began := time.Now()
	// The call's budget is for the whole joint search: SolveNetwork gives
	// each site's first solve its Options.Budget (the sites in parallel),
	// each coordinate step a third of it and each relocation three
	// re-solves of a fifteenth (scheduler.NetworkInput), over its default
	// 3 rounds of one step per site and 4 relocations per site.
	n := float64(len(job.members))
	budget := time.Duration(float64(job.args.budget) / (1 + networkRounds*(n/3+4*n/5)))
	if budget <= 0 {
		budget = time.Nanosecond
	}
	opts := scheduler.Options{Seed: uint64(job.args.seed), Budget: budget, Workers: runtime.GOMAXPROCS(0), Cancel: ctx.Done()}
	in := scheduler.NetworkInput{From: job.from, Options: opts, Rounds: networkRounds}
	index := map[string]int{}
	blocks := make([]scheduler.NetworkBlock, len(job.blocks))
	for g, b := range job.blocks {
		nb := scheduler.NetworkBlock{Block: schedBlock(&b.planBlock, true), Sites: b.sites}
		if n := b.pb.GetNeeds(); n != nil {
			nb.Needs = scheduler.Needs{MinApertureMM: n.GetMinApertureMm(),
				MinPixelScaleArcsec: n.GetMinPixelScaleArcsec(), MaxPixelScaleArcsec: n.GetMaxPixelScaleArcsec()}
		}
		blocks[g] = nb
		index[b.pb.GetId()] = g
	}
	grids := make([]*constraints.Grid, len(job.members))
	for k, m := range job.members {
		g, err := constraints.NewGrid(m.site.cons, m.start, m.end, job.args.gridStep, constraints.Options{})
		if err != nil {
			return nil, fieldError("grid_step", "site %s: %v", m.site.pb.GetId(), err)
		}
		grids[k] = g
		ns := scheduler.NetworkSite{Name: m.site.pb.GetId(), Site: m.site.sched, Grid: g, Capability: capabilityOf(m.site.pb)}
		for _, c := range m.closures {
			ns.Closures = append(ns.Closures, scheduler.Closure{Start: c.GetInterval().GetStart().AsTime(),
				End: c.GetInterval().GetEnd().AsTime(), Note: c.GetReason()})
		}
		in.Sites = append(in.Sites, ns)
	}
	// Runs kept from the replanned versions anchor each mount; their frames
	// count as done. The store's frames_done holds the reported (finished)
	// ones, which Executed would add again, so those are taken off (as in
	// planning.go); only the run in progress adds frames.
	for k, m := range job.members {
		ns := &in.Sites[k]
		for _, a := range m.kept {
			g, ok := index[a.GetBlockId()]
			if !ok {
				continue // no longer open
			}
			if ok, _ := scheduler.CanTake(ns, &blocks[g]); !ok {
				continue // the block's sites or needs changed since
			}
			if a != m.inProgress {
				blocks[g].FramesDone = max(0, blocks[g].FramesDone-int(a.GetFrames()))
			}
			ns.Executed = append(ns.Executed, scheduler.Assignment{ID: a.GetBlockId(),
				Start: a.GetStart().AsTime(), End: a.GetEnd().AsTime(), Frames: int(a.GetFrames()),
				Pointing: scheduler.Pointing{AltDeg: a.GetPointing().GetAltitudeDeg(), AzDeg: a.GetPointing().GetAzimuthDeg(),
					HADeg: a.GetPointing().GetHourAngleDeg(), DecDeg: a.GetPointing().GetDecApparentDeg(),
					RADeg: a.GetPointing().GetRaApparentDeg(), PierWest: a.GetPointing().GetHourAngleDeg() >= 0}})
		}
	}
	in.Blocks = blocks
	// Programs: their use so far in the period that holds the network's
	// start, every program open to any member (a block's program is held
	// to its home site or to none, which queueing checks).
	at := job.from
	for _, m := range job.members {
		if at.IsZero() || m.start.Before(at) {
			at = m.start
		}
	}
	programs, err := s.planPrograms(ctx, "", at, nil)
	if err != nil {
		return nil, err
	}
	in.Programs = programs
	pl, err := scheduler.SolveNetwork(in)
	if ctx.Err() != nil {
		return nil, fmt.Errorf("network planning stopped after %v: %w", time.Since(began).Round(time.Millisecond), ctx.Err())
	}
	if err != nil {
		return nil, fmt.Errorf("server: network planning: %w", err)
	}
	out := &netPlanned{objective: pl.Objective, separate: pl.Separate}
	for _, u := range pl.Unplaced {
		b := job.blocks[u.Block]
		nu := &nightloomv1.NetworkUnplaced{BlockId: u.ID, FramesLeft: int32(max(0, int(b.pb.GetFramesWanted())-b.framesDone))}
		for _, r := range u.Sites {
			w := &nightloomv1.SiteWhyNot{SiteId: r.Site, Reason: siteReasonOf(r.Why)}
			if r.Why == scheduler.SiteNeverObservable {
				w.Constraint = reasonProto(r.Constraint)
			}
			nu.Sites = append(nu.Sites, w)
		}
		out.unplaced = append(out.unplaced, nu)
	}
	for k, sp := range pl.Sites {
		m := job.members[k]
		if err := scheduler.Validate(sp.Plan, sp.Problem); err != nil {
			return nil, fmt.Errorf("server: site %s: the network solver's plan failed validation: %w", sp.Name, err)
		}
		local := make([]*planBlock, len(sp.Blocks))
		for i, g := range sp.Blocks {
			local[i] = &job.blocks[g].planBlock
		}
		from := m.start
		if !job.from.IsZero() && job.from.After(from) {
			from = job.from
		}
		pj := &planJob{site: m.site, start: m.start, end: m.end, night: m.night, from: from, blocks: local,
			closures: m.closures, kept: m.kept, inProgress: m.inProgress, args: job.args, origin: job.origin}
		body := &nightloomv1.Plan{Interval: &nightloomv1.TimeInterval{Start: timestamppb.New(m.start), End: timestamppb.New(m.end)}}
		body.Assignments = append(body.Assignments, m.kept...)
		runs := map[string]int{}
		for _, a := range m.kept {
			runs[a.GetBlockId()]++
		}
		for i := range sp.Plan.Assignments {
			a := &sp.Plan.Assignments[i]
			if a.Executed {
				continue
			}
			runs[a.ID]++
			body.Assignments = append(body.Assignments, assignmentsOf(pj, sp.Problem, a, runs[a.ID])...)
		}
		sort.SliceStable(body.Assignments, func(i, j int) bool {
			return body.Assignments[i].GetStart().AsTime().Before(body.Assignments[j].GetStart().AsTime())
		})
		// The network's unplaced blocks that this site could have taken,
		// with its own reason (the others are in the network's answer).
		loc := m.site.loc()
		clock := func(t time.Time) string { return t.In(loc).Format("15:04") }
		for _, u := range pl.Unplaced {
			li := slices.Index(sp.Blocks, u.Block)
			if li < 0 {
				continue
			}
			b := job.blocks[u.Block]
			up := &nightloomv1.Unplaced{BlockId: u.ID, FramesLeft: int32(max(0, int(b.pb.GetFramesWanted())-b.framesDone))}
			for _, r := range u.Sites {
				if r.Site != sp.Name {
					continue
				}
				switch r.Why {
				case scheduler.SiteNeverObservable:
					up.Reason, up.Detail = reasonProto(r.Constraint), sp.Problem.WhyNot(li, clock)
				case scheduler.SiteWindowTooShort:
					up.Reason = nightloomv1.Reason_REASON_WINDOW_TOO_SHORT
					up.Detail = fmt.Sprintf("no window here is as long as the shortest useful run (%s with overheads)",
						roundMin(shortestRun(m.site, b.pb)))
				default:
					up.Reason = nightloomv1.Reason_REASON_LOST_TO_HIGHER_VALUE
					up.Detail = "observable " + sp.Problem.ObservableText(li, clock) +
						", but the network's time went to blocks of higher value"
				}
			}
			body.Unplaced = append(body.Unplaced, up)
		}
		body.Solver = &nightloomv1.SolverStats{Algorithm: "network: " + sp.Plan.Solver, SolveTime: durationpb.New(time.Since(began)),
			Iterations: int64(sp.Plan.Iterations), Seed: job.args.seed, GridStep: durationpb.New(job.args.gridStep),
			GridSteps: int32(grids[k].N), BlocksConsidered: int32(len(local)), StopReason: sp.Plan.Stopped}
		body.Objective = objectiveOf(pj, body, &sp.Plan.Objective)
		body.Cadence = cadenceOf(sp.Plan)
		body.Charges = chargesOf(sp.Plan.Charged)
		body.SiteId, body.Origin, body.Night, body.Closures = m.site.pb.GetId(), job.origin, m.night, m.closures
		body.NetworkId = job.network.GetId()
		if m.old != nil {
			body.PreviousPlanId, body.ReplanFrom = m.old.GetId(), timestamppb.New(from)
		}
		out.bodies = append(out.bodies, body)
	}
	return out, nil
}

// netOpenBlocks loads the open blocks a network planning call considers:
// the network's (with their allowed members) and each member's own.
func (s *Server) netOpenBlocks(ctx context.Context, n *nightloomv1.Network, members []*siteModel) ([]*netBlock, error) {
	byID := map[string]*siteModel{}
	for _, m := range members {
		byID[m.pb.GetId()] = m
	}
	var out []*netBlock
	targets := map[string]*planTarget{}
	now := s.now()
	token := ""
	for {
		recs, next, err := s.db.ListBlocks(ctx, store.BlockFilter{NetworkID: n.GetId(), State: store.StateQueued},
			store.Page{Size: store.MaxPageSize, Token: token})
		if err != nil {
			return nil, err
		}
		for _, r := range recs {
			home := byID[r.SiteID]
			b, err := blockProto(r, home, now)
			if err != nil {
				return nil, err
			}
			if b.GetState() != nightloomv1.BlockState_BLOCK_STATE_OPEN {
				continue
			}
			t, ok := targets[r.TargetID]
			if !ok {
				pb, model, err := s.loadTarget(ctx, r.TargetID)
				if err != nil {
					return nil, err
				}
				t = &planTarget{pb: pb, model: model}
				targets[r.TargetID] = t
			}
			// Allowed members that are members still (a site deleted
			// from the network drops out); none left: no site may.
			var sites []string
			if al := b.GetAllowedSiteIds(); len(al) > 0 {
				sites = []string{}
				for _, id := range al {
					if byID[id] != nil {
						sites = append(sites, id)
					}
				}
				if len(sites) == 0 {
					continue
				}
			}
			out = append(out, &netBlock{planBlock: planBlock{pb: b, target: t, framesDone: int(b.GetFramesDone())}, sites: sites})
		}
		if next == "" {
			break
		}
		token = next
	}
	for _, m := range members {
		own, err := s.openBlocks(ctx, m)
		if err != nil {
			return nil, err
		}
		for _, b := range own {
			out = append(out, &netBlock{planBlock: *b, sites: []string{m.pb.GetId()}})
		}
	}
	return out, nil
}

// networkMembers loads a network and its member sites.
func (s *Server) networkMembers(ctx context.Context, id string) (*nightloomv1.Network, []*siteModel, error) {
	n, err := s.loadNetwork(ctx, "network_id", id)
	if err != nil {
		return nil, nil, err
	}
	var sites []*siteModel
	for _, sid := range n.GetSiteIds() {
		m, _, err := s.loadSite(ctx, sid)
		if err != nil {
			return nil, nil, err
		}
		sites = append(sites, m)
	}
	return n, sites, nil
}

// siteClosures validates closures that name their site and groups them by
// member (merged).
func siteClosures(v *violations, path string, cs []*nightloomv1.SiteClosure, members []string) map[string][]*nightloomv1.Closure {
	if len(cs) > MaxClosuresPerCall {
		v.add(path, "at most %d closures, got %d", MaxClosuresPerCall, len(cs))
		return nil
	}
	out := map[string][]*nightloomv1.Closure{}
	for i, c := range cs {
		p := idx(path, i)
		requiredID(v, p+".site_id", c.GetSiteId())
		if c.GetSiteId() != "" && members != nil && !slices.Contains(members, c.GetSiteId()) {
			v.add(p+".site_id", "site %s is not a member of the network", c.GetSiteId())
		}
		if c.GetClosure() == nil {
			v.add(p+".closure", "is required")
			continue
		}
		interval(v, p+".closure.interval", c.GetClosure().GetInterval(), time.Nanosecond, 0)
		text(v, p+".closure.reason", c.GetClosure().GetReason(), 0, MaxReasonBytes)
		out[c.GetSiteId()] = append(out[c.GetSiteId()], c.GetClosure())
	}
	for k, cl := range out {
		out[k] = mergeClosures(cl)
	}
	return out
}

func (x *networkService) MakeNetworkPlan(ctx context.Context, req *nightloomv1.MakeNetworkPlanRequest) (*nightloomv1.MakeNetworkPlanResponse, error) {
	s := x.s
	var v violations
	requiredID(&v, "network_id", req.GetNetworkId())
	date, _ := localDate(&v, "night", req.GetNight(), true)
	nights := int(req.GetNights())
	intRange(&v, "nights", int64(nights), 0, MaxNetworkNights)
	nights = max(nights, 1)
	args := planArgs{
		gridStep: duration(&v, "grid_step", req.GetGridStep(), MinGridStep, MaxGridStep, DefaultGridStep, false),
		budget:   duration(&v, "time_budget", req.GetTimeBudget(), 0, MaxTimeBudget, s.cfg.DefaultTimeBudget, false),
		seed:     req.GetSeed(),
	}
	siteClosures(&v, "closures", req.GetClosures(), nil)
	if err := v.err(); err != nil {
		return nil, err
	}
	n, sites, err := s.networkMembers(ctx, req.GetNetworkId())
	if err != nil {
		return nil, err
	}
	cls := siteClosures(&v, "closures", req.GetClosures(), n.GetSiteIds())
	if err := v.err(); err != nil {
		return nil, err
	}
	blocks, err := s.netOpenBlocks(ctx, n, sites)
	if err != nil {
		return nil, err
	}
	args.budget /= time.Duration(nights)

	// Every night's members and the work limit, before any solving.
	type night struct {
		date    time.Time
		members []*netMember
	}
	plan := make([]night, nights)
	for k := range plan {
		d := date.AddDate(0, 0, k)
		plan[k].date = d
		refStart, refEnd, haveRef := time.Time{}, time.Time{}, false
		for _, m := range sites {
			var st, en time.Time
			var ok bool
			md := d
			if !haveRef {
				if st, en, ok = m.planningInterval(d); ok {
					refStart, refEnd, haveRef = st, en, true
				}
			} else {
				md, st, en, ok = pairedNight(m, d, refStart, refEnd)
			}
			if !ok {
				continue // polar day: the member has no night
			}
			steps := int64((en.Sub(st) + args.gridStep - 1) / args.gridStep)
			if bs := steps * int64(len(blocks)); bs > MaxBlockSteps {
				return nil, fieldError("grid_step", "site %s: %d open blocks x %d grid steps = %d block-steps, at most %d; use a coarser grid_step",
					m.pb.GetId(), len(blocks), steps, bs, MaxBlockSteps)
			}
			plan[k].members = append(plan[k].members, &netMember{site: m, start: st, end: en, night: dateOf(md), closures: cls[m.pb.GetId()]})
		}
	}

	// Solve every night first, then store: an error stores nothing.
	type solved struct {
		job *netJob
		out *netPlanned
	}
	var all []solved
	for _, nt := range plan {
		job := &netJob{network: n, members: nt.members, args: args, origin: nightloomv1.PlanOrigin_PLAN_ORIGIN_MAKE_PLAN}
		for _, b := range blocks {
			if int(b.pb.GetFramesWanted())-b.framesDone > 0 && nightAllowed(b.pb, nt.date) {
				job.blocks = append(job.blocks, b)
			}
		}
		if len(job.members) == 0 {
			all = append(all, solved{job: job, out: &netPlanned{}})
			continue
		}
		began := time.Now()
		out, err := s.solveNetwork(ctx, job)
		s.metrics.observeSolve("make_network_plan", time.Since(began))
		if err != nil {
			return nil, err
		}
		all = append(all, solved{job: job, out: out})
		// Later nights count this night's frames as done.
		for _, body := range out.bodies {
			for _, a := range body.GetAssignments() {
				for _, b := range job.blocks {
					if b.pb.GetId() == a.GetBlockId() {
						b.framesDone += int(a.GetFrames())
					}
				}
			}
		}
	}
	// Every member's every night is stored in one transaction: all the
	// new versions or none, so that no member plans a block another
	// member's stored version also took.
	var bodies []*nightloomv1.Plan
	for _, sv := range all {
		bodies = append(bodies, sv.out.bodies...)
	}
	unlock, err := s.lockSites(ctx, n.GetSiteIds())
	if err != nil {
		return nil, err
	}
	_, err = s.storePlans(ctx, bodies)
	unlock()
	if err != nil {
		return nil, err
	}
	resp := &nightloomv1.MakeNetworkPlanResponse{}
	for k, sv := range all {
		resp.Nights = append(resp.Nights, &nightloomv1.NetworkNight{Night: dateOf(plan[k].date), Unplaced: sv.out.unplaced,
			Objective: sv.out.objective, SeparateObjective: sv.out.separate, Plans: sv.out.bodies})
	}
	return resp, nil
}

func (x *networkService) ReplanNetwork(ctx context.Context, req *nightloomv1.ReplanNetworkRequest) (*nightloomv1.ReplanNetworkResponse, error) {
	s := x.s
	var v violations
	requiredID(&v, "network_id", req.GetNetworkId())
	from := instant(&v, "from", req.GetFrom(), false)
	budget := duration(&v, "time_budget", req.GetTimeBudget(), 0, MaxTimeBudget, s.cfg.DefaultTimeBudget, false)
	siteClosures(&v, "closures", req.GetClosures(), nil)
	if err := v.err(); err != nil {
		return nil, err
	}
	if req.GetFrom() == nil {
		from = s.now()
	}
	n, _, err := s.networkMembers(ctx, req.GetNetworkId())
	if err != nil {
		return nil, err
	}
	cls := siteClosures(&v, "closures", req.GetClosures(), n.GetSiteIds())
	if err := v.err(); err != nil {
		return nil, err
	}
	out, err := s.replanNetwork(ctx, n.GetId(), from, cls, planArgs{budget: budget, seed: req.GetSeed()}, nightloomv1.PlanOrigin_PLAN_ORIGIN_REPLAN)
	if err != nil {
		return nil, err
	}
	return &nightloomv1.ReplanNetworkResponse{Replan: out}, nil
}

// lockSites takes the locks of several sites (lockSite), each stripe once
// and in order, so that two calls locking overlapping sets cannot
// deadlock.
func (s *Server) lockSites(ctx context.Context, ids []string) (func(), error) {
	var stripes []int
	for _, id := range ids {
		if k := stripe(id, len(s.siteLocks)); !slices.Contains(stripes, k) {
			stripes = append(stripes, k)
		}
	}
	sort.Ints(stripes)
	for _, k := range stripes {
		s.siteLocks[k].Lock()
	}
	var unlocks []func()
	release := func() {
		for i := len(unlocks) - 1; i >= 0; i-- {
			unlocks[i]()
		}
		for _, k := range stripes {
			s.siteLocks[k].Unlock()
		}
	}
	sorted := slices.Sorted(slices.Values(ids))
	for _, id := range slices.Compact(sorted) {
		u, err := s.lockReplicas(ctx, id)
		if err != nil {
			release()
			return nil, err
		}
		unlocks = append(unlocks, u)
	}
	return release, nil
}

// errNoNetworkPlan: no member has a network plan covering the instant.
var errNoNetworkPlan = errors.New("no member has a plan covering that instant or starting within a day of it")

// currentNetworkPlan is the plan of a member that a network replan from
// `from` continues: the latest version whose interval contains from, else,
// since the members' nights start at different instants, the one that
// starts first within a day after from. nil when there is none.
func (s *Server) currentNetworkPlan(ctx context.Context, siteID string, from time.Time) (*nightloomv1.Plan, error) {
	latest, err := s.db.LatestPlan(ctx, siteID)
	if errors.Is(err, store.ErrNotFound) {
		return nil, nil
	}
	if err != nil {
		return nil, err
	}
	var best *store.Plan
	for ver, n := latest.Version, 0; ver >= 1 && n < maxPlanScan; ver, n = ver-1, n+1 {
		rec := latest
		if ver != latest.Version {
			if rec, err = s.db.PlanByVersion(ctx, siteID, ver); errors.Is(err, store.ErrNotFound) {
				continue
			} else if err != nil {
				return nil, err
			}
		}
		if !rec.End.After(from) || !rec.Start.Before(from.Add(24*time.Hour)) {
			continue
		}
		if !from.Before(rec.Start) {
			return planFromRecord(rec) // contains from
		}
		if best == nil || rec.Start.Before(best.Start) {
			best = &rec
		}
	}
	if best == nil {
		return nil, nil
	}
	return planFromRecord(*best)
}

// replanNetwork plans the network again from `from`: every member whose
// latest version covering `from` is a plan of this network gets a new
// version (extra closures per site added to its plan's), the network's
// blocks free to move between them. The runs each member keeps are those
// of Replan (keptRuns). It takes the members' locks.
func (s *Server) replanNetwork(ctx context.Context, networkID string, from time.Time, extra map[string][]*nightloomv1.Closure,
	args planArgs, origin nightloomv1.PlanOrigin) (*nightloomv1.NetworkNight, error) {
	n, sites, err := s.networkMembers(ctx, networkID)
	if err != nil {
		return nil, err
	}
	unlock, err := s.lockSites(ctx, n.GetSiteIds())
	if err != nil {
		return nil, err
	}
	defer unlock()
	blocks, err := s.netOpenBlocks(ctx, n, sites)
	if err != nil {
		return nil, err
	}
	targets := map[string]*constraints.Target{}
	for _, b := range blocks {
		targets[b.pb.GetId()] = b.target.model
	}
	job := &netJob{network: n, from: from, args: args, origin: origin}
	var night *nightloomv1.LocalDate
	for _, m := range sites {
		old, err := s.currentNetworkPlan(ctx, m.pb.GetId(), from)
		if err != nil {
			return nil, err
		}
		if old == nil || old.GetNetworkId() != n.GetId() {
			continue
		}
		if ver, err := s.supersededBy(ctx, old); err != nil {
			return nil, err
		} else if ver != 0 {
			continue
		}
		cls := mergeClosures(append(append([]*nightloomv1.Closure(nil), old.GetClosures()...), extra[m.pb.GetId()]...))
		if len(cls) > MaxClosuresPerPlan {
			return nil, fieldError("closures", "the plan of site %s would carry %d closures, at most %d", m.pb.GetId(), len(cls), MaxClosuresPerPlan)
		}
		kept, inProgress, _, err := s.keptRuns(ctx, m, old, from, cls, targets)
		if err != nil {
			return nil, err
		}
		if job.args.gridStep == 0 {
			job.args.gridStep = DefaultGridStep
			if gs := old.GetSolver().GetGridStep(); gs != nil && gs.AsDuration() >= MinGridStep && gs.AsDuration() <= MaxGridStep {
				job.args.gridStep = gs.AsDuration()
			}
		}
		if night == nil {
			night = old.GetNight()
		}
		if from.Before(old.GetInterval().GetStart().AsTime()) && night != nil && old.GetNight() != nil &&
			!civilOf(old.GetNight()).Equal(civilOf(night)) {
			continue // a later night than the others'
		}
		job.members = append(job.members, &netMember{site: m, start: old.GetInterval().GetStart().AsTime(),
			end: old.GetInterval().GetEnd().AsTime(), night: old.GetNight(), closures: cls, old: old, kept: kept, inProgress: inProgress})
	}
	if len(job.members) == 0 {
		return nil, failedPrecondition("network %s: %v (%s)", n.GetId(), errNoNetworkPlan, from.Format(time.RFC3339))
	}
	for _, b := range blocks {
		if int(b.pb.GetFramesWanted())-b.framesDone <= 0 || (night != nil && !nightAllowed(b.pb, civilOf(night))) {
			continue
		}
		job.blocks = append(job.blocks, b)
	}
	for _, m := range job.members {
		steps := int64((m.end.Sub(m.start) + job.args.gridStep - 1) / job.args.gridStep)
		if bs := steps * int64(len(job.blocks)); bs > MaxBlockSteps {
			return nil, failedPrecondition("%d open blocks x %d grid steps exceed %d block-steps", len(job.blocks), steps, MaxBlockSteps)
		}
	}
	began := time.Now()
	out, err := s.solveNetwork(ctx, job)
	s.metrics.observeSolve("replan_network", time.Since(began))
	if err != nil {
		return nil, err
	}
	// All members' new versions in one transaction, or none.
	stored, err := s.storePlans(ctx, out.bodies)
	if err != nil {
		return nil, err
	}
	return &nightloomv1.NetworkNight{Unplaced: out.unplaced, Objective: out.objective, SeparateObjective: out.separate, Plans: stored}, nil
}

// pairedNight chooses a member's night to plan with the reference night
// [refStart, refEnd) of local date d (the first member's): among the
// member's nights of d-1, d and d+1 in its own zone, the one that overlaps
// the reference most in UTC, or, when none overlaps, whose middle lies
// nearest the reference's. Sites far apart in longitude thus plan the
// nights that happen together (an Australian evening and the Chilean
// night before it by the calendar).
func pairedNight(m *siteModel, d, refStart, refEnd time.Time) (time.Time, time.Time, time.Time, bool) {
	var (
		bestD, bestS, bestE time.Time
		found               bool
		bestOverlap         time.Duration
		bestGap             time.Duration
	)
	refMid := refStart.Add(refEnd.Sub(refStart) / 2)
	for _, off := range []int{0, -1, 1} {
		md := d.AddDate(0, 0, off)
		st, en, ok := m.planningInterval(md)
		if !ok {
			continue
		}
		overlap := minTime(en, refEnd).Sub(maxTime(st, refStart))
		gap := st.Add(en.Sub(st) / 2).Sub(refMid).Abs()
		better := !found || overlap > bestOverlap || (overlap <= 0 && bestOverlap <= 0 && gap < bestGap)
		if better {
			bestD, bestS, bestE, found, bestOverlap, bestGap = md, st, en, true, overlap, gap
		}
	}
	return bestD, bestS, bestE, found
}
