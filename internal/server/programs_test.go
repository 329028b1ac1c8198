package server

import (
	"slices"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/fieldmaskpb"

	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// testProgram is a program with a monthly allocation.
func testProgram(name string, alloc time.Duration) *nightloomv1.Program {
	return &nightloomv1.Program{Name: name, Description: "test share " + name, Allocation: dur(alloc),
		Period: nightloomv1.PeriodKind_PERIOD_KIND_CALENDAR_MONTH}
}

// chargeTolerance absorbs the rounding of instants to the plan's
// nanoseconds when charges are summed (no source: a bookkeeping bound).
const chargeTolerance = time.Millisecond

func near(a, b time.Duration) bool { return (a - b).Abs() <= chargeTolerance }

// TestProgramsFairShareEndToEnd, through the server on a real SQLite file:
// a program over its allocation yields to one under it at equal priority;
// the time a plan charges per program adds up, program by program, to the
// exposure and overheads of its assignments and, over all programs, to the
// plan's exposure_time plus overhead_time; and the time used adds up to the
// reported runs (exposure plus overheads), in the usage call as well.
func TestProgramsFairShareEndToEnd(t *testing.T) {
	e := newEnv(t, "", func(c *Config) { c.ReplanPriority = -1 })
	f := e.seed(t, 0)
	site, nebula := f.site.GetId(), f.targets[0].GetId()
	programs := nightloomv1.NewProgramServiceClient(e.conn)
	for _, p := range []*nightloomv1.Program{testProgram("over", time.Hour), testProgram("under", 10*time.Hour)} {
		if _, err := programs.CreateProgram(e.admin(), &nightloomv1.CreateProgramRequest{Program: p}); err != nil {
			t.Fatal(err)
		}
	}
	op := as(RoleOperator, e)
	queue := func(b *nightloomv1.Block) *nightloomv1.Block {
		t.Helper()
		r, err := e.queue.QueueBlocks(op, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{b}})
		if err != nil {
			t.Fatal(err)
		}
		return r.GetBlocks()[0]
	}

	// "over" has used 2.5 h of its 1 h this month: a run of 60 frames of
	// 120 s (2 h exposure) over 2.5 h.
	t0 := e.clock.Now()
	hist := testBlock(site, f.targets[1].GetId(), "R", 60, 5)
	hist.Program = "over"
	hist = queue(hist)
	e.clock.Set(t0.Add(4 * time.Hour))
	runStart, runEnd := t0.Add(30*time.Minute), t0.Add(3*time.Hour)
	if _, err := e.queue.ReportProgress(as(RoleTelescope, e), &nightloomv1.ReportProgressRequest{Report: &nightloomv1.ProgressReport{
		ReportId: "hist-1", BlockId: hist.GetId(), FramesKept: 60, Outcome: nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE,
		Interval: &nightloomv1.TimeInterval{Start: ts(runStart), End: ts(runEnd)}}}); err != nil {
		t.Fatal(err)
	}

	// Two blocks alike in all but their program, each wanting more than
	// the night holds; the one over its allocation is queued first, so that
	// no tie-break by queue order favours the other (without programs the
	// first-queued block takes the night: 147 frames to 0 when tried).
	mk := func(program string) *nightloomv1.Block {
		b := testBlock(site, nebula, "L", 200, 5)
		b.Program = program
		return b
	}
	overBlk, underBlk := queue(mk("over")), queue(mk("under"))
	if overBlk.GetProgram() != "over" {
		t.Fatalf("queued block's program %q, want over", overBlk.GetProgram())
	}

	mp, err := e.plans.MakePlan(op, &nightloomv1.MakePlanRequest{SiteId: site,
		Span: &nightloomv1.MakePlanRequest_Night{Night: testNight}, LookaheadNights: proto.Int32(0), TimeBudget: dur(0)})
	if err != nil {
		t.Fatal(err)
	}
	plan := mp.GetPlans()[0]
	frames := map[string]int32{}
	for _, a := range plan.GetAssignments() {
		frames[a.GetBlockId()] += a.GetFrames()
	}
	t.Logf("frames planned: under %d, over %d", frames[underBlk.GetId()], frames[overBlk.GetId()])
	if frames[underBlk.GetId()] == 0 || frames[underBlk.GetId()] <= frames[overBlk.GetId()] {
		t.Errorf("the program under its allocation got %d frames, the one over it %d; want the first to get more",
			frames[underBlk.GetId()], frames[overBlk.GetId()])
	}

	// Charges: one per program in creation order (no block without one).
	byProgram := map[string]*nightloomv1.ProgramCharge{}
	var names []string
	for _, c := range plan.GetCharges() {
		byProgram[c.GetProgram()] = c
		names = append(names, c.GetProgram())
	}
	if !slices.Equal(names, []string{"over", "under"}) {
		t.Fatalf("plan charges %v, want [over under]", names)
	}
	// Fair-share factors, program.proto: clamp(1 + 0.5 (1 - used/alloc), 0.25, 2).
	for name, want := range map[string]float64{"over": 0.25, "under": 1.5} {
		if got := byProgram[name].GetFairShare(); got != want {
			t.Errorf("%s: fair share %v, want %v", name, got, want)
		}
	}
	if got := byProgram["over"].GetUsed().AsDuration(); got != runEnd.Sub(runStart) {
		t.Errorf("over: used before the plan %v, want the reported run's %v", got, runEnd.Sub(runStart))
	}

	// Per program, the assignments' own exposure and overheads (setup
	// before each run, readouts and dithers in it) against the charge.
	in := f.site.GetInstrument()
	var sumExp, sumOver time.Duration
	for name, blk := range map[string]string{"over": overBlk.GetId(), "under": underBlk.GetId()} {
		var exp, over time.Duration
		for _, a := range plan.GetAssignments() {
			if a.GetBlockId() != blk {
				continue
			}
			n := time.Duration(a.GetFrames())
			exp += n * a.GetExposure().AsDuration()
			over += a.GetStart().AsTime().Sub(a.GetPrepareStart().AsTime()) + n*in.GetReadout().AsDuration()
			if d := a.GetDitherEveryFrames(); d > 0 && a.GetFrames() > 1 {
				over += time.Duration((a.GetFrames()-1)/d) * in.GetDither().AsDuration()
			}
		}
		c := byProgram[name]
		if !near(c.GetExposure().AsDuration(), exp) || !near(c.GetOverheads().AsDuration(), over) {
			t.Errorf("%s: charged exposure %v + overheads %v; its assignments have %v + %v (tolerance %v)", name,
				c.GetExposure().AsDuration(), c.GetOverheads().AsDuration(), exp, over, chargeTolerance)
		}
		sumExp += c.GetExposure().AsDuration()
		sumOver += c.GetOverheads().AsDuration()
	}
	obj := plan.GetObjective()
	if want := obj.GetExposureTime().AsDuration() + obj.GetOverheadTime().AsDuration(); !near(sumExp+sumOver, want) || sumExp+sumOver == 0 {
		t.Errorf("charges add up to %v; the plan's exposure plus overheads are %v (tolerance %v)", sumExp+sumOver, want, chargeTolerance)
	}

	// Usage: used from the report (exposure 2 h, overheads 0.5 h), planned
	// from the current plan, allocation and period of the month.
	u, err := programs.GetProgramUsage(as(RoleViewer, e), &nightloomv1.GetProgramUsageRequest{At: ts(t0.Add(5 * time.Hour))})
	if err != nil {
		t.Fatal(err)
	}
	if len(u.GetUsage()) != 2 {
		t.Fatalf("usage of %d programs, want 2", len(u.GetUsage()))
	}
	for _, x := range u.GetUsage() {
		name := x.GetProgram().GetName()
		c := byProgram[name]
		wantUsed, wantExp := time.Duration(0), time.Duration(0)
		if name == "over" {
			wantUsed, wantExp = runEnd.Sub(runStart), 60*2*time.Minute
		}
		if x.GetUsed().AsDuration() != wantUsed || x.GetUsedExposure().AsDuration() != wantExp {
			t.Errorf("%s: used %v (exposure %v), want %v (%v): the reported run's interval and frames", name,
				x.GetUsed().AsDuration(), x.GetUsedExposure().AsDuration(), wantUsed, wantExp)
		}
		if got, want := x.GetPlanned().AsDuration(), c.GetExposure().AsDuration()+c.GetOverheads().AsDuration(); got != want {
			t.Errorf("%s: planned %v, want the plan's charge %v", name, got, want)
		}
		if got := x.GetPeriod().GetStart().AsTime(); !got.Equal(time.Date(2031, 3, 1, 0, 0, 0, 0, time.UTC)) {
			t.Errorf("%s: period starts %v, want 2031-03-01", name, got)
		}
	}
	// The telescope stops the first run of "under" halfway (clouds) and
	// reports the frames it kept; a replan from then starts from that use
	// and still adds up.
	var first *nightloomv1.Assignment
	for _, a := range plan.GetAssignments() {
		if a.GetBlockId() == underBlk.GetId() {
			first = a
			break
		}
	}
	kept := first.GetFrames() / 2
	stop := first.GetStart().AsTime().Add(time.Duration(kept) * (first.GetExposure().AsDuration() + in.GetReadout().AsDuration()))
	e.clock.Set(stop.Add(time.Minute))
	if _, err := e.queue.ReportProgress(as(RoleTelescope, e), &nightloomv1.ReportProgressRequest{Report: &nightloomv1.ProgressReport{
		ReportId: "run-1", BlockId: first.GetBlockId(), FramesKept: kept, Outcome: nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_INTERRUPTED,
		Interval: &nightloomv1.TimeInterval{Start: first.GetStart(), End: ts(stop)}, PlanId: plan.GetId()}}); err != nil {
		t.Fatal(err)
	}
	rp, err := e.plans.Replan(op, &nightloomv1.ReplanRequest{SiteId: site, From: ts(stop), TimeBudget: dur(0)})
	if err != nil {
		t.Fatal(err)
	}
	var rsum time.Duration
	for _, c := range rp.GetPlan().GetCharges() {
		rsum += c.GetExposure().AsDuration() + c.GetOverheads().AsDuration()
		if c.GetProgram() == "under" {
			// The report names its plan: the run's setup there counts too.
			setup := first.GetStart().AsTime().Sub(first.GetPrepareStart().AsTime())
			if want := stop.Sub(first.GetStart().AsTime()) + setup; c.GetUsed().AsDuration() != want || setup <= 0 {
				t.Errorf("replan: under used %v before it, want the reported run's %v plus its planned setup %v", c.GetUsed().AsDuration(),
					stop.Sub(first.GetStart().AsTime()), setup)
			}
		}
	}
	ro := rp.GetPlan().GetObjective()
	if want := ro.GetExposureTime().AsDuration() + ro.GetOverheadTime().AsDuration(); !near(rsum, want) || rsum == 0 {
		t.Errorf("replan: charges add up to %v; its exposure plus overheads are %v (tolerance %v)", rsum, want, chargeTolerance)
	}

	// A month later the allocation renewed: nothing used, no current plan.
	u, err = programs.GetProgramUsage(as(RoleViewer, e), &nightloomv1.GetProgramUsageRequest{At: ts(t0.AddDate(0, 1, 0))})
	if err != nil {
		t.Fatal(err)
	}
	for _, x := range u.GetUsage() {
		if x.GetUsed().AsDuration() != 0 || x.GetPlanned().AsDuration() != 0 {
			t.Errorf("%s next month: used %v, planned %v; want 0", x.GetProgram().GetName(), x.GetUsed().AsDuration(), x.GetPlanned().AsDuration())
		}
	}
}

