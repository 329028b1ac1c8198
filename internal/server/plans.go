package server

import (
	"context"
	"errors"
	"fmt"
	"sort"
	"strconv"
	"strings"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
	"github.com/nightloom/nightloom/scheduler"
)

// planService implements PlanService (plan.proto). This file holds the
// storage, versioning, watching and dispatch side of planning; everything
// that talks to the scheduler is in planning.go behind the planner
// interface.
type planService struct {
	nightloomv1.UnimplementedPlanServiceServer
	s *Server
}

// maxPlanScan bounds how many plan versions one call walks through (newest
// first) looking for a plan that covers an instant, or a newer plan over the
// same interval.
const maxPlanScan = 2000

// planFromRecord decodes a stored plan; the record's id, site, version and
// creation instant are authoritative.
func planFromRecord(rec store.Plan) (*nightloomv1.Plan, error) {
	p := &nightloomv1.Plan{}
	if err := proto.Unmarshal(rec.Body, p); err != nil {
		return nil, err
	}
	p.Id, p.SiteId, p.Version = rec.ID, rec.SiteID, rec.Version
	p.CreateTime = timestamppb.New(rec.CreatedAt)
	p.AssignmentCount, p.UnplacedCount = int32(len(p.Assignments)), int32(len(p.Unplaced))
	return p, nil
}

// summary strips a plan to what ListPlans returns.
func summary(p *nightloomv1.Plan) *nightloomv1.Plan {
	c := proto.Clone(p).(*nightloomv1.Plan)
	c.Assignments, c.Unplaced = nil, nil
	return c
}

// lockSite takes the site's lock (striped; see Server.siteLocks) and, when
// other daemons share the storage, their planning lock too (replicas.go),
// which fails with store.ErrBusy (ABORTED) after PlanLockTimeout.
func (s *Server) lockSite(ctx context.Context, id string) (func(), error) {
	m := &s.siteLocks[stripe(id, len(s.siteLocks))]
	m.Lock()
	unlockReplicas, err := s.lockReplicas(ctx, id)
	if err != nil {
		m.Unlock()
		return nil, err
	}
	return func() { unlockReplicas(); m.Unlock() }, nil
}

// storePlan stores a plan body as the site's next version and publishes it
// to the watchers. The caller holds the site's lock.
func (s *Server) storePlan(ctx context.Context, body *nightloomv1.Plan) (*nightloomv1.Plan, error) {
	out, err := s.storePlans(ctx, []*nightloomv1.Plan{body})
	if err != nil {
		return nil, err
	}
	return out[0], nil
}

// storePlans stores plan bodies (of one site or several: a network's
// members) in one transaction, each as its site's next version, all or
// none, and publishes them to the watchers once stored. The caller holds
// the sites' locks.
func (s *Server) storePlans(ctx context.Context, bodies []*nightloomv1.Plan) ([]*nightloomv1.Plan, error) {
	recs := make([]store.Plan, len(bodies))
	for i, body := range bodies {
		body.Id = newID(planPrefix)
		body.AssignmentCount, body.UnplacedCount = int32(len(body.Assignments)), int32(len(body.Unplaced))
		raw, err := storable(body)
		if err != nil {
			return nil, err
		}
		recs[i] = store.Plan{ID: body.Id, SiteID: body.SiteId,
			Start: body.GetInterval().GetStart().AsTime(), End: body.GetInterval().GetEnd().AsTime(), Body: raw}
	}
	stored, err := s.db.CreatePlans(ctx, recs)
	if err != nil {
		return nil, err
	}
	for i, body := range bodies {
		body.Version, body.CreateTime = stored[i].Version, timestamppb.New(stored[i].CreatedAt)
		s.metrics.versions.Inc()
		s.publishStored(body)
	}
	return bodies, nil
}

// openBlocks loads the site's open blocks (queued and not expired at now)
// with their targets; blocks of a network are left to network planning.
func (s *Server) openBlocks(ctx context.Context, site *siteModel) ([]*planBlock, error) {
	var out []*planBlock
	targets := map[string]*planTarget{}
	now := s.now()
	token := ""
	for {
		recs, next, err := s.db.ListBlocks(ctx, store.BlockFilter{SiteID: site.pb.GetId(), State: store.StateQueued},
			store.Page{Size: store.MaxPageSize, Token: token})
		if err != nil {
			return nil, err
		}
		for _, r := range recs {
			if r.NetworkID != "" {
				continue // planned with its network (networkplan.go)
			}
			b, err := blockProto(r, site, now)
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
			out = append(out, &planBlock{pb: b, target: t, framesDone: int(b.GetFramesDone())})
		}
		if next == "" {
			return out, nil
		}
		token = next
	}
}

// planArgs are the validated knobs of a MakePlan or Replan call.
type planArgs struct {
	gridStep  time.Duration
	budget    time.Duration
	seed      int64
	lookahead int
}

