package server

import (
	"context"
	"errors"
	"google.golang.org/grpc/status"
	"io"
	"math"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/fieldmaskpb"

	"github.com/nightloom/nightloom/constraints"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// Happy paths of every RPC, and the behaviour their .proto comments state.

func TestSiteService(t *testing.T) {
	e := newEnv(t, "")
	ctx := e.admin()
	in := testSite()
	in.PressureHpa, in.TemperatureC, in.ZenithSkyBrightnessVMagArcsec2, in.SolarAvoidanceDeg = nil, nil, nil, nil
	cs, err := e.sites.CreateSite(ctx, &nightloomv1.CreateSiteRequest{Site: in})
	if err != nil {
		t.Fatal(err)
	}
	s := cs.GetSite()
	if s.GetId() == "" || s.GetCreateTime() == nil || s.GetUpdateTime() == nil {
		t.Fatalf("created site lacks id or times: %v", s)
	}
	// Defaults of site.proto. ISA pressure at 900 m: 1013.25 (1 -
	// 2.25577e-5 * 900)^5.25588 = 909.70 hPa (the formula of site.proto,
	// evaluated independently with python3; the US Standard Atmosphere
	// 1976 table gives 909.7 hPa at 900 m, from memory).
	if p := s.GetPressureHpa(); math.Abs(p-909.70) > 0.01 {
		t.Errorf("default pressure %v hPa, want 909.70 (ISA at 900 m)", p)
	}
	if s.GetTemperatureC() != 10 || s.GetZenithSkyBrightnessVMagArcsec2() != 21.6 || s.GetSolarAvoidanceDeg() != 15 {
		t.Errorf("defaults: temperature %v, zenith %v, solar avoidance %v; want 10, 21.6, 15",
			s.GetTemperatureC(), s.GetZenithSkyBrightnessVMagArcsec2(), s.GetSolarAvoidanceDeg())
	}
	g, err := e.sites.GetSite(as(RoleViewer, e), &nightloomv1.GetSiteRequest{SiteId: s.GetId()})
	if err != nil || !proto.Equal(g.GetSite(), s) {
		t.Fatalf("GetSite = %v, %v; want %v", g.GetSite(), err, s)
	}
	_, err = e.sites.GetSite(ctx, &nightloomv1.GetSiteRequest{SiteId: "site-nonesuch"})
	wantCode(t, err, codes.NotFound, "GetSite of an unknown id")

	// Paging: 5 sites in pages of 2.
	for i := 0; i < 4; i++ {
		if _, err := e.sites.CreateSite(ctx, &nightloomv1.CreateSiteRequest{Site: testSite()}); err != nil {
			t.Fatal(err)
		}
	}
	var all []string
	tok := ""
	for pages := 0; ; pages++ {
		l, err := e.sites.ListSites(ctx, &nightloomv1.ListSitesRequest{PageSize: 2, PageToken: tok})
		if err != nil {
			t.Fatal(err)
		}
		if len(l.GetSites()) > 2 {
			t.Fatalf("page of %d sites, asked for 2", len(l.GetSites()))
		}
		for _, x := range l.GetSites() {
			all = append(all, x.GetId())
		}
		if tok = l.GetNextPageToken(); tok == "" {
			break
		}
		if pages > 5 {
			t.Fatal("paging does not end")
		}
	}
	if len(all) != 5 || all[0] != s.GetId() {
		t.Fatalf("listed %v, want 5 sites starting with %s", all, s.GetId())
	}

	// Update with a mask: name and one nested field; the rest stays.
	upd := &nightloomv1.Site{Id: s.GetId(), Name: "Hollowmere Ridge (east dome)", LatitudeDeg: -80,
		Mount: &nightloomv1.Mount{Settle: dur(9 * time.Second)}}
	u, err := e.sites.UpdateSite(ctx, &nightloomv1.UpdateSiteRequest{Site: upd,
		UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"name", "mount.settle"}}})
	if err != nil {
		t.Fatal(err)
	}
	got := u.GetSite()
	if got.GetName() != upd.GetName() || got.GetMount().GetSettle().AsDuration() != 9*time.Second ||
		got.GetLatitudeDeg() != s.GetLatitudeDeg() || got.GetMount().GetPrimaryAxis().GetRateDegPerS() != 4 {
		t.Errorf("after masked update: %v", got)
	}
	if !got.GetUpdateTime().AsTime().After(s.GetUpdateTime().AsTime()) && !got.GetUpdateTime().AsTime().Equal(s.GetUpdateTime().AsTime()) {
		t.Errorf("update time went back")
	}
	// An empty mask replaces every writable field.
	full := testSite()
	full.Id, full.Name, full.Horizon = s.GetId(), "Hollowmere Ridge (rebuilt)", nil
	u, err = e.sites.UpdateSite(ctx, &nightloomv1.UpdateSiteRequest{Site: full})
	if err != nil {
		t.Fatal(err)
	}
	if len(u.GetSite().GetHorizon()) != 0 || u.GetSite().GetName() != full.GetName() || !u.GetSite().GetCreateTime().AsTime().Equal(s.GetCreateTime().AsTime()) {
		t.Errorf("after full update: %v", u.GetSite())
	}

	// Delete: refused while blocks refer to the site, unless forced.
	tg, err := e.targets.CreateTarget(ctx, &nightloomv1.CreateTargetRequest{Target: testFixed("Thimbleweed Nebula", 101.5, 18.2)})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := e.queue.QueueBlocks(ctx, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{
		testBlock(s.GetId(), tg.GetTarget().GetId(), "L", 10, 5)}}); err != nil {
		t.Fatal(err)
	}
	_, err = e.sites.DeleteSite(ctx, &nightloomv1.DeleteSiteRequest{SiteId: s.GetId()})
	wantCode(t, err, codes.FailedPrecondition, "DeleteSite with blocks")
	if _, err := e.sites.DeleteSite(ctx, &nightloomv1.DeleteSiteRequest{SiteId: s.GetId(), Force: true}); err != nil {
		t.Fatalf("forced DeleteSite: %v", err)
	}
	_, err = e.sites.GetSite(ctx, &nightloomv1.GetSiteRequest{SiteId: s.GetId()})
	wantCode(t, err, codes.NotFound, "GetSite after delete")
	lb, err := e.queue.ListBlocks(ctx, &nightloomv1.ListBlocksRequest{SiteId: s.GetId()})
	if err != nil || len(lb.GetBlocks()) != 0 {
		t.Errorf("blocks of the deleted site: %v, %v", lb.GetBlocks(), err)
	}
	_, err = e.sites.DeleteSite(ctx, &nightloomv1.DeleteSiteRequest{SiteId: s.GetId()})
	wantCode(t, err, codes.NotFound, "DeleteSite twice")
}