// TestProgramValidation: bad programs and bad program references are
// INVALID_ARGUMENT naming the field and store nothing; a program in use
// cannot be deleted; the name cannot change.
func TestProgramValidation(t *testing.T) {
	e := newEnv(t, "", func(c *Config) { c.ReplanPriority = -1 })
	f := e.seed(t, 0)
	site := f.site.GetId()
	programs := nightloomv1.NewProgramServiceClient(e.conn)
	adm := e.admin()
	held := testProgram("held", time.Hour)
	held.SiteId = site
	for _, p := range []*nightloomv1.Program{testProgram("club", time.Hour), held} {
		if _, err := programs.CreateProgram(adm, &nightloomv1.CreateProgramRequest{Program: p}); err != nil {
			t.Fatal(err)
		}
	}
	other, err := e.sites.CreateSite(adm, &nightloomv1.CreateSiteRequest{Site: testSite()})
	if err != nil {
		t.Fatal(err)
	}

	bad := func(mut func(p *nightloomv1.Program)) *nightloomv1.Program {
		p := testProgram("fresh", time.Hour)
		mut(p)
		return p
	}
	fixed := &nightloomv1.TimeInterval{Start: ts(time.Date(2031, 1, 1, 0, 0, 0, 0, time.UTC)), End: ts(time.Date(2031, 7, 1, 0, 0, 0, 0, time.UTC))}
	cases := []struct {
		name  string
		p     *nightloomv1.Program
		field string
		code  codes.Code
	}{
		{"no name", bad(func(p *nightloomv1.Program) { p.Name = "" }), "program.name", codes.InvalidArgument},
		{"name with a space", bad(func(p *nightloomv1.Program) { p.Name = "my share" }), "program.name", codes.InvalidArgument},
		{"no allocation", bad(func(p *nightloomv1.Program) { p.Allocation = nil }), "program.allocation", codes.InvalidArgument},
		{"allocation over a year", bad(func(p *nightloomv1.Program) { p.Allocation = dur(400 * 24 * time.Hour) }), "program.allocation", codes.InvalidArgument},
		{"no period", bad(func(p *nightloomv1.Program) { p.Period = 0 }), "program.period", codes.InvalidArgument},
		{"fixed without interval", bad(func(p *nightloomv1.Program) { p.Period = nightloomv1.PeriodKind_PERIOD_KIND_FIXED }), "program.fixed_period", codes.InvalidArgument},
		{"interval on a monthly program", bad(func(p *nightloomv1.Program) { p.FixedPeriod = fixed }), "program.fixed_period", codes.InvalidArgument},
		{"unknown site", bad(func(p *nightloomv1.Program) { p.SiteId = "site-nosuch" }), "", codes.NotFound},
		{"name taken", testProgram("club", time.Hour), "", codes.AlreadyExists},
	}
	for _, c := range cases {
		before := e.snapshot(t)
		_, err := programs.CreateProgram(adm, &nightloomv1.CreateProgramRequest{Program: c.p})
		wantCode(t, err, c.code, c.name)
		if c.field != "" && !slices.Contains(violationFields(err), c.field) {
			t.Errorf("%s: violations %v, want %s", c.name, violationFields(err), c.field)
		}
		if after := e.snapshot(t); after != before {
			t.Errorf("%s: the refused call changed the store", c.name)
		}
	}
	ok := bad(func(p *nightloomv1.Program) {
		p.Period, p.FixedPeriod = nightloomv1.PeriodKind_PERIOD_KIND_FIXED, fixed
	})
	if _, err := programs.CreateProgram(adm, &nightloomv1.CreateProgramRequest{Program: ok}); err != nil {
		t.Fatalf("a semester program: %v", err)
	}

	// Block references: unknown, held to another site, badly formed.
	op := as(RoleOperator, e)
	for _, c := range []struct {
		name, program, site string
	}{
		{"unknown program", "nosuch", site},
		{"program of another site", "held", other.GetSite().GetId()},
		{"bad name", "no such", site},
	} {
		b := testBlock(c.site, f.targets[0].GetId(), "L", 10, 5)
		b.Program = c.program
		_, err := e.queue.QueueBlocks(op, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{b}})
		wantCode(t, err, codes.InvalidArgument, c.name)
		if !slices.Contains(violationFields(err), "blocks[0].program") {
			t.Errorf("%s: violations %v, want blocks[0].program", c.name, violationFields(err))
		}
	}
	b := testBlock(site, f.targets[0].GetId(), "L", 10, 5)
	b.Program = "held"
	qr, err := e.queue.QueueBlocks(op, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{b}})
	if err != nil {
		t.Fatal(err)
	}
	_, err = e.queue.UpdateBlock(op, &nightloomv1.UpdateBlockRequest{Block: &nightloomv1.Block{Id: qr.GetBlocks()[0].GetId(), Program: "club"},
		UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"program"}}})
	wantCode(t, err, codes.InvalidArgument, "UpdateBlock of program")

	_, err = programs.DeleteProgram(adm, &nightloomv1.DeleteProgramRequest{Name: "held"})
	wantCode(t, err, codes.FailedPrecondition, "delete a program a queued block spends")
	_, err = programs.UpdateProgram(adm, &nightloomv1.UpdateProgramRequest{Program: &nightloomv1.Program{Name: "club", Description: "x"},
		UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"name"}}})
	wantCode(t, err, codes.InvalidArgument, "update of the name")
	up, err := programs.UpdateProgram(adm, &nightloomv1.UpdateProgramRequest{Program: &nightloomv1.Program{Name: "club", Allocation: dur(3 * time.Hour)},
		UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"allocation"}}})
	if err != nil || up.GetProgram().GetAllocation().AsDuration() != 3*time.Hour || up.GetProgram().GetDescription() != "test share club" {
		t.Fatalf("update allocation: %v, %v", up, err)
	}
	if _, err := e.queue.WithdrawBlock(op, &nightloomv1.WithdrawBlockRequest{BlockId: qr.GetBlocks()[0].GetId()}); err != nil {
		t.Fatal(err)
	}
	if _, err := programs.DeleteProgram(adm, &nightloomv1.DeleteProgramRequest{Name: "held"}); err != nil {
		t.Fatalf("delete once no queued block spends it: %v", err)
	}
	gb, err := e.queue.GetBlock(op, &nightloomv1.GetBlockRequest{BlockId: qr.GetBlocks()[0].GetId()})
	if err != nil || gb.GetBlock().GetProgram() != "" {
		t.Errorf("withdrawn block after its program's deletion: program %q, err %v; want none", gb.GetBlock().GetProgram(), err)
	}
}