func (x *planService) MakePlan(ctx context.Context, req *nightloomv1.MakePlanRequest) (*nightloomv1.MakePlanResponse, error) {
	s := x.s
	var v violations
	requiredID(&v, "site_id", req.GetSiteId())
	var (
		date           time.Time
		ivStart, ivEnd time.Time
		byNight        bool
		nights         = int(req.GetNights())
		lookahead      = DefaultLookaheadNights
	)
	switch span := req.GetSpan().(type) {
	case *nightloomv1.MakePlanRequest_Night:
		date, _ = localDate(&v, "night", span.Night, true)
		byNight = true
	case *nightloomv1.MakePlanRequest_Interval:
		ivStart, ivEnd, _ = interval(&v, "interval", span.Interval, MinPlanInterval, MaxPlanInterval)
	default:
		v.add("span", "one of night or interval is required")
	}
	intRange(&v, "nights", int64(nights), 0, MaxPlanNights)
	if nights == 0 {
		nights = 1
	}
	if !byNight && req.GetNights() > 1 {
		v.add("nights", "must be 0 or 1 with an interval")
	}
	if req.LookaheadNights != nil {
		lookahead = int(req.GetLookaheadNights())
		intRange(&v, "lookahead_nights", int64(lookahead), 0, MaxLookaheadNights)
	}
	args := planArgs{
		gridStep:  duration(&v, "grid_step", req.GetGridStep(), MinGridStep, MaxGridStep, DefaultGridStep, false),
		budget:    duration(&v, "time_budget", req.GetTimeBudget(), 0, MaxTimeBudget, s.cfg.DefaultTimeBudget, false),
		seed:      req.GetSeed(),
		lookahead: lookahead,
	}
	closures(&v, "closures", req.GetClosures(), MaxClosuresPerCall)
	if err := v.err(); err != nil {
		return nil, err
	}
	site, _, err := s.loadSite(ctx, req.GetSiteId())
	if err != nil {
		return nil, err
	}
	blocks, err := s.openBlocks(ctx, site)
	if err != nil {
		return nil, err
	}

	// Each night's interval, and the work limit, before any solving.
	type nightSpan struct {
		date       time.Time
		start, end time.Time
		ok         bool
	}
	spans := make([]nightSpan, nights)
	for k := range spans {
		if byNight {
			d := date.AddDate(0, 0, k)
			st, en, ok := site.planningInterval(d)
			spans[k] = nightSpan{date: d, start: st, end: en, ok: ok}
		} else {
			spans[k] = nightSpan{start: ivStart, end: ivEnd, ok: true}
		}
		if sp := spans[k]; sp.ok {
			steps := int64((sp.end.Sub(sp.start) + args.gridStep - 1) / args.gridStep)
			if bs := steps * int64(len(blocks)); bs > MaxBlockSteps {
				return nil, fieldError("grid_step", "%d open blocks x %d grid steps = %d block-steps, at most %d; use a coarser grid_step",
					len(blocks), steps, bs, MaxBlockSteps)
			}
		}
	}
	perNight := args
	perNight.budget = args.budget / time.Duration(nights)
	cls := mergeClosures(req.GetClosures())

	resp := &nightloomv1.MakePlanResponse{}
	var planned []plannedCharge // what earlier nights of this call charge
	for _, sp := range spans {
		programs, err := x.s.planPrograms(ctx, site.pb.GetId(), sp.start, planned)
		if err != nil {
			return nil, err
		}
		job := &planJob{site: site, start: sp.start, end: sp.end, from: sp.start, closures: cls,
			args: perNight, origin: nightloomv1.PlanOrigin_PLAN_ORIGIN_MAKE_PLAN, programs: programs}
		if byNight {
			job.night = dateOf(sp.date)
		}
		var excluded []*nightloomv1.Unplaced
		for _, b := range blocks {
			left := int(b.pb.GetFramesWanted()) - b.framesDone
			switch {
			case left <= 0:
				// Completed by earlier nights of this call: not unplaced
				// (issue 14); the night simply has nothing left for it.
				continue
			case byNight && !nightAllowed(b.pb, sp.date):
				excluded = append(excluded, &nightloomv1.Unplaced{BlockId: b.pb.GetId(), Reason: nightloomv1.Reason_REASON_DATE_WINDOW,
					Detail: "outside the block's earliest_date..latest_date nights", FramesLeft: int32(left)})
			case !sp.ok:
				excluded = append(excluded, &nightloomv1.Unplaced{BlockId: b.pb.GetId(), Reason: nightloomv1.Reason_REASON_TOO_BRIGHT_TWILIGHT,
					Detail: "the Sun does not set on this night", FramesLeft: int32(left)})
			default:
				job.blocks = append(job.blocks, b)
			}
		}
		var body *nightloomv1.Plan
		if sp.ok {
			began := time.Now()
			body, err = s.planner.plan(ctx, job)
			s.metrics.observeSolve("make_plan", time.Since(began))
			if err != nil {
				return nil, err
			}
		} else {
			// Polar day: the plan covers nothing (plan.proto).
			w0, _ := site.nightWindow(sp.date)
			body = &nightloomv1.Plan{Interval: &nightloomv1.TimeInterval{Start: timestamppb.New(w0), End: timestamppb.New(w0)},
				Solver: &nightloomv1.SolverStats{Algorithm: "none (no night)", Seed: args.seed,
					GridStep: durationpb.New(args.gridStep)}, Objective: &nightloomv1.ObjectiveParts{}}
		}
		body.Unplaced = append(body.Unplaced, excluded...)
		body.SiteId = site.pb.GetId()
		body.Origin = nightloomv1.PlanOrigin_PLAN_ORIGIN_MAKE_PLAN
		if job.night != nil {
			body.Night = job.night
		}
		body.Closures = cls
		unlock, err := s.lockSite(ctx, body.SiteId)
		if err != nil {
			return nil, err
		}
		stored, err := s.storePlan(ctx, body)
		unlock()
		if err != nil {
			return nil, err
		}
		resp.Plans = append(resp.Plans, stored)
		planned = append(planned, chargesPlanned(stored)...)
		// Later nights count this night's assignments as done.
		byID := map[string]*planBlock{}
		for _, b := range blocks {
			byID[b.pb.GetId()] = b
		}
		for _, a := range stored.GetAssignments() {
			if b := byID[a.GetBlockId()]; b != nil {
				b.framesDone += int(a.GetFrames())
			}
		}
	}
	return resp, nil
}