func TestTargetService(t *testing.T) {
	e := newEnv(t, "")
	ctx := e.admin()
	fixed := testFixed("Quillfen Galaxy", 152, 31)
	fixed.GetFixed().ProperMotion = &nightloomv1.ProperMotion{RaCosDecMasPerYr: 120, DecMasPerYr: -40, EpochJulianYear: 2016}
	cf, err := e.targets.CreateTarget(ctx, &nightloomv1.CreateTargetRequest{Target: fixed})
	if err != nil {
		t.Fatal(err)
	}
	co, err := e.targets.CreateTarget(ctx, &nightloomv1.CreateTargetRequest{Target: testComet()})
	if err != nil {
		t.Fatal(err)
	}
	g, err := e.targets.GetTarget(as(RoleViewer, e), &nightloomv1.GetTargetRequest{TargetId: co.GetTarget().GetId()})
	if err != nil || !proto.Equal(g.GetTarget(), co.GetTarget()) {
		t.Fatalf("GetTarget: %v %v", g, err)
	}
	l, err := e.targets.ListTargets(ctx, &nightloomv1.ListTargetsRequest{})
	if err != nil || len(l.GetTargets()) != 2 || l.GetNextPageToken() != "" {
		t.Fatalf("ListTargets: %v %v", l, err)
	}
	// Naming one member of the oneof replaces the position.
	u, err := e.targets.UpdateTarget(ctx, &nightloomv1.UpdateTargetRequest{
		Target:     &nightloomv1.Target{Id: cf.GetTarget().GetId(), Position: testFixed("", 10, -20).GetPosition()},
		UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"fixed"}}})
	if err != nil {
		t.Fatal(err)
	}
	if u.GetTarget().GetFixed().GetRaDeg() != 10 || u.GetTarget().GetFixed().GetProperMotion() != nil || u.GetTarget().GetName() != "Quillfen Galaxy" {
		t.Errorf("after update: %v", u.GetTarget())
	}
	// A target used by a block cannot be deleted.
	site, err := e.sites.CreateSite(ctx, &nightloomv1.CreateSiteRequest{Site: testSite()})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := e.queue.QueueBlocks(ctx, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{
		testBlock(site.GetSite().GetId(), co.GetTarget().GetId(), "L", 5, 3)}}); err != nil {
		t.Fatal(err)
	}
	_, err = e.targets.DeleteTarget(ctx, &nightloomv1.DeleteTargetRequest{TargetId: co.GetTarget().GetId()})
	wantCode(t, err, codes.FailedPrecondition, "DeleteTarget used by a block")
	if _, err := e.targets.DeleteTarget(ctx, &nightloomv1.DeleteTargetRequest{TargetId: cf.GetTarget().GetId()}); err != nil {
		t.Fatal(err)
	}
	_, err = e.targets.GetTarget(ctx, &nightloomv1.GetTargetRequest{TargetId: cf.GetTarget().GetId()})
	wantCode(t, err, codes.NotFound, "GetTarget after delete")
}

func TestQueueService(t *testing.T) {
	e := newEnv(t, "")
	f := e.seed(t, 0)
	op := as(RoleOperator, e)
	site, comet := f.site.GetId(), f.targets[4].GetId()
	b0 := testBlock(site, f.targets[0].GetId(), "L", 10, 5)
	b1 := testBlock(site, comet, "R", 6, 3)
	b1.NonSiderealTracking = true
	b1.LatestDate = &nightloomv1.LocalDate{Year: 2031, Month: 3, Day: 8} // over at the test clock (03-10 12:00 UTC)
	req := &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{b0, b1}, RequestId: "night-2031-03-15/batch-1"}
	q, err := e.queue.QueueBlocks(op, req)
	if err != nil {
		t.Fatal(err)
	}
	if len(q.GetBlocks()) != 2 || q.GetDuplicate() {
		t.Fatalf("QueueBlocks: %v", q)
	}
	open, expired := q.GetBlocks()[0], q.GetBlocks()[1]
	if open.GetState() != nightloomv1.BlockState_BLOCK_STATE_OPEN || expired.GetState() != nightloomv1.BlockState_BLOCK_STATE_EXPIRED {
		t.Errorf("states %v, %v; want OPEN, EXPIRED", open.GetState(), expired.GetState())
	}
	// The same request again: the same blocks, nothing new.
	before := e.snapshot(t)
	q2, err := e.queue.QueueBlocks(op, req)
	if err != nil || !q2.GetDuplicate() || q2.GetBlocks()[0].GetId() != open.GetId() {
		t.Fatalf("retried QueueBlocks: %v %v", q2, err)
	}
	if after := e.snapshot(t); after != before {
		t.Errorf("a retried QueueBlocks wrote: %+v -> %+v", before, after)
	}
	// The same request id with other blocks, fewer blocks, or more.
	for _, bs := range [][]*nightloomv1.Block{{b0, b0}, {b0}, {b0, b1, b0}} {
		_, err = e.queue.QueueBlocks(op, &nightloomv1.QueueBlocksRequest{Blocks: bs, RequestId: req.GetRequestId()})
		wantCode(t, err, codes.AlreadyExists, "request id reused")
	}

	gb, err := e.queue.GetBlock(as(RoleTelescope, e), &nightloomv1.GetBlockRequest{BlockId: open.GetId()})
	if err != nil || !proto.Equal(gb.GetBlock(), open) {
		t.Fatalf("GetBlock: %v %v, want %v", gb, err, open)
	}
	for _, c := range []struct {
		states []nightloomv1.BlockState
		want   int
	}{
		{nil, 2},
		{[]nightloomv1.BlockState{nightloomv1.BlockState_BLOCK_STATE_OPEN}, 1},
		{[]nightloomv1.BlockState{nightloomv1.BlockState_BLOCK_STATE_EXPIRED}, 1},
		{[]nightloomv1.BlockState{nightloomv1.BlockState_BLOCK_STATE_OPEN, nightloomv1.BlockState_BLOCK_STATE_WITHDRAWN}, 1},
		{[]nightloomv1.BlockState{nightloomv1.BlockState_BLOCK_STATE_COMPLETED}, 0},
	} {
		l, err := e.queue.ListBlocks(op, &nightloomv1.ListBlocksRequest{SiteId: site, States: c.states})
		if err != nil || len(l.GetBlocks()) != c.want {
			t.Errorf("ListBlocks %v: %d blocks (%v), want %d", c.states, len(l.GetBlocks()), err, c.want)
		}
	}
	l, err := e.queue.ListBlocks(op, &nightloomv1.ListBlocksRequest{TargetId: comet})
	if err != nil || len(l.GetBlocks()) != 1 || l.GetBlocks()[0].GetId() != expired.GetId() {
		t.Errorf("ListBlocks of the comet: %v %v", l, err)
	}

	// Withdraw: open -> withdrawn, twice is fine; expired refused.
	w, err := e.queue.WithdrawBlock(op, &nightloomv1.WithdrawBlockRequest{BlockId: open.GetId(), Reason: "observer left"})
	if err != nil || w.GetBlock().GetState() != nightloomv1.BlockState_BLOCK_STATE_WITHDRAWN {
		t.Fatalf("WithdrawBlock: %v %v", w, err)
	}
	if _, err := e.queue.WithdrawBlock(op, &nightloomv1.WithdrawBlockRequest{BlockId: open.GetId()}); err != nil {
		t.Errorf("second WithdrawBlock: %v", err)
	}
	_, err = e.queue.WithdrawBlock(op, &nightloomv1.WithdrawBlockRequest{BlockId: expired.GetId()})
	wantCode(t, err, codes.FailedPrecondition, "WithdrawBlock of an expired block")
}