// TestProgramsAcrossNights: a MakePlan of several nights counts what its
// earlier nights plan for a program as used by the later ones, so a
// program's share falls night by night as its allocation is planned away.
func TestProgramsAcrossNights(t *testing.T) {
	e := newEnv(t, "", func(c *Config) { c.ReplanPriority = -1 })
	f := e.seed(t, 0)
	site := f.site.GetId()
	programs := nightloomv1.NewProgramServiceClient(e.conn)
	if _, err := programs.CreateProgram(e.admin(), &nightloomv1.CreateProgramRequest{Program: testProgram("club", 4*time.Hour)}); err != nil {
		t.Fatal(err)
	}
	b := testBlock(site, f.targets[0].GetId(), "L", 400, 5)
	b.Program = "club"
	op := as(RoleOperator, e)
	if _, err := e.queue.QueueBlocks(op, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{b}}); err != nil {
		t.Fatal(err)
	}
	mp, err := e.plans.MakePlan(op, &nightloomv1.MakePlanRequest{SiteId: site, Span: &nightloomv1.MakePlanRequest_Night{Night: testNight},
		Nights: 3, LookaheadNights: proto.Int32(0), TimeBudget: dur(0)})
	if err != nil {
		t.Fatal(err)
	}
	var before time.Duration // planned by the earlier nights
	for i, p := range mp.GetPlans() {
		if len(p.GetCharges()) != 1 || p.GetCharges()[0].GetProgram() != "club" {
			t.Fatalf("night %d: charges %v, want club's alone", i+1, p.GetCharges())
		}
		c := p.GetCharges()[0]
		if c.GetUsed().AsDuration() != before {
			t.Errorf("night %d: used before it %v, want what the earlier nights plan, %v", i+1, c.GetUsed().AsDuration(), before)
		}
		// Fair-share factor, program.proto, with the allocation of 4 h.
		want := min(2, max(0.25, 1+0.5*(1-before.Seconds()/(4*time.Hour).Seconds())))
		if d := c.GetFairShare() - want; d > 1e-12 || d < -1e-12 {
			t.Errorf("night %d: fair share %v, want %v", i+1, c.GetFairShare(), want)
		}
		before += c.GetExposure().AsDuration() + c.GetOverheads().AsDuration()
	}
	if before == 0 {
		t.Fatal("the nights plan nothing for club")
	}
}