func (x *planService) GetPlan(ctx context.Context, req *nightloomv1.GetPlanRequest) (*nightloomv1.GetPlanResponse, error) {
	var v violations
	requiredID(&v, "plan_id", req.GetPlanId())
	if err := v.err(); err != nil {
		return nil, err
	}
	rec, err := x.s.db.GetPlan(ctx, req.GetPlanId())
	if err != nil {
		return nil, err
	}
	p, err := planFromRecord(rec)
	if err != nil {
		return nil, err
	}
	return &nightloomv1.GetPlanResponse{Plan: p}, nil
}

// ListPlans pages newest first by walking down the site's versions, which
// the store numbers 1..n without gaps. The page token is the next version
// to read and a hash of the filter ("<version>.<hash>").
func (x *planService) ListPlans(ctx context.Context, req *nightloomv1.ListPlansRequest) (*nightloomv1.ListPlansResponse, error) {
	var v violations
	requiredID(&v, "site_id", req.GetSiteId())
	var night time.Time
	filter := req.GetNight() != nil
	if filter {
		night, _ = localDate(&v, "night", req.GetNight(), true)
	}
	size := pageSize(&v, "page_size", req.GetPageSize(), DefaultPageSize, MaxPageSize)
	pageToken(&v, "page_token", req.GetPageToken())
	if err := v.err(); err != nil {
		return nil, err
	}
	site, _, err := x.s.loadSite(ctx, req.GetSiteId())
	if err != nil {
		return nil, err
	}
	// A plan of the night lies in its noon-to-noon window: the stored
	// interval filters without decoding bodies.
	var w0, w1 time.Time
	if filter {
		w0, w1 = site.nightWindow(night)
	}
	scope := planListScope(req.GetSiteId(), req.GetNight())
	latest, err := x.s.db.LatestPlan(ctx, req.GetSiteId())
	if errors.Is(err, store.ErrNotFound) {
		return &nightloomv1.ListPlansResponse{}, nil
	}
	if err != nil {
		return nil, err
	}
	from := latest.Version
	if tok := req.GetPageToken(); tok != "" {
		ver, hash, ok := strings.Cut(tok, ".")
		n, err := strconv.ParseInt(ver, 10, 64)
		if !ok || err != nil || n < 1 || n > latest.Version || hash != scope {
			return nil, fieldError("page_token", "not a token of this list")
		}
		from = n
	}
	resp := &nightloomv1.ListPlansResponse{}
	scanned := 0
	ver := from
	for ; ver >= 1 && len(resp.Plans) < size && scanned < maxPlanScan; ver-- {
		scanned++
		rec, err := x.s.db.PlanByVersion(ctx, req.GetSiteId(), ver)
		if errors.Is(err, store.ErrNotFound) {
			continue
		}
		if err != nil {
			return nil, err
		}
		if filter && (rec.Start.Before(w0) || rec.End.After(w1)) {
			continue
		}
		p, err := planFromRecord(rec)
		if err != nil {
			return nil, err
		}
		if filter && (p.GetNight() == nil || !civilOf(p.GetNight()).Equal(night)) {
			continue
		}
		resp.Plans = append(resp.Plans, summary(p))
	}
	if ver >= 1 {
		resp.NextPageToken = fmt.Sprintf("%d.%s", ver, scope)
	}
	return resp, nil
}

// planListScope hashes what a ListPlans token is bound to.
func planListScope(site string, night *nightloomv1.LocalDate) string {
	key := site
	if night != nil {
		key += fmt.Sprintf("/%04d-%02d-%02d", night.GetYear(), night.GetMonth(), night.GetDay())
	}
	return fmt.Sprintf("%08x", uint32(stripe(key, 1<<31)))
}

// overlaps reports whether [a0, a1) and [b0, b1) share an instant.
func overlaps(a0, a1, b0, b1 time.Time) bool { return a0.Before(b1) && b0.Before(a1) }

// latestCovering returns the newest plan of a site whose interval contains
// t, or nil.
func (s *Server) latestCovering(ctx context.Context, siteID string, t time.Time) (*nightloomv1.Plan, error) {
	latest, err := s.db.LatestPlan(ctx, siteID)
	if errors.Is(err, store.ErrNotFound) {
		return nil, nil
	}
	if err != nil {
		return nil, err
	}
	for ver, n := latest.Version, 0; ver >= 1 && n < maxPlanScan; ver, n = ver-1, n+1 {
		rec := latest
		if ver != latest.Version {
			if rec, err = s.db.PlanByVersion(ctx, siteID, ver); errors.Is(err, store.ErrNotFound) {
				continue
			} else if err != nil {
				return nil, err
			}
		}
		if !t.Before(rec.Start) && t.Before(rec.End) {
			return planFromRecord(rec)
		}
	}
	return nil, nil
}