// TestReportProgressIdempotent: a report counts once whatever the retries,
// frames are capped at frames wanted, the block completes, and a report id
// reused with other content is refused without counting.
func TestReportProgressIdempotent(t *testing.T) {
	e := newEnv(t, "")
	f := e.seed(t, 1)
	b := f.blocks[0] // 10 frames wanted
	tel := as(RoleTelescope, e)
	t0 := time.Date(2031, 3, 15, 21, 0, 0, 0, time.UTC)
	e.clock.Set(t0.Add(time.Hour)) // reports come after the run
	rep := func(id string, frames int32, outcome nightloomv1.ProgressOutcome) *nightloomv1.ReportProgressRequest {
		return &nightloomv1.ReportProgressRequest{Report: &nightloomv1.ProgressReport{ReportId: id, BlockId: b.GetId(), FramesKept: frames,
			Interval: &nightloomv1.TimeInterval{Start: ts(t0), End: ts(t0.Add(20 * time.Minute))}, Outcome: outcome, Note: "seeing 2.1\""}}
	}
	r1, err := e.queue.ReportProgress(tel, rep("run-0001", 6, nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE))
	if err != nil {
		t.Fatal(err)
	}
	if r1.GetDuplicate() || r1.GetFramesCounted() != 6 || r1.GetBlock().GetFramesDone() != 6 {
		t.Fatalf("first report: %v", r1)
	}
	for i := 0; i < 3; i++ {
		r, err := e.queue.ReportProgress(tel, rep("run-0001", 6, nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE))
		if err != nil || !r.GetDuplicate() || r.GetFramesCounted() != 0 || r.GetBlock().GetFramesDone() != 6 {
			t.Fatalf("retry %d: %v %v", i, r, err)
		}
	}
	before := e.snapshot(t)
	_, err = e.queue.ReportProgress(tel, rep("run-0001", 7, nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE))
	wantCode(t, err, codes.AlreadyExists, "report id reused with other frames")
	if after := e.snapshot(t); after != before {
		t.Error("a refused report wrote")
	}
	r2, err := e.queue.ReportProgress(tel, rep("run-0002", 9, nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_INTERRUPTED))
	if err != nil {
		t.Fatal(err)
	}
	if r2.GetFramesCounted() != 4 || r2.GetBlock().GetFramesDone() != 10 || r2.GetBlock().GetState() != nightloomv1.BlockState_BLOCK_STATE_COMPLETED {
		t.Fatalf("capped report: counted %d, done %d, state %v; want 4, 10, COMPLETED", r2.GetFramesCounted(),
			r2.GetBlock().GetFramesDone(), r2.GetBlock().GetState())
	}
	// A report for a block no longer open is recorded the same way.
	r3, err := e.queue.ReportProgress(tel, rep("run-0003", 0, nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_SKIPPED))
	if err != nil || r3.GetFramesCounted() != 0 || r3.GetDuplicate() {
		t.Fatalf("report after completion: %v %v", r3, err)
	}
	if err := e.srv.Storage().(interface{ IntegrityCheck(context.Context) error }).IntegrityCheck(context.Background()); err != nil {
		t.Fatalf("integrity: %v", err)
	}
}