// FuzzProgram feeds arbitrary CreateProgramRequest bytes to the program
// validator: it must not panic, and a program it accepts has a period that
// contains its own start (a fixed program's interval start, or any instant
// for a monthly one) and no period longer than MaxFixedPeriod.
func FuzzProgram(f *testing.F) {
	for _, p := range []*nightloomv1.Program{
		testProgram("club", 20*time.Hour),
		{Name: "thesis", Allocation: dur(6 * time.Hour), Period: nightloomv1.PeriodKind_PERIOD_KIND_FIXED, SiteId: "site-1",
			FixedPeriod: &nightloomv1.TimeInterval{Start: ts(time.Date(2026, 10, 1, 0, 0, 0, 0, time.UTC)), End: ts(time.Date(2027, 4, 1, 0, 0, 0, 0, time.UTC))}},
	} {
		b, err := proto.Marshal(&nightloomv1.CreateProgramRequest{Program: p})
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		var req nightloomv1.CreateProgramRequest
		if proto.Unmarshal(data, &req) != nil {
			return
		}
		var v violations
		checkProgram(&v, "program", req.GetProgram())
		if !v.ok() {
			return
		}
		p := req.GetProgram()
		at := time.Date(2031, 3, 15, 0, 0, 0, 0, time.UTC)
		if p.GetPeriod() == nightloomv1.PeriodKind_PERIOD_KIND_FIXED {
			at = p.GetFixedPeriod().GetStart().AsTime()
		}
		start, end, ok := programPeriod(p, at)
		if !ok || start.After(at) || !end.After(at) || end.Sub(start) > MaxFixedPeriod {
			t.Fatalf("accepted program %v: period at %v is %v..%v (ok %v)", p, at, start, end, ok)
		}
		if p.GetAllocation().AsDuration() <= 0 {
			t.Fatalf("accepted program %v with allocation %v", p, p.GetAllocation().AsDuration())
		}
	})
}