// supersededBy returns the version of a newer plan of the same site whose
// interval overlaps p's, or 0 when p is the latest for its interval.
func (s *Server) supersededBy(ctx context.Context, p *nightloomv1.Plan) (int64, error) {
	latest, err := s.db.LatestPlan(ctx, p.GetSiteId())
	if err != nil {
		return 0, err
	}
	p0, p1 := p.GetInterval().GetStart().AsTime(), p.GetInterval().GetEnd().AsTime()
	for ver := latest.Version; ver > p.GetVersion() && latest.Version-ver < maxPlanScan; ver-- {
		rec, err := s.db.PlanByVersion(ctx, p.GetSiteId(), ver)
		if errors.Is(err, store.ErrNotFound) {
			continue
		}
		if err != nil {
			return 0, err
		}
		if overlaps(p0, p1, rec.Start, rec.End) || (p0.Equal(p1) && rec.Start.Equal(p0)) {
			return ver, nil
		}
	}
	return 0, nil
}

func (x *planService) Replan(ctx context.Context, req *nightloomv1.ReplanRequest) (*nightloomv1.ReplanResponse, error) {
	s := x.s
	var v violations
	requiredID(&v, "site_id", req.GetSiteId())
	optionalID(&v, "plan_id", req.GetPlanId())
	from := instant(&v, "from", req.GetFrom(), false)
	closures(&v, "closures", req.GetClosures(), MaxClosuresPerCall)
	budget := duration(&v, "time_budget", req.GetTimeBudget(), 0, MaxTimeBudget, s.cfg.DefaultReplanBudget, false)
	if err := v.err(); err != nil {
		return nil, err
	}
	if req.GetFrom() == nil {
		from = s.now()
	}
	site, _, err := s.loadSite(ctx, req.GetSiteId())
	if err != nil {
		return nil, err
	}
	// A version that network planning made is replanned with its network:
	// what the closures here free or need may move to other members.
	if resp, ok, err := s.replanWithNetwork(ctx, site, req, from, budget); ok || err != nil {
		return resp, err
	}
	unlock, err := s.lockSite(ctx, site.pb.GetId())
	if err != nil {
		return nil, err
	}
	defer unlock()
	var old *nightloomv1.Plan
	if req.GetPlanId() != "" {
		rec, err := s.db.GetPlan(ctx, req.GetPlanId())
		if err != nil {
			return nil, err
		}
		if rec.SiteID != site.pb.GetId() {
			return nil, notFound("plan %s is not a plan of site %s", req.GetPlanId(), site.pb.GetId())
		}
		if old, err = planFromRecord(rec); err != nil {
			return nil, err
		}
	} else {
		if old, err = s.latestCovering(ctx, site.pb.GetId(), from); err != nil {
			return nil, err
		}
		if old == nil {
			return nil, notFound("site %s has no plan whose interval contains %s", site.pb.GetId(), from.Format(time.RFC3339))
		}
	}
	if ver, err := s.supersededBy(ctx, old); err != nil {
		return nil, err
	} else if ver != 0 {
		return nil, failedPrecondition("plan %s (version %d) is not the latest for its interval: version %d replaced it",
			old.GetId(), old.GetVersion(), ver)
	}
	start, end := old.GetInterval().GetStart().AsTime(), old.GetInterval().GetEnd().AsTime()
	if !from.Before(end) {
		return nil, failedPrecondition("from %s is not before the end of plan %s (%s)", from.Format(time.RFC3339),
			old.GetId(), end.Format(time.RFC3339))
	}
	if from.Before(start) {
		from = start
	}
	args := planArgs{gridStep: DefaultGridStep, budget: budget, seed: req.GetSeed(), lookahead: DefaultLookaheadNights}
	if gs := old.GetSolver().GetGridStep(); gs != nil && gs.AsDuration() >= MinGridStep && gs.AsDuration() <= MaxGridStep {
		args.gridStep = gs.AsDuration()
	}
	p, out, err := s.replanLocked(ctx, site, old, from, req.GetClosures(), args, nightloomv1.PlanOrigin_PLAN_ORIGIN_REPLAN)
	if err != nil {
		return nil, err
	}
	return &nightloomv1.ReplanResponse{Plan: p, AssignmentsKept: int32(out.kept), AssignmentsChanged: int32(out.changed),
		AssignmentsFeasible: int32(out.feasible), RunChanges: runChangesOf(out.report)}, nil
}