// TestPlanLifecycle: MakePlan over two nights, GetPlan, ListPlans (newest
// first, summaries, night filter, paging), Replan with a closure, and
// NextAssignment following the latest plan.
func TestPlanLifecycle(t *testing.T) {
	e := newEnv(t, "")
	f := e.seed(t, 16)
	op := as(RoleOperator, e)
	site := f.site.GetId()
	mk, err := e.plans.MakePlan(op, &nightloomv1.MakePlanRequest{SiteId: site, Span: &nightloomv1.MakePlanRequest_Night{Night: testNight},
		Nights: 2, LookaheadNights: proto.Int32(3), TimeBudget: dur(200 * time.Millisecond), Seed: 7})
	if err != nil {
		t.Fatal(err)
	}
	if len(mk.GetPlans()) != 2 {
		t.Fatalf("MakePlan made %d plans, want 2", len(mk.GetPlans()))
	}
	p1, p2 := mk.GetPlans()[0], mk.GetPlans()[1]
	if p1.GetVersion() != 1 || p2.GetVersion() != 2 || p1.GetNight().GetDay() != 15 || p2.GetNight().GetDay() != 16 {
		t.Fatalf("versions %d, %d nights %v, %v", p1.GetVersion(), p2.GetVersion(), p1.GetNight(), p2.GetNight())
	}
	if len(p1.GetAssignments()) == 0 {
		t.Fatalf("no assignments on night 1: unplaced %v", p1.GetUnplaced())
	}
	checkPlan(t, e, f, p1)
	checkPlan(t, e, f, p2)
	// Later nights count earlier nights' frames: no block gets more frames
	// over both nights than it wants.
	frames := map[string]int32{}
	for _, p := range mk.GetPlans() {
		for _, a := range p.GetAssignments() {
			frames[a.GetBlockId()] += a.GetFrames()
		}
	}
	for _, b := range f.blocks {
		if frames[b.GetId()] > b.GetFramesWanted() {
			t.Errorf("block %s: %d frames planned over two nights, wants %d", b.GetId(), frames[b.GetId()], b.GetFramesWanted())
		}
	}

	g, err := e.plans.GetPlan(as(RoleTelescope, e), &nightloomv1.GetPlanRequest{PlanId: p1.GetId()})
	if err != nil || !proto.Equal(g.GetPlan(), p1) {
		t.Fatalf("GetPlan differs from MakePlan's plan: %v", err)
	}
	l, err := e.plans.ListPlans(op, &nightloomv1.ListPlansRequest{SiteId: site, PageSize: 1})
	if err != nil || len(l.GetPlans()) != 1 || l.GetPlans()[0].GetVersion() != 2 || l.GetNextPageToken() == "" {
		t.Fatalf("ListPlans page 1: %v %v", l, err)
	}
	if s := l.GetPlans()[0]; len(s.GetAssignments()) != 0 || s.GetAssignmentCount() != int32(len(p2.GetAssignments())) {
		t.Errorf("summary has %d assignments, count %d; want 0 and %d", len(s.GetAssignments()), s.GetAssignmentCount(), len(p2.GetAssignments()))
	}
	l2, err := e.plans.ListPlans(op, &nightloomv1.ListPlansRequest{SiteId: site, PageSize: 1, PageToken: l.GetNextPageToken()})
	if err != nil || len(l2.GetPlans()) != 1 || l2.GetPlans()[0].GetVersion() != 1 || l2.GetNextPageToken() != "" {
		t.Fatalf("ListPlans page 2: %v %v", l2, err)
	}
	ln, err := e.plans.ListPlans(op, &nightloomv1.ListPlansRequest{SiteId: site, Night: testNight})
	if err != nil || len(ln.GetPlans()) != 1 || ln.GetPlans()[0].GetId() != p1.GetId() {
		t.Fatalf("ListPlans of one night: %v %v", ln, err)
	}
	_, err = e.plans.ListPlans(op, &nightloomv1.ListPlansRequest{SiteId: site, Night: testNight, PageToken: l.GetNextPageToken()})
	wantCode(t, err, codes.InvalidArgument, "ListPlans token with another filter")

	// Replan night 1 from the middle of its third run with a closure that
	// starts 10 minutes later: runs before stay, the one in progress is
	// cut at the closure, nothing runs in it.
	a := p1.GetAssignments()[min(2, len(p1.GetAssignments())-1)]
	from := a.GetStart().AsTime().Add(time.Minute)
	closed := &nightloomv1.Closure{Interval: &nightloomv1.TimeInterval{Start: ts(from.Add(10 * time.Minute)), End: ts(from.Add(70 * time.Minute))}, Reason: "cloud bank"}
	rp, err := e.plans.Replan(op, &nightloomv1.ReplanRequest{SiteId: site, PlanId: p1.GetId(), From: ts(from),
		Closures: []*nightloomv1.Closure{closed}, TimeBudget: dur(200 * time.Millisecond), Seed: 7})
	if err != nil {
		t.Fatal(err)
	}
	np := rp.GetPlan()
	if np.GetVersion() != 3 || np.GetOrigin() != nightloomv1.PlanOrigin_PLAN_ORIGIN_REPLAN || np.GetPreviousPlanId() != p1.GetId() ||
		!np.GetReplanFrom().AsTime().Equal(from) || len(np.GetClosures()) != 1 {
		t.Fatalf("replanned plan header: v%d %v prev %s from %v closures %v", np.GetVersion(), np.GetOrigin(), np.GetPreviousPlanId(),
			np.GetReplanFrom().AsTime(), np.GetClosures())
	}
	checkPlan(t, e, f, np)
	c0, c1 := closed.GetInterval().GetStart().AsTime(), closed.GetInterval().GetEnd().AsTime()
	for _, x := range np.GetAssignments() {
		if overlaps(x.GetPrepareStart().AsTime(), x.GetEnd().AsTime(), c0, c1) {
			t.Errorf("assignment %s %v-%v overlaps the closure", x.GetBlockId(), x.GetPrepareStart().AsTime(), x.GetEnd().AsTime())
		}
	}
	for i, old := range p1.GetAssignments() {
		if !old.GetEnd().AsTime().After(from) && !proto.Equal(old, np.GetAssignments()[i]) {
			t.Errorf("finished assignment %d changed in the replan", i)
		}
	}
	if cut := np.GetAssignments()[min(2, len(p1.GetAssignments())-1)]; cut.GetBlockId() != a.GetBlockId() || cut.GetEnd().AsTime().After(c0) || cut.GetFrames() >= a.GetFrames() {
		t.Errorf("the run in progress was not cut at the closure: %v (was %d frames to %v)", cut, a.GetFrames(), a.GetEnd().AsTime())
	}
	if rp.GetAssignmentsKept()+rp.GetAssignmentsChanged() == 0 {
		t.Errorf("replan counted no old assignment after from")
	}
	// Every old run starting after from is explained, with a reason unless
	// kept; the kept ones are among the feasible ones.
	keptRuns := 0
	for _, rc := range rp.GetRunChanges() {
		switch {
		case rc.GetChange() == nightloomv1.RunChangeKind_RUN_CHANGE_KIND_UNSPECIFIED:
			t.Errorf("run change without a kind: %v", rc)
		case rc.GetChange() == nightloomv1.RunChangeKind_RUN_CHANGE_KIND_KEPT:
			keptRuns++
		case rc.GetReason() == "":
			t.Errorf("run change without a reason: %v", rc)
		}
	}
	if keptRuns > int(rp.GetAssignmentsFeasible()) {
		t.Errorf("%d runs kept of %d feasible", keptRuns, rp.GetAssignmentsFeasible())
	}
	// Replanning the superseded version is refused.
	_, err = e.plans.Replan(op, &nightloomv1.ReplanRequest{SiteId: site, PlanId: p1.GetId(), From: ts(from)})
	wantCode(t, err, codes.FailedPrecondition, "Replan of a superseded plan")
	_, err = e.plans.Replan(op, &nightloomv1.ReplanRequest{SiteId: site, PlanId: np.GetId(), From: ts(np.GetInterval().GetEnd().AsTime().Add(time.Minute))})
	wantCode(t, err, codes.FailedPrecondition, "Replan from after the plan's end")

	// Dispatch: the run in progress, then the next run after it.
	tel := as(RoleTelescope, e)
	cur := np.GetAssignments()[0]
	na, err := e.plans.NextAssignment(tel, &nightloomv1.NextAssignmentRequest{SiteId: site, Now: ts(cur.GetStart().AsTime().Add(time.Second))})
	if err != nil {
		t.Fatal(err)
	}
	if na.GetPlanId() != np.GetId() || !proto.Equal(na.GetAssignment(), cur) || !na.GetAsPlanned() {
		t.Fatalf("NextAssignment in the first run: plan %s (want %s), %v as planned %v", na.GetPlanId(), np.GetId(), na.GetAssignment(), na.GetAsPlanned())
	}
	// After reporting the first block complete, its runs are skipped.
	b0 := cur.GetBlockId()
	var want *nightloomv1.Assignment
	for _, x := range np.GetAssignments()[1:] {
		if x.GetBlockId() != b0 {
			want = x
			break
		}
	}
	blk, err := e.queue.GetBlock(tel, &nightloomv1.GetBlockRequest{BlockId: b0})
	if err != nil {
		t.Fatal(err)
	}
	// The block's frames in one report: an interval long enough to hold
	// them, ending where the current run ends (reports must be possible).
	wanted := blk.GetBlock().GetFramesWanted()
	frame := blk.GetBlock().GetExposure().AsDuration() + 4*time.Second
	e.clock.Set(cur.GetEnd().AsTime())
	if _, err := e.queue.ReportProgress(tel, &nightloomv1.ReportProgressRequest{Report: &nightloomv1.ProgressReport{
		ReportId: "complete-" + b0, BlockId: b0, FramesKept: wanted,
		Interval: &nightloomv1.TimeInterval{Start: ts(cur.GetEnd().AsTime().Add(-time.Duration(wanted) * frame)), End: cur.GetEnd()}, Outcome: nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE, PlanId: np.GetId()}}); err != nil {
		t.Fatal(err)
	}
	na, err = e.plans.NextAssignment(tel, &nightloomv1.NextAssignmentRequest{SiteId: site, Now: cur.GetEnd()})
	if err != nil {
		t.Fatal(err)
	}
	if want != nil && na.GetAssignment().GetBlockId() != want.GetBlockId() {
		t.Errorf("NextAssignment after completing %s: block %s, want %s", b0, na.GetAssignment().GetBlockId(), want.GetBlockId())
	}
	// With the telescope's state: a slew from the other side of the sky
	// and another filter change the overheads.
	nb := na.GetAssignment()
	if nb != nil {
		st := &nightloomv1.TelescopeState{Position: &nightloomv1.HorizontalPosition{AltitudeDeg: 20, AzimuthDeg: constraints.Wrap360(nb.GetPointing().GetAzimuthDeg() + 170)},
			Filter: "Ha-not-" + nb.GetFilter()}
		na2, err := e.plans.NextAssignment(tel, &nightloomv1.NextAssignmentRequest{SiteId: site, Now: cur.GetEnd(), State: st})
		if err != nil {
			t.Fatal(err)
		}
		x := na2.GetAssignment()
		if na2.GetAsPlanned() || x.GetOverheads().GetSlew().AsDuration() <= nb.GetOverheads().GetSlew().AsDuration() ||
			x.GetOverheads().GetFilterChange().AsDuration() != 10*time.Second {
			t.Errorf("NextAssignment with a far position and another filter: as planned %v, overheads %v (plan's %v)",
				na2.GetAsPlanned(), x.GetOverheads(), nb.GetOverheads())
		}
		total := x.GetStart().AsTime().Sub(x.GetPrepareStart().AsTime())
		oh := x.GetOverheads()
		if sum := oh.GetSlew().AsDuration() + oh.GetSettle().AsDuration() + oh.GetAcquisition().AsDuration() + oh.GetFilterChange().AsDuration() +
			oh.GetFocus().AsDuration() + oh.GetMeridianFlip().AsDuration(); sum != total {
			t.Errorf("overheads add up to %v, start - prepare_start is %v", sum, total)
		}
	}
	// No plan covers a day in 2035.
	na, err = e.plans.NextAssignment(tel, &nightloomv1.NextAssignmentRequest{SiteId: site, Now: ts(time.Date(2035, 1, 1, 0, 0, 0, 0, time.UTC))})
	if err != nil || na.GetAssignment() != nil || na.GetPlanId() != "" {
		t.Errorf("NextAssignment outside every plan: %v %v", na, err)
	}
}

// checkPlan checks a plan's invariants from plan.proto: assignments in time
// order and not overlapping, inside the interval, end - start = frames x
// (exposure + readout) + dithers x dither, overheads adding up to start -
// prepare_start, frames within what blocks want, pointings and conditions
// finite, and a quality in (0, 1].
func checkPlan(t *testing.T, e *env, f fixture, p *nightloomv1.Plan) {
	t.Helper()
	in := f.site.GetInstrument()
	readout, dither := in.GetReadout().AsDuration(), in.GetDither().AsDuration()
	want := map[string]int32{}
	for _, b := range f.blocks {
		want[b.GetId()] = b.GetFramesWanted()
	}
	got := map[string]int32{}
	var prevEnd time.Time
	start, end := p.GetInterval().GetStart().AsTime(), p.GetInterval().GetEnd().AsTime()
	for i, a := range p.GetAssignments() {
		ps, s, en := a.GetPrepareStart().AsTime(), a.GetStart().AsTime(), a.GetEnd().AsTime()
		if i > 0 && ps.Before(prevEnd.Add(-time.Millisecond)) {
			t.Errorf("v%d assignment %d prepares at %v before the previous run ends at %v", p.GetVersion(), i, ps, prevEnd)
		}
		if ps.Before(start.Add(-time.Millisecond)) || en.After(end.Add(time.Millisecond)) {
			t.Errorf("v%d assignment %d (%v-%v) outside the interval %v-%v", p.GetVersion(), i, ps, en, start, end)
		}
		n := time.Duration(a.GetFrames())
		length := n * (a.GetExposure().AsDuration() + readout)
		if k := a.GetDitherEveryFrames(); k > 0 && a.GetFrames() > 1 {
			length += time.Duration((a.GetFrames()-1)/k) * dither
		}
		if d := en.Sub(s) - length; d > time.Millisecond || d < -time.Millisecond {
			t.Errorf("v%d assignment %d: end - start = %v, frames say %v", p.GetVersion(), i, en.Sub(s), length)
		}
		oh := a.GetOverheads()
		sum := oh.GetSlew().AsDuration() + oh.GetSettle().AsDuration() + oh.GetAcquisition().AsDuration() +
			oh.GetFilterChange().AsDuration() + oh.GetFocus().AsDuration() + oh.GetMeridianFlip().AsDuration()
		if d := s.Sub(ps) - sum; d > time.Microsecond || d < -time.Microsecond {
			t.Errorf("v%d assignment %d: overheads %v != start - prepare_start %v", p.GetVersion(), i, sum, s.Sub(ps))
		}
		pt, c := a.GetPointing(), a.GetConditionsAtStart()
		if pt == nil || !finite(pt.GetRaIcrsDeg(), pt.GetDecIcrsDeg(), pt.GetAltitudeDeg(), pt.GetAzimuthDeg(), pt.GetHourAngleDeg()) ||
			pt.GetAltitudeDeg() < 0 || c.GetAirmass() < 1 || !(c.GetQuality() > 0 && c.GetQuality() <= 1) {
			t.Errorf("v%d assignment %d: pointing %v conditions %v", p.GetVersion(), i, pt, c)
		}
		if a.GetTargetName() == "" || a.GetFilter() == "" {
			t.Errorf("v%d assignment %d lacks target name or filter", p.GetVersion(), i)
		}
		got[a.GetBlockId()] += a.GetFrames()
		prevEnd = en
	}
	for id, n := range got {
		if w, ok := want[id]; ok && n > w {
			t.Errorf("v%d: block %s gets %d frames, wants %d", p.GetVersion(), id, n, w)
		}
	}
	for _, u := range p.GetUnplaced() {
		if u.GetReason() == nightloomv1.Reason_REASON_UNSPECIFIED || u.GetDetail() == "" {
			t.Errorf("v%d: unplaced %s without reason or detail: %v", p.GetVersion(), u.GetBlockId(), u)
		}
	}
	if p.GetSolver().GetGridSteps() == 0 || p.GetObjective() == nil {
		t.Errorf("v%d: solver %v objective %v", p.GetVersion(), p.GetSolver(), p.GetObjective())
	}
}