// replanWithNetwork replans through the network (networkplan.go) when the
// version a Replan names, or the site's latest covering from, was made by
// network planning; ok is false otherwise. The answer is this site's new
// version; the other members' are pushed to their watchers.
func (s *Server) replanWithNetwork(ctx context.Context, site *siteModel, req *nightloomv1.ReplanRequest, from time.Time,
	budget time.Duration) (*nightloomv1.ReplanResponse, bool, error) {
	var old *nightloomv1.Plan
	var err error
	if id := req.GetPlanId(); id != "" {
		rec, err := s.db.GetPlan(ctx, id)
		if err != nil || rec.SiteID != site.pb.GetId() {
			return nil, false, nil // the site's own path says why
		}
		if old, err = planFromRecord(rec); err != nil {
			return nil, false, err
		}
	} else if old, err = s.latestCovering(ctx, site.pb.GetId(), from); err != nil {
		return nil, false, err
	}
	if old == nil || old.GetNetworkId() == "" {
		return nil, false, nil
	}
	if ver, err := s.supersededBy(ctx, old); err != nil {
		return nil, false, err
	} else if ver != 0 {
		return nil, true, failedPrecondition("plan %s (version %d) is not the latest for its interval: version %d replaced it",
			old.GetId(), old.GetVersion(), ver)
	}
	start, end := old.GetInterval().GetStart().AsTime(), old.GetInterval().GetEnd().AsTime()
	if !from.Before(end) {
		return nil, true, failedPrecondition("from %s is not before the end of plan %s (%s)", from.Format(time.RFC3339),
			old.GetId(), end.Format(time.RFC3339))
	}
	if from.Before(start) {
		from = start
	}
	extra := map[string][]*nightloomv1.Closure{site.pb.GetId(): mergeClosures(req.GetClosures())}
	nn, err := s.replanNetwork(ctx, old.GetNetworkId(), from, extra, planArgs{budget: budget, seed: req.GetSeed()},
		nightloomv1.PlanOrigin_PLAN_ORIGIN_REPLAN)
	if errors.Is(err, store.ErrNotFound) {
		return nil, false, nil // the network is gone: the site replans alone
	}
	if err != nil {
		return nil, true, err
	}
	for _, p := range nn.GetPlans() {
		if p.GetSiteId() == site.pb.GetId() {
			kept, changed := keptChanged(old, p, from)
			return &nightloomv1.ReplanResponse{Plan: p, AssignmentsKept: int32(kept), AssignmentsChanged: int32(changed)}, true, nil
		}
	}
	return nil, true, failedPrecondition("plan %s of network %s is no longer the site's latest covering %s", old.GetId(),
		old.GetNetworkId(), from.Format(time.RFC3339))
}

// keptChanged counts the old version's runs after from that the new
// version keeps unchanged, and those it moved, shortened or dropped.
func keptChanged(old, stored *nightloomv1.Plan, from time.Time) (kept, changed int) {
	type key struct {
		block      string
		start, end int64
		frames     int32
	}
	have := map[key]bool{}
	for _, a := range stored.GetAssignments() {
		have[key{a.GetBlockId(), a.GetStart().AsTime().UnixNano(), a.GetEnd().AsTime().UnixNano(), a.GetFrames()}] = true
	}
	for _, a := range old.GetAssignments() {
		if !a.GetEnd().AsTime().After(from) {
			continue
		}
		if have[key{a.GetBlockId(), a.GetStart().AsTime().UnixNano(), a.GetEnd().AsTime().UnixNano(), a.GetFrames()}] {
			kept++
		} else {
			changed++
		}
	}
	return kept, changed
}

// replanOutcome is what a replan did to the old version's runs after from.
type replanOutcome struct {
	kept, changed, feasible int
	report                  *scheduler.ReplanReport
}

// replanLocked plans old again from `from` with extra closures and stores
// the result as a new version; the caller holds the site's lock and has
// checked that old is the latest for its interval and from lies in it.
func (s *Server) replanLocked(ctx context.Context, site *siteModel, old *nightloomv1.Plan, from time.Time,
	extra []*nightloomv1.Closure, args planArgs, origin nightloomv1.PlanOrigin) (*nightloomv1.Plan, replanOutcome, error) {
	cls := mergeClosures(append(append([]*nightloomv1.Closure(nil), old.GetClosures()...), extra...))
	if len(cls) > MaxClosuresPerPlan {
		return nil, replanOutcome{}, fieldError("closures", "the plan would carry %d closures, at most %d", len(cls), MaxClosuresPerPlan)
	}
	start, end := old.GetInterval().GetStart().AsTime(), old.GetInterval().GetEnd().AsTime()
	blocks, err := s.openBlocks(ctx, site)
	if err != nil {
		return nil, replanOutcome{}, err
	}
	steps := int64((end.Sub(start) + args.gridStep - 1) / args.gridStep)
	if bs := steps * int64(len(blocks)); bs > MaxBlockSteps {
		return nil, replanOutcome{}, failedPrecondition("%d open blocks x %d grid steps exceed %d block-steps", len(blocks), steps, MaxBlockSteps)
	}

	targets := map[string]*constraints.Target{}
	for _, b := range blocks {
		targets[b.pb.GetId()] = b.target.model
	}
	kept, inProgress, previous, err := s.keptRuns(ctx, site, old, from, cls, targets)
	if err != nil {
		return nil, replanOutcome{}, err
	}
	if old.GetNight() != nil {
		d := civilOf(old.GetNight())
		var in []*planBlock
		for _, b := range blocks {
			if nightAllowed(b.pb, d) {
				in = append(in, b)
			}
		}
		blocks = in
	}
	programs, err := s.planPrograms(ctx, site.pb.GetId(), start, nil)
	if err != nil {
		return nil, replanOutcome{}, err
	}
	job := &planJob{site: site, start: start, end: end, from: from, night: old.GetNight(), closures: cls,
		blocks: blocks, kept: kept, inProgress: inProgress, previous: previous, args: args, origin: origin,
		programs: programs}
	began := time.Now()
	body, err := s.planner.plan(ctx, job)
	s.metrics.observeSolve(strings.ToLower(strings.TrimPrefix(origin.String(), "PLAN_ORIGIN_")), time.Since(began))
	if err != nil {
		return nil, replanOutcome{}, err
	}
	body.SiteId, body.Origin, body.PreviousPlanId = site.pb.GetId(), origin, old.GetId()
	body.ReplanFrom, body.Night, body.Closures = timestamppb.New(from), old.GetNight(), cls
	stored, err := s.storePlan(ctx, body)
	if err != nil {
		return nil, replanOutcome{}, err
	}
	// Old runs after `from`, kept unchanged or not.
	keptN, changedN := keptChanged(old, stored, from)
	out := replanOutcome{kept: keptN, changed: changedN, report: job.report}
	if job.report != nil {
		out.feasible = job.report.Feasible
	}
	return stored, out, nil
}