// TestMakePlanDeterministic: the same request with the same data and seed
// gives the same plan (plan.proto), when iterations, not the budget, end
// the search.
func TestMakePlanDeterministic(t *testing.T) {
	e := newEnv(t, "")
	f := e.seed(t, 10)
	req := &nightloomv1.MakePlanRequest{SiteId: f.site.GetId(), Span: &nightloomv1.MakePlanRequest_Night{Night: testNight},
		LookaheadNights: proto.Int32(0), TimeBudget: dur(30 * time.Second), Seed: 42}
	a, err := e.plans.MakePlan(as(RoleOperator, e), req)
	if err != nil {
		t.Fatal(err)
	}
	b, err := e.plans.MakePlan(as(RoleOperator, e), req)
	if err != nil {
		t.Fatal(err)
	}
	pa, pb := a.GetPlans()[0], b.GetPlans()[0]
	if len(pa.GetAssignments()) != len(pb.GetAssignments()) {
		t.Fatalf("%d vs %d assignments", len(pa.GetAssignments()), len(pb.GetAssignments()))
	}
	for i := range pa.GetAssignments() {
		if !proto.Equal(pa.GetAssignments()[i], pb.GetAssignments()[i]) {
			t.Fatalf("assignment %d differs:\n%v\n%v", i, pa.GetAssignments()[i], pb.GetAssignments()[i])
		}
	}
	if pa.GetObjective().GetTotal() != pb.GetObjective().GetTotal() {
		t.Errorf("objective %v vs %v", pa.GetObjective().GetTotal(), pb.GetObjective().GetTotal())
	}
}

// TestWatchPlans: a watcher gets every new version in order: the one
// MakePlan stores, a Replan's, and the replan that queuing an urgent block
// makes while the plan runs; send_current starts with the latest.
func TestWatchPlans(t *testing.T) {
	e := newEnv(t, "")
	f := e.seed(t, 8)
	site := f.site.GetId()
	ctx, cancel := context.WithCancel(as(RoleTelescope, e))
	defer cancel()
	st, err := e.plans.WatchPlans(ctx, &nightloomv1.WatchPlansRequest{SiteId: site})
	if err != nil {
		t.Fatal(err)
	}
	recv := func(what string) *nightloomv1.Plan {
		t.Helper()
		type res struct {
			r   *nightloomv1.WatchPlansResponse
			err error
		}
		ch := make(chan res, 1)
		go func() { r, err := st.Recv(); ch <- res{r, err} }()
		select {
		case r := <-ch:
			if r.err != nil {
				t.Fatalf("%s: Recv: %v", what, r.err)
			}
			return r.r.GetPlan()
		case <-time.After(20 * time.Second):
			t.Fatalf("%s: no plan within 20 s", what)
		}
		return nil
	}
	op := as(RoleOperator, e)
	// The stream is registered once the server handles it; a plan made
	// before that would not be pushed. Wait for the hub to count it.
	waitWatchers(t, e, 1)
	mk, err := e.plans.MakePlan(op, &nightloomv1.MakePlanRequest{SiteId: site, Span: &nightloomv1.MakePlanRequest_Night{Night: testNight},
		LookaheadNights: proto.Int32(0), TimeBudget: dur(100 * time.Millisecond)})
	if err != nil {
		t.Fatal(err)
	}
	p1 := recv("MakePlan")
	if p1.GetId() != mk.GetPlans()[0].GetId() || p1.GetVersion() != 1 || len(p1.GetAssignments()) != len(mk.GetPlans()[0].GetAssignments()) {
		t.Fatalf("watched plan %s v%d, want %s v1, whole", p1.GetId(), p1.GetVersion(), mk.GetPlans()[0].GetId())
	}
	from := p1.GetInterval().GetStart().AsTime().Add(2 * time.Hour)
	rp, err := e.plans.Replan(op, &nightloomv1.ReplanRequest{SiteId: site, From: ts(from), TimeBudget: dur(100 * time.Millisecond),
		Closures: []*nightloomv1.Closure{{Interval: &nightloomv1.TimeInterval{Start: ts(from), End: ts(from.Add(time.Hour))}, Reason: "roof fault"}}})
	if err != nil {
		t.Fatal(err)
	}
	p2 := recv("Replan")
	if p2.GetId() != rp.GetPlan().GetId() || p2.GetVersion() != 2 || p2.GetOrigin() != nightloomv1.PlanOrigin_PLAN_ORIGIN_REPLAN {
		t.Fatalf("watched %s v%d %v, want the replan %s v2", p2.GetId(), p2.GetVersion(), p2.GetOrigin(), rp.GetPlan().GetId())
	}
	// An urgent block queued while the plan runs: the clock is inside the
	// night.
	e.clock.Set(from.Add(90 * time.Minute))
	urgent := testBlock(site, f.targets[2].GetId(), "L", 6, 9)
	if _, err := e.queue.QueueBlocks(op, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{urgent}}); err != nil {
		t.Fatal(err)
	}
	p3 := recv("urgent block")
	if p3.GetVersion() != 3 || p3.GetOrigin() != nightloomv1.PlanOrigin_PLAN_ORIGIN_QUEUED_BLOCK || p3.GetPreviousPlanId() != p2.GetId() {
		t.Fatalf("watched v%d %v prev %s, want v3 QUEUED_BLOCK after %s", p3.GetVersion(), p3.GetOrigin(), p3.GetPreviousPlanId(), p2.GetId())
	}
	// A low-priority block does not replan.
	if _, err := e.queue.QueueBlocks(op, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{testBlock(site, f.targets[2].GetId(), "R", 6, 2)}}); err != nil {
		t.Fatal(err)
	}
	// A second watcher with send_current starts with v3.
	st2, err := e.plans.WatchPlans(ctx, &nightloomv1.WatchPlansRequest{SiteId: site, SendCurrent: true})
	if err != nil {
		t.Fatal(err)
	}
	first, err := st2.Recv()
	if err != nil || first.GetPlan().GetVersion() != 3 {
		t.Fatalf("send_current: %v %v", first, err)
	}
	e.srv.bg.Wait()
	if n := e.planCount(t, site); n != 3 {
		t.Errorf("site has %d plan versions, want 3 (the low-priority block must not replan)", n)
	}
	cancel()
	if _, err := st.Recv(); err == nil || errors.Is(err, io.EOF) {
		t.Errorf("Recv after cancel: %v, want a cancellation", err)
	}
}

func (e *env) planCount(t testing.TB, site string) int64 {
	p, err := e.srv.Storage().LatestPlan(context.Background(), site)
	if err != nil {
		t.Fatal(err)
	}
	return p.Version
}

func waitWatchers(t testing.TB, e *env, n int) {
	t.Helper()
	deadline := time.Now().Add(10 * time.Second)
	for e.srv.hub.count() < n {
		if time.Now().After(deadline) {
			t.Fatalf("%d watchers registered, want %d", e.srv.hub.count(), n)
		}
		time.Sleep(2 * time.Millisecond)
	}
}

// TestPlanFlipCadenceDither: a long run through the meridian on the german
// equatorial mount is split at the flip into two assignments (the second
// with the flip as its overhead), a cadence block's runs are numbered, and
// dithers count in the run lengths (checkPlan).
func TestPlanFlipCadenceDither(t *testing.T) {
	e := newEnv(t, "")
	f := e.seed(t, 0)
	site := f.site.GetId()
	long := testBlock(site, f.targets[1].GetId(), "L", 60, 9) // 2 h 4 min of frames, transits near 23:10 UTC
	long.MinRunFrames = 60
	long.DitherEveryFrames = 5
	cad := testBlock(site, f.targets[0].GetId(), "R", 12, 5)
	cad.MinRunFrames, cad.MaxRunFrames, cad.Exposure = 2, 2, dur(60*time.Second)
	cad.Cadence = &nightloomv1.Cadence{Interval: dur(time.Hour), Tolerance: dur(15 * time.Minute)}
	q, err := e.queue.QueueBlocks(e.admin(), &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{long, cad}})
	if err != nil {
		t.Fatal(err)
	}
	f.blocks = q.GetBlocks()
	mk, err := e.plans.MakePlan(e.admin(), &nightloomv1.MakePlanRequest{SiteId: site, Span: &nightloomv1.MakePlanRequest_Night{Night: testNight},
		LookaheadNights: proto.Int32(0), TimeBudget: dur(500 * time.Millisecond), Seed: 3})
	if err != nil {
		t.Fatal(err)
	}
	p := mk.GetPlans()[0]
	checkPlan(t, e, f, p)
	longID, cadID := q.GetBlocks()[0].GetId(), q.GetBlocks()[1].GetId()
	var flips, cadRuns int
	var longFrames int32
	for i, a := range p.GetAssignments() {
		switch a.GetBlockId() {
		case longID:
			longFrames += a.GetFrames()
			if fl := a.GetOverheads().GetMeridianFlip().AsDuration(); fl > 0 {
				flips++
				prev := p.GetAssignments()[i-1]
				if prev.GetBlockId() != longID || !a.GetPrepareStart().AsTime().Equal(prev.GetEnd().AsTime()) || fl < 150*time.Second {
					t.Errorf("flip part %d: prepare %v after %v (block %s), flip %v", i, a.GetPrepareStart().AsTime(), prev.GetEnd().AsTime(), prev.GetBlockId(), fl)
				}
				if a.GetPointing().GetHourAngleDeg() < -5 {
					t.Errorf("after the flip the hour angle is %v deg, before the flip zone", a.GetPointing().GetHourAngleDeg())
				}
			}
		case cadID:
			cadRuns++
			if a.GetCadenceRun() != int32(cadRuns) {
				t.Errorf("cadence run %d numbered %d", cadRuns, a.GetCadenceRun())
			}
		}
	}
	if longFrames != 60 || flips != 1 {
		t.Errorf("long block: %d frames in the plan with %d flips; want 60 and 1 (unplaced %v)", longFrames, flips, p.GetUnplaced())
	}
	if cadRuns < 2 {
		t.Errorf("cadence block ran %d times", cadRuns)
	}
	// The plan reports the series: the runs delivered, and a reason for
	// every skipped slot.
	if len(p.GetCadence()) != 1 || p.GetCadence()[0].GetBlockId() != cadID || int(p.GetCadence()[0].GetRunsDelivered()) != cadRuns {
		t.Errorf("cadence series %v, want %s with %d runs", p.GetCadence(), cadID, cadRuns)
	}
	for _, cs := range p.GetCadence() {
		for _, s := range cs.GetSkipped() {
			if s.GetReason() == nightloomv1.SlotReason_SLOT_REASON_UNSPECIFIED || s.GetAt() == nil {
				t.Errorf("skipped slot without a reason: %v", s)
			}
		}
	}
	if o := p.GetObjective(); o.GetCadencePoints() <= 0 {
		t.Errorf("objective without cadence points: %v", o)
	}
}