// keptRuns splits the runs of old at from (the caller holds the site's
// lock): kept are the runs that stay, inProgress the one running at from
// (also in kept; nil if none), previous the runs after from, the starting
// timeline of a replan. targets caches the blocks' targets by block id.
func (s *Server) keptRuns(ctx context.Context, site *siteModel, old *nightloomv1.Plan, from time.Time, cls []*nightloomv1.Closure,
	targets map[string]*constraints.Target) (kept []*nightloomv1.Assignment, inProgress *nightloomv1.Assignment, previous []*nightloomv1.Assignment, err error) {
	start := old.GetInterval().GetStart().AsTime()
	// What stays: runs over before `from`, as their progress reports say
	// they went (a run reported short or interrupted ends where the report
	// ends, with the frames it kept), and the one in progress unless a
	// closure cuts it (then it ends at the closure with the frames that
	// fit, its conditions recomputed).
	reports, err := s.db.ReportsEndingAfter(ctx, site.pb.GetId(), start)
	if err != nil {
		return nil, nil, nil, err
	}
	targetOf := func(blockID string) (*constraints.Target, error) {
		if t, ok := targets[blockID]; ok {
			return t, nil
		}
		rec, err := s.db.GetBlock(ctx, blockID)
		if err != nil {
			return nil, err
		}
		b, err := blockProto(rec, nil, s.now())
		if err != nil {
			return nil, err
		}
		_, t, err := s.loadTarget(ctx, b.GetTargetId())
		if err != nil {
			return nil, err
		}
		targets[blockID] = t
		return t, nil
	}
	for _, a := range old.GetAssignments() {
		a0, a1 := a.GetPrepareStart().AsTime(), a.GetEnd().AsTime()
		if !a0.Before(from) {
			previous = append(previous, a)
			continue
		}
		if rep, ok := reportOf(reports, a); ok {
			if rep.FramesKept == 0 || !rep.End.After(a.GetStart().AsTime()) {
				continue // nothing was kept: the run did not happen
			}
			t, err := targetOf(a.GetBlockId())
			if err != nil {
				return nil, nil, nil, err
			}
			kept = append(kept, asReported(site, a, t, rep))
			continue
		}
		if !a1.After(from) {
			kept = append(kept, a)
			continue
		}
		cut := a1
		for _, c := range cls {
			c0, c1 := c.GetInterval().GetStart().AsTime(), c.GetInterval().GetEnd().AsTime()
			if overlaps(from, a1, c0, c1) && c0.Before(cut) {
				cut = c0
			}
		}
		if cut.Equal(a1) {
			inProgress = a
		} else {
			t, err := targetOf(a.GetBlockId())
			if err != nil {
				return nil, nil, nil, err
			}
			inProgress = truncateAssignment(site, a, t, cut)
		}
		if inProgress != nil {
			kept = append(kept, inProgress)
		}
	}
	return kept, inProgress, previous, nil
}

// reportSlack is how early before an assignment's preparations a report's
// interval may start and still be taken as the report of that run (the
// executor's clock and its own preparations).
const reportSlack = 5 * time.Minute

// reportOf finds the progress report of a planned run: a report for the
// same block whose interval starts between the run's preparations (less
// reportSlack) and its planned end.
func reportOf(reports []store.ProgressReport, a *nightloomv1.Assignment) (store.ProgressReport, bool) {
	p0, end := a.GetPrepareStart().AsTime().Add(-reportSlack), a.GetEnd().AsTime()
	for _, r := range reports {
		if r.BlockID == a.GetBlockId() && !r.Start.Before(p0) && r.Start.Before(end) {
			return r, true
		}
	}
	return store.ProgressReport{}, false
}

// asReported is a planned run as its report says it went: the frames kept,
// ending where the report ends, its conditions there recomputed.
func asReported(site *siteModel, a *nightloomv1.Assignment, t *constraints.Target, rep store.ProgressReport) *nightloomv1.Assignment {
	if int(a.GetFrames()) == rep.FramesKept && rep.End.Equal(a.GetEnd().AsTime()) {
		return a
	}
	out := proto.Clone(a).(*nightloomv1.Assignment)
	out.Frames, out.End = int32(rep.FramesKept), timestamppb.New(rep.End)
	o := constraints.Observe(site.cons, t, rep.End)
	out.ConditionsAtEnd = conditions(o, constraints.Quality(site.cons, o))
	return out
}