// MakePlan stops when the call's deadline passes, however long the time
// budget, and says so with DEADLINE_EXCEEDED; nothing is stored for it.
// The latency from the deadline to the answer is logged (issue 10 asks for
// under 100 ms; the bound checked here is loose so that a loaded machine
// does not fail the test; the log shows the figure).
func TestPlanningStopsAtDeadline(t *testing.T) {
	e := newEnv(t, "")
	// 600 blocks: the search of 120 (the iteration cap, or converged) may
	// end before the 300 ms deadline, and the call then succeeds.
	f := e.seed(t, 600)
	op := as(RoleOperator, e)
	quick := func() time.Duration {
		t.Helper()
		t0 := time.Now()
		if _, err := e.plans.MakePlan(op, &nightloomv1.MakePlanRequest{SiteId: f.site.GetId(),
			Span: &nightloomv1.MakePlanRequest_Night{Night: testNight}, TimeBudget: dur(0), LookaheadNights: proto.Int32(0)}); err != nil {
			t.Fatal(err)
		}
		return time.Since(t0)
	}
	// The time of a plan with no search, on this machine now (the race
	// detector or a loaded machine make it long).
	base := quick()
	ok := 1
	for _, budget := range []time.Duration{50 * time.Millisecond, 5 * time.Second} {
		for _, deadline := range []time.Duration{30 * time.Millisecond, 300 * time.Millisecond} {
			ctx, cancel := context.WithTimeout(op, deadline)
			t0 := time.Now()
			_, err := e.plans.MakePlan(ctx, &nightloomv1.MakePlanRequest{SiteId: f.site.GetId(),
				Span: &nightloomv1.MakePlanRequest_Night{Night: testNight}, TimeBudget: dur(budget)})
			late := time.Since(t0) - deadline
			cancel()
			if err == nil {
				ok++
			}
			if budget < deadline {
				continue // may finish first
			}
			if c := status.Code(err); c != codes.DeadlineExceeded {
				t.Errorf("budget %v, deadline %v: code %v (%v), want DeadlineExceeded", budget, deadline, c, err)
			}
			// The server must have stopped too, not only the client: the
			// next call for the site waits for the site's planning lock,
			// and would wait for most of the 5 s budget if the search went
			// on.
			next := quick()
			ok++
			t.Logf("budget %v, deadline %v: answered %v after the deadline (%v); the next call took %v (%v with nothing running)",
				budget, deadline, late.Round(time.Millisecond), err, next.Round(time.Millisecond), base.Round(time.Millisecond))
			if late > 2*time.Second || next > 2*base+2*time.Second {
				t.Errorf("budget %v, deadline %v: answered %v after the deadline, the next call took %v (%v alone)", budget, deadline, late, next, base)
			}
		}
	}
	lp, err := e.plans.ListPlans(as(RoleViewer, e), &nightloomv1.ListPlansRequest{SiteId: f.site.GetId()})
	if err != nil {
		t.Fatal(err)
	}
	if len(lp.GetPlans()) != ok {
		t.Errorf("%d plans stored, %d calls succeeded", len(lp.GetPlans()), ok)
	}
}

// TestReplanReusesLookahead: MakePlan computes the urgency lookahead once
// (scheduler.LookaheadCache on the server); a Replan of the same night
// with progress reported in between reuses every block-night of it.
func TestReplanReusesLookahead(t *testing.T) {
	e := newEnv(t, "")
	f := e.seed(t, 12)
	op := as(RoleOperator, e)
	site := f.site.GetId()
	mk, err := e.plans.MakePlan(op, &nightloomv1.MakePlanRequest{SiteId: site, Span: &nightloomv1.MakePlanRequest_Night{Night: testNight},
		TimeBudget: dur(50 * time.Millisecond), Seed: 3}) // the default lookahead, as Replan's
	if err != nil {
		t.Fatal(err)
	}
	cache := e.srv.planner.(schedulerPlanner).lookahead
	made := cache.Stats()
	if made.Misses == 0 {
		t.Fatalf("MakePlan computed no lookahead: %+v", made)
	}
	p1 := mk.GetPlans()[0]
	if len(p1.GetAssignments()) == 0 {
		t.Fatal("no assignments to replan from")
	}
	a := p1.GetAssignments()[0]
	from := a.GetEnd().AsTime()
	if _, err := e.plans.Replan(op, &nightloomv1.ReplanRequest{SiteId: site, PlanId: p1.GetId(), From: ts(from),
		TimeBudget: dur(50 * time.Millisecond), Seed: 3}); err != nil {
		t.Fatal(err)
	}
	after := cache.Stats()
	if after.Misses != made.Misses {
		t.Errorf("Replan recomputed %d block-nights of the lookahead (misses %d -> %d); want 0", after.Misses-made.Misses, made.Misses, after.Misses)
	}
	if after.Hits <= made.Hits {
		t.Errorf("Replan reused no lookahead: hits %d -> %d", made.Hits, after.Hits)
	}
}