// mergeClosures sorts closures and merges overlapping or touching ones
// (their reasons joined).
func mergeClosures(cs []*nightloomv1.Closure) []*nightloomv1.Closure {
	if len(cs) == 0 {
		return nil
	}
	sorted := make([]*nightloomv1.Closure, len(cs))
	copy(sorted, cs)
	sort.SliceStable(sorted, func(i, j int) bool {
		return sorted[i].GetInterval().GetStart().AsTime().Before(sorted[j].GetInterval().GetStart().AsTime())
	})
	var out []*nightloomv1.Closure
	for _, c := range sorted {
		if n := len(out); n > 0 {
			last := out[n-1]
			if !c.GetInterval().GetStart().AsTime().After(last.GetInterval().GetEnd().AsTime()) {
				if c.GetInterval().GetEnd().AsTime().After(last.GetInterval().GetEnd().AsTime()) {
					last.Interval.End = c.GetInterval().GetEnd()
				}
				if c.GetReason() != "" && !strings.Contains(last.Reason, c.GetReason()) && len(last.Reason)+len(c.GetReason())+2 <= MaxReasonBytes {
					if last.Reason != "" {
						last.Reason += "; "
					}
					last.Reason += c.GetReason()
				}
				continue
			}
		}
		out = append(out, proto.Clone(c).(*nightloomv1.Closure))
	}
	return out
}

func (x *planService) NextAssignment(ctx context.Context, req *nightloomv1.NextAssignmentRequest) (*nightloomv1.NextAssignmentResponse, error) {
	s := x.s
	var v violations
	requiredID(&v, "site_id", req.GetSiteId())
	now := instant(&v, "now", req.GetNow(), false)
	if st := req.GetState(); st != nil {
		if p := st.GetPosition(); p != nil {
			rangeCheck(&v, "state.position.altitude_deg", p.GetAltitudeDeg(), -90, 90)
			halfOpen(&v, "state.position.azimuth_deg", p.GetAzimuthDeg(), 0, 360)
		}
		text(&v, "state.filter", st.GetFilter(), 0, MaxFilterBytes)
		instant(&v, "state.last_focus_time", st.GetLastFocusTime(), false)
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	if req.GetNow() == nil {
		now = s.now()
	}
	site, _, err := s.loadSite(ctx, req.GetSiteId())
	if err != nil {
		return nil, err
	}
	p, err := s.latestCovering(ctx, site.pb.GetId(), now)
	if err != nil {
		return nil, err
	}
	resp := &nightloomv1.NextAssignmentResponse{}
	if p == nil {
		return resp, nil
	}
	resp.PlanId, resp.PlanVersion = p.GetId(), p.GetVersion()
	reports, err := s.db.ReportsEndingAfter(ctx, site.pb.GetId(), p.GetInterval().GetStart().AsTime())
	if err != nil {
		return nil, err
	}
	type blockInfo struct {
		pb     *nightloomv1.Block
		target *constraints.Target
		req    constraints.Request
	}
	blocks := map[string]*blockInfo{}
	sites := s.newSiteCache()
	sites.sites[site.pb.GetId()] = site
	for _, a := range p.GetAssignments() {
		if !a.GetEnd().AsTime().After(now) {
			continue
		}
		bi, ok := blocks[a.GetBlockId()]
		if !ok {
			rec, err := s.db.GetBlock(ctx, a.GetBlockId())
			if errors.Is(err, store.ErrNotFound) {
				continue // deleted with its target
			}
			if err != nil {
				return nil, err
			}
			b, err := sites.blockOut(ctx, rec)
			if err != nil {
				return nil, err
			}
			tpb, t, err := s.loadTarget(ctx, b.GetTargetId())
			if errors.Is(err, store.ErrNotFound) {
				continue
			}
			if err != nil {
				return nil, err
			}
			bi = &blockInfo{pb: b, target: t, req: constraints.Request{Set: constraintSet(b.GetConstraints(), hasMagLaw(tpb)),
				Exposure: b.GetExposure().AsDuration(), NonSidereal: b.GetNonSiderealTracking()}}
			dateLimits(bi.req.Set, b)
			blocks[a.GetBlockId()] = bi
		}
		if bi.pb.GetState() != nightloomv1.BlockState_BLOCK_STATE_OPEN {
			continue
		}
		if !a.GetStart().AsTime().After(now) {
			rep, reported := reportOf(reports, a)
			if !reported {
				resp.Assignment, resp.AsPlanned = proto.Clone(a).(*nightloomv1.Assignment), true // in progress
				return resp, nil
			}
			// The run was reported short or interrupted: what it did not
			// take is open again, from now, if it still fits its
			// constraints before the run's planned end.
			rest := proto.Clone(a).(*nightloomv1.Assignment)
			rest.Frames = a.GetFrames() - int32(rep.FramesKept)
			if rest.Frames <= 0 {
				continue
			}
			rest.Start = timestamppb.New(now)
			rest.End = timestamppb.New(now.Add(site.sched.RunLength(a.GetExposure().AsDuration(), int(rest.Frames), int(a.GetDitherEveryFrames()))))
			out, _ := dispatch(site, rest, bi.pb, bi.target, &bi.req, req.GetState(), now)
			if out == nil || out.GetEnd().AsTime().After(a.GetEnd().AsTime()) {
				continue
			}
			resp.Assignment, resp.AsPlanned = out, false
			return resp, nil
		}
		out, asPlanned := dispatch(site, a, bi.pb, bi.target, &bi.req, req.GetState(), now)
		if out == nil {
			continue
		}
		resp.Assignment, resp.AsPlanned = out, asPlanned
		return resp, nil
	}
	return resp, nil
}

func (x *planService) WatchPlans(req *nightloomv1.WatchPlansRequest, stream grpc.ServerStreamingServer[nightloomv1.WatchPlansResponse]) error {
	s := x.s
	ctx := stream.Context()
	var v violations
	requiredID(&v, "site_id", req.GetSiteId())
	if err := v.err(); err != nil {
		return err
	}
	if _, err := s.db.GetSite(ctx, req.GetSiteId()); err != nil {
		return err
	}
	// Subscribe before reading the current plan, so that no version stored
	// in between is missed; versions at or below the one sent are skipped.
	w, err := s.hub.subscribe(req.GetSiteId())
	if err != nil {
		return err
	}
	defer s.hub.unsubscribe(w)
	var sent int64
	if req.GetSendCurrent() {
		rec, err := s.db.LatestPlan(ctx, req.GetSiteId())
		switch {
		case errors.Is(err, store.ErrNotFound):
		case err != nil:
			return err
		default:
			p, err := planFromRecord(rec)
			if err != nil {
				return err
			}
			if err := stream.Send(&nightloomv1.WatchPlansResponse{Plan: p}); err != nil {
				return err
			}
			sent = p.GetVersion()
		}
	}
	for {
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-w.end:
			return s.hub.ended(w)
		case p := <-w.ch:
			if p.GetVersion() <= sent {
				continue
			}
			if err := stream.Send(&nightloomv1.WatchPlansResponse{Plan: p}); err != nil {
				return err
			}
			sent = p.GetVersion()
		}
	}
}

// urgentBlocksQueued starts, in the background, a replan of each site whose
// newly queued open blocks include one at or above the replan priority
// (queue.proto).
func (s *Server) urgentBlocksQueued(blocks []*nightloomv1.Block) {
	if s.cfg.ReplanPriority < 0 {
		return
	}
	sites := map[string]bool{}
	for _, b := range blocks {
		if b.GetState() == nightloomv1.BlockState_BLOCK_STATE_OPEN && int(b.GetPriority()) >= s.cfg.ReplanPriority {
			sites[b.GetSiteId()] = true
		}
	}
	for id := range sites {
		s.goBackground(func(ctx context.Context) {
			if err := s.replanForQueued(ctx, id); err != nil {
				s.log.Warn("replan after an urgent block failed", "site", id, "err", err.Error())
			}
		})
	}
}

// goBackground runs f in a goroutine that Shutdown waits for; after the
// shutdown began it does nothing.
func (s *Server) goBackground(f func(ctx context.Context)) {
	s.bgMu.Lock()
	defer s.bgMu.Unlock()
	if s.bgCtx.Err() != nil {
		return
	}
	s.bg.Add(1)
	go func() {
		defer s.bg.Done()
		f(s.bgCtx)
	}()
}

// replanForQueued replans the site's latest plan from now when it is still
// running (now before its end).
func (s *Server) replanForQueued(ctx context.Context, siteID string) error {
	site, _, err := s.loadSite(ctx, siteID)
	if err != nil {
		return err
	}
	// A network plan is replanned with its network.
	if latest, err := s.db.LatestPlan(ctx, siteID); err == nil && s.now().Before(latest.End) {
		if old, err := planFromRecord(latest); err == nil && old.GetNetworkId() != "" {
			from := s.now()
			if from.Before(latest.Start) {
				from = latest.Start
			}
			_, err := s.replanNetwork(ctx, old.GetNetworkId(), from, nil,
				planArgs{budget: s.cfg.DefaultTimeBudget, seed: old.GetSolver().GetSeed()}, nightloomv1.PlanOrigin_PLAN_ORIGIN_QUEUED_BLOCK)
			return err
		}
	}
	unlock, err := s.lockSite(ctx, siteID)
	if err != nil {
		return err
	}
	defer unlock()
	rec, err := s.db.LatestPlan(ctx, siteID)
	if errors.Is(err, store.ErrNotFound) {
		return nil
	}
	if err != nil {
		return err
	}
	now := s.now()
	if !now.Before(rec.End) {
		return nil
	}
	old, err := planFromRecord(rec)
	if err != nil {
		return err
	}
	from := now
	if from.Before(rec.Start) {
		from = rec.Start
	}
	args := planArgs{gridStep: DefaultGridStep, budget: s.cfg.DefaultReplanBudget, seed: old.GetSolver().GetSeed(), lookahead: DefaultLookaheadNights}
	if gs := old.GetSolver().GetGridStep(); gs != nil && gs.AsDuration() >= MinGridStep && gs.AsDuration() <= MaxGridStep {
		args.gridStep = gs.AsDuration()
	}
	p, _, err := s.replanLocked(ctx, site, old, from, nil, args, nightloomv1.PlanOrigin_PLAN_ORIGIN_QUEUED_BLOCK)
	if err != nil {
		return err
	}
	s.log.Info("replanned after an urgent block", "site", siteID, "plan", p.GetId(), "version", p.GetVersion())
	return nil
}
