package server

// Networks over a real gRPC server on loopback TCP and a real SQLite file
// (issue 17): the invented Hollowmere Ridge Observatory in Spain and the
// invented Saltbush Flat Observatory in New Mexico, about 104 deg of
// longitude (7 h) apart, share one queue. Which site sees a target better
// is not assumed: the tests ask the server's own Visibility at each site
// and check the plan against it, and the targets are chosen so that the
// two answers differ (a southern target is higher from the southern site,
// a northern one from the northern).

import (
	"context"
	"fmt"
	"slices"
	"sync"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/protobuf/proto"

	"github.com/nightloom/nightloom/internal/pgtest"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// testSiteWest is the invented Saltbush Flat Observatory: a fork mount at
// 34.2 N, 108.5 W, 2100 m, a 200 mm telescope without an H-alpha filter.
func testSiteWest() *nightloomv1.Site {
	s := testSite()
	s.Name, s.LatitudeDeg, s.LongitudeDeg, s.ElevationM, s.TimeZone = "Saltbush Flat Observatory", 34.2, -108.5, 2100, "America/Denver"
	s.Horizon = nil
	s.Instrument.Filters = []string{"L", "R", "G", "B"}
	s.Instrument.ApertureMm = 200
	return s
}

// netEnv is a server with the two sites in one network and targets.
type netEnv struct {
	*env
	nets        nightloomv1.NetworkServiceClient
	east, west  string // site ids
	network     string
	south, nrth string // target ids: dec -20 and dec +65, both near the meridian at local midnight
}

// newNetEnv starts the server on a fresh SQLite file, or on the
// PostgreSQL database of dsn when given.
func newNetEnv(t *testing.T, dsn ...string) *netEnv {
	t.Helper()
	db := ""
	if len(dsn) > 0 {
		db = dsn[0]
	}
	e := newEnv(t, db, withTCP(), func(c *Config) { c.ReplanPriority = -1 })
	ne := &netEnv{env: e, nets: nightloomv1.NewNetworkServiceClient(e.conn)}
	ctx := e.admin()
	east := testSite()
	east.Instrument.ApertureMm = 300
	for _, s := range []struct {
		site *nightloomv1.Site
		id   *string
	}{{east, &ne.east}, {testSiteWest(), &ne.west}} {
		r, err := e.sites.CreateSite(ctx, &nightloomv1.CreateSiteRequest{Site: s.site})
		if err != nil {
			t.Fatal(err)
		}
		*s.id = r.GetSite().GetId()
	}
	for _, tg := range []struct {
		t  *nightloomv1.Target
		id *string
	}{{testFixed("Duskwater Nebula", 165, -20), &ne.south}, {testFixed("Frostgate Galaxy", 165, 65), &ne.nrth}} {
		r, err := e.targets.CreateTarget(ctx, &nightloomv1.CreateTargetRequest{Target: tg.t})
		if err != nil {
			t.Fatal(err)
		}
		*tg.id = r.GetTarget().GetId()
	}
	n, err := ne.nets.CreateNetwork(ctx, &nightloomv1.CreateNetworkRequest{Network: &nightloomv1.Network{
		Name: "Two Roofs", SiteIds: []string{ne.east, ne.west}, Description: "one queue, two continents"}})
	if err != nil {
		t.Fatal(err)
	}
	ne.network = n.GetNetwork().GetId()
	return ne
}

// netBlock is a network block of a target.
func (ne *netEnv) block(target, filter string, frames int32) *nightloomv1.Block {
	b := testBlock("", target, filter, frames, 5)
	b.NetworkId = ne.network
	b.Constraints.MaxAirmass = proto.Float64(3)
	return b
}

func (ne *netEnv) queue(t *testing.T, bs ...*nightloomv1.Block) []*nightloomv1.Block {
	t.Helper()
	r, err := ne.env.queue.QueueBlocks(as(RoleOperator, ne.env), &nightloomv1.QueueBlocksRequest{Blocks: bs})
	if err != nil {
		t.Fatal(err)
	}
	return r.GetBlocks()
}

func (ne *netEnv) makePlan(t *testing.T) *nightloomv1.NetworkNight {
	t.Helper()
	r, err := ne.nets.MakeNetworkPlan(as(RoleOperator, ne.env), &nightloomv1.MakeNetworkPlanRequest{NetworkId: ne.network,
		Night: testNight, TimeBudget: dur(300 * time.Millisecond), Seed: 7})
	if err != nil {
		t.Fatal(err)
	}
	if len(r.GetNights()) != 1 || len(r.GetNights()[0].GetPlans()) != 2 {
		t.Fatalf("MakeNetworkPlan: %d nights, want 1 with a plan per site: %v", len(r.GetNights()), r)
	}
	return r.GetNights()[0]
}

// framesAt sums a block's planned frames per site.
func framesAt(nn *nightloomv1.NetworkNight, block string) map[string]int {
	out := map[string]int{}
	for _, p := range nn.GetPlans() {
		for _, a := range p.GetAssignments() {
			if a.GetBlockId() == block {
				out[p.GetSiteId()] += int(a.GetFrames())
			}
		}
	}
	return out
}

// bestQuality is the highest quality of a target at a site on the test
// night, from the server's Visibility.
func (ne *netEnv) bestQuality(t *testing.T, site, target string) float64 {
	t.Helper()
	r, err := ne.sky.Visibility(ne.admin(), &nightloomv1.VisibilityRequest{SiteId: site,
		Subject:     &nightloomv1.VisibilityRequest_TargetId{TargetId: target},
		Constraints: &nightloomv1.ConstraintSet{MaxAirmass: proto.Float64(3), RequiredDarkness: nightloomv1.Darkness_DARKNESS_NAUTICAL},
		Span:        &nightloomv1.VisibilityRequest_Night{Night: testNight}})
	if err != nil {
		t.Fatal(err)
	}
	best := 0.0
	for _, w := range r.GetWindows() {
		best = max(best, w.GetBestQuality())
	}
	return best
}

func TestNetworkBlockGoesWhereQualityIsHigher(t *testing.T) {
	ne := newNetEnv(t)
	bs := ne.queue(t, ne.block(ne.south, "R", 12), ne.block(ne.nrth, "G", 12))
	nn := ne.makePlan(t)
	sites := map[string]string{}
	for i, tg := range []string{ne.south, ne.nrth} {
		qe, qw := ne.bestQuality(t, ne.east, tg), ne.bestQuality(t, ne.west, tg)
		want := ne.east
		if qw > qe {
			want = ne.west
		}
		got := framesAt(nn, bs[i].GetId())
		if got[want] != 12 || len(got) != 1 {
			t.Errorf("block %d: frames planned per site %v, want all 12 at %s (best quality east %.3f, west %.3f)", i, got, want, qe, qw)
		}
		sites[tg] = want
	}
	if sites[ne.south] == sites[ne.nrth] {
		t.Fatalf("both targets are best seen from %s: the test cannot tell a joint plan from one site's", sites[ne.south])
	}
	for _, p := range nn.GetPlans() {
		if p.GetNetworkId() != ne.network || p.GetVersion() != 1 || p.GetOrigin() != nightloomv1.PlanOrigin_PLAN_ORIGIN_MAKE_PLAN {
			t.Errorf("stored plan of %s: network %q version %d origin %v", p.GetSiteId(), p.GetNetworkId(), p.GetVersion(), p.GetOrigin())
		}
	}
	if nn.GetObjective() < nn.GetSeparateObjective()*(1-1e-9) {
		t.Errorf("joint objective %.3f below the separate start's %.3f", nn.GetObjective(), nn.GetSeparateObjective())
	}
}

func TestNetworkBlockOnlyOneSiteCanDo(t *testing.T) {
	ne := newNetEnv(t)
	// All of the southern target, which the western site sees higher: each
	// block carries something only the eastern site has.
	ha := ne.block(ne.south, "Ha", 10) // the western wheel has no H-alpha
	big := ne.block(ne.south, "L", 10)
	big.Needs = &nightloomv1.TelescopeNeeds{MinApertureMm: 250} // west: 200 mm
	only := ne.block(ne.south, "R", 10)
	only.AllowedSiteIds = []string{ne.east}
	none := ne.block(ne.south, "B", 10)
	none.Needs = &nightloomv1.TelescopeNeeds{MinApertureMm: 1000} // no member is that large
	free := ne.block(ne.south, "G", 10)
	bs := ne.queue(t, ha, big, only, none, free)
	if bs[2].GetSiteId() != ne.east || bs[0].GetSiteId() != ne.east {
		t.Fatalf("home sites %s, %s: want the first allowed member, else the network's first", bs[2].GetSiteId(), bs[0].GetSiteId())
	}
	nn := ne.makePlan(t)
	for i, what := range []string{"H-alpha", "aperture", "allowed sites"} {
		got := framesAt(nn, bs[i].GetId())
		if got[ne.west] != 0 || got[ne.east] != 10 {
			t.Errorf("%s block: frames per site %v, want all 10 at the east, none at the west", what, got)
		}
	}
	if got := framesAt(nn, bs[4].GetId()); got[ne.west] == 0 {
		t.Errorf("a block any site can do, best seen from the west, was planned %v", got)
	}
	// The block no member can take is unplaced, each site saying why.
	var un *nightloomv1.NetworkUnplaced
	for _, u := range nn.GetUnplaced() {
		if u.GetBlockId() == bs[3].GetId() {
			un = u
		}
	}
	if un == nil || len(un.GetSites()) != 2 || un.GetFramesLeft() != 10 {
		t.Fatalf("unplaced entry of the 1000 mm block: %v", un)
	}
	for _, w := range un.GetSites() {
		if w.GetReason() != nightloomv1.SiteReason_SITE_REASON_APERTURE_TOO_SMALL {
			t.Errorf("site %s: reason %v, want APERTURE_TOO_SMALL", w.GetSiteId(), w.GetReason())
		}
	}
}

// TestNetworkFramesNeverExceededAcrossSites runs on both stores: a real
// SQLite file and PostgreSQL (Debian's postgresql; internal/pgtest).
func TestNetworkFramesNeverExceededAcrossSites(t *testing.T) {
	t.Run("sqlite", func(t *testing.T) { testNetworkFrames(t, newNetEnv(t)) })
	t.Run("postgres", func(t *testing.T) { testNetworkFrames(t, newNetEnv(t, pgtest.NewDatabase(t))) })
}

func testNetworkFrames(t *testing.T, ne *netEnv) {
	// More frames than one site's night holds of the northern target
	// (300 x 120 s = 10 h): the sites share it, never beyond what is wanted.
	const wanted = 300
	bs := ne.queue(t, ne.block(ne.nrth, "L", wanted))
	id := bs[0].GetId()
	nn := ne.makePlan(t)
	got := framesAt(nn, id)
	if got[ne.east] == 0 || got[ne.west] == 0 {
		t.Errorf("a block too long for one night at one site is planned %v; want it shared", got)
	}
	if got[ne.east]+got[ne.west] > wanted {
		t.Fatalf("planned %v frames in all, more than the %d wanted", got, wanted)
	}

	// Both sites' executors (site-held telescope tokens) report at once,
	// offering more frames than are wanted in all.
	tokens := map[string]string{}
	for _, s := range []string{ne.east, ne.west} {
		secret, _, err := CreateTokenSpec(t.Context(), ne.srv.Storage(), TokenSpec{Role: RoleTelescope, Label: "executor", SiteID: s})
		if err != nil {
			t.Fatal(err)
		}
		tokens[s] = secret
	}
	end := time.Date(2031, 3, 16, 13, 0, 0, 0, time.UTC)
	ne.clock.Set(end)
	const perSite, each = 25, 8 // 400 frames offered for 300 wanted
	var wg sync.WaitGroup
	counted := make(chan int32, 2*perSite)
	errc := make(chan error, 2*perSite)
	for _, s := range []string{ne.east, ne.west} {
		plan := nn.GetPlans()[slices.IndexFunc(nn.GetPlans(), func(p *nightloomv1.Plan) bool { return p.GetSiteId() == s })]
		for i := range perSite {
			wg.Go(func() {
				start := end.Add(-time.Duration(i+1) * 20 * time.Minute)
				r, err := ne.env.queue.ReportProgress(withToken(context.Background(), tokens[s]), &nightloomv1.ReportProgressRequest{
					Report: &nightloomv1.ProgressReport{ReportId: fmt.Sprintf("%s-%d", s, i), BlockId: id, FramesKept: each,
						Interval: &nightloomv1.TimeInterval{Start: ts(start), End: ts(start.Add(18 * time.Minute))},
						Outcome:  nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE, PlanId: plan.GetId()}})
				if err != nil {
					errc <- err
					return
				}
				if r.GetBlock().GetFramesDone() > wanted {
					errc <- fmt.Errorf("a report saw %d frames done of %d", r.GetBlock().GetFramesDone(), wanted)
				}
				counted <- r.GetFramesCounted()
			})
		}
	}
	wg.Wait()
	close(errc)
	close(counted)
	for err := range errc {
		t.Fatal(err)
	}
	sum := int32(0)
	for c := range counted {
		sum += c
	}
	b, err := ne.env.queue.GetBlock(ne.admin(), &nightloomv1.GetBlockRequest{BlockId: id})
	if err != nil {
		t.Fatal(err)
	}
	if b.GetBlock().GetFramesDone() != wanted || sum != wanted || b.GetBlock().GetState() != nightloomv1.BlockState_BLOCK_STATE_COMPLETED {
		t.Fatalf("after %d frames offered by two sites: %d done, %d counted, state %v; want %d, %d, completed",
			2*perSite*each, b.GetBlock().GetFramesDone(), sum, b.GetBlock().GetState(), wanted, wanted)
	}
	// An executor cannot report a run as another member's.
	var westPlan string
	for _, p := range nn.GetPlans() {
		if p.GetSiteId() == ne.west {
			westPlan = p.GetId()
		}
	}
	_, err = ne.env.queue.ReportProgress(withToken(context.Background(), tokens[ne.east]), &nightloomv1.ReportProgressRequest{
		Report: &nightloomv1.ProgressReport{ReportId: "east-as-west", BlockId: id, FramesKept: 1,
			Interval: &nightloomv1.TimeInterval{Start: ts(end.Add(-time.Hour)), End: ts(end.Add(-50 * time.Minute))},
			Outcome:  nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE, PlanId: westPlan}})
	wantCode(t, err, codes.PermissionDenied, "a report naming another member's plan")
}

// TestNetworkReportsSeenByOtherSites: frames one site reports shrink what
// the network plans anywhere on its next plan.
func TestNetworkReportsSeenByOtherSites(t *testing.T) {
	ne := newNetEnv(t)
	bs := ne.queue(t, ne.block(ne.south, "L", 30))
	id := bs[0].GetId()
	first := ne.makePlan(t)
	if got := framesAt(first, id); got[ne.east]+got[ne.west] != 30 {
		t.Fatalf("first plan: %v, want all 30 frames", got)
	}
	// The eastern site reports 24 frames it took in the evening.
	ne.clock.Set(time.Date(2031, 3, 15, 23, 0, 0, 0, time.UTC))
	start := time.Date(2031, 3, 15, 21, 0, 0, 0, time.UTC)
	if _, err := ne.env.queue.ReportProgress(as(RoleTelescope, ne.env), &nightloomv1.ReportProgressRequest{
		Report: &nightloomv1.ProgressReport{ReportId: "east-evening", BlockId: id, FramesKept: 24,
			Interval: &nightloomv1.TimeInterval{Start: ts(start), End: ts(start.Add(55 * time.Minute))},
			Outcome:  nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE, PlanId: first.GetPlans()[0].GetId()}}); err != nil {
		t.Fatal(err)
	}
	// The network replans from 23:00 UTC: at most the 6 frames left are
	// planned anywhere after it.
	r, err := ne.nets.ReplanNetwork(as(RoleOperator, ne.env), &nightloomv1.ReplanNetworkRequest{NetworkId: ne.network,
		TimeBudget: dur(200 * time.Millisecond)})
	if err != nil {
		t.Fatal(err)
	}
	after := 0
	for _, p := range r.GetReplan().GetPlans() {
		if p.GetVersion() != 2 || p.GetOrigin() != nightloomv1.PlanOrigin_PLAN_ORIGIN_REPLAN {
			t.Errorf("replanned %s: version %d origin %v", p.GetSiteId(), p.GetVersion(), p.GetOrigin())
		}
		for _, a := range p.GetAssignments() {
			if a.GetBlockId() == id && !a.GetPrepareStart().AsTime().Before(ne.clock.Now()) {
				after += int(a.GetFrames())
			}
		}
	}
	if after == 0 || after > 6 {
		t.Fatalf("after 24 of 30 frames reported at the east, the replan plans %d more; want 1..6", after)
	}
}

// TestNetworkWeatherMovesBlock: the roof of the site that sees a block
// best stays shut all night; a Replan there (as its executor sends it)
// re-solves the network, the block moves to the other site, and a
// watcher of the other site gets the new version. On both stores (with
// PostgreSQL the version reaches the watcher through the store's
// notifications, and the members' planning locks are the database's).
func TestNetworkWeatherMovesBlock(t *testing.T) {
	t.Run("sqlite", func(t *testing.T) { testNetworkWeather(t, newNetEnv(t)) })
	t.Run("postgres", func(t *testing.T) { testNetworkWeather(t, newNetEnv(t, pgtest.NewDatabase(t))) })
}

func testNetworkWeather(t *testing.T, ne *netEnv) {
	bs := ne.queue(t, ne.block(ne.nrth, "R", 12))
	id := bs[0].GetId()
	nn := ne.makePlan(t)
	home := ne.east
	if ne.bestQuality(t, ne.west, ne.nrth) > ne.bestQuality(t, ne.east, ne.nrth) {
		home = ne.west
	}
	other := ne.east
	if home == ne.east {
		other = ne.west
	}
	if got := framesAt(nn, id); got[home] != 12 {
		t.Fatalf("first plan: %v, want all 12 at %s", got, home)
	}
	var homePlan *nightloomv1.Plan
	for _, p := range nn.GetPlans() {
		if p.GetSiteId() == home {
			homePlan = p
		}
	}
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	watch, err := ne.plans.WatchPlans(metadataCtx(ctx, ne.env, RoleViewer), &nightloomv1.WatchPlansRequest{SiteId: other})
	if err != nil {
		t.Fatal(err)
	}
	got := make(chan *nightloomv1.Plan, 4)
	go func() {
		for {
			r, err := watch.Recv()
			if err != nil {
				close(got)
				return
			}
			got <- r.GetPlan()
		}
	}()
	time.Sleep(100 * time.Millisecond) // the stream is subscribed once its first message could arrive
	secret, _, err := CreateTokenSpec(t.Context(), ne.srv.Storage(), TokenSpec{Role: RoleTelescope, Label: "executor", SiteID: home})
	if err != nil {
		t.Fatal(err)
	}
	p0, p1 := homePlan.GetInterval().GetStart().AsTime(), homePlan.GetInterval().GetEnd().AsTime()
	ne.clock.Set(p0)
	rp, err := ne.plans.Replan(withToken(context.Background(), secret), &nightloomv1.ReplanRequest{SiteId: home, From: ts(p0),
		TimeBudget: dur(200 * time.Millisecond),
		Closures:   []*nightloomv1.Closure{{Interval: &nightloomv1.TimeInterval{Start: ts(p0), End: ts(p1)}, Reason: "cloud all night"}}})
	if err != nil {
		t.Fatal(err)
	}
	for _, a := range rp.GetPlan().GetAssignments() {
		if a.GetBlockId() == id {
			t.Fatalf("the closed site still plans the block at %v", a.GetStart().AsTime())
		}
	}
	if rp.GetPlan().GetNetworkId() != ne.network || rp.GetPlan().GetVersion() != 2 {
		t.Fatalf("the closed site's replan: network %q version %d", rp.GetPlan().GetNetworkId(), rp.GetPlan().GetVersion())
	}
	select {
	case p, ok := <-got:
		if !ok {
			t.Fatal("the watch ended before the new version")
		}
		frames := 0
		for _, a := range p.GetAssignments() {
			if a.GetBlockId() == id {
				frames += int(a.GetFrames())
			}
		}
		if p.GetSiteId() != other || p.GetVersion() != 2 || frames != 12 || p.GetPreviousPlanId() == "" {
			t.Fatalf("watcher of %s got version %d of %s with %d frames of the block; want version 2 with all 12", other,
				p.GetVersion(), p.GetSiteId(), frames)
		}
		// Its executor asks for its own next run only, and gets it.
		first := p.GetAssignments()[slices.IndexFunc(p.GetAssignments(), func(a *nightloomv1.Assignment) bool { return a.GetBlockId() == id })]
		next, err := ne.plans.NextAssignment(as(RoleTelescope, ne.env), &nightloomv1.NextAssignmentRequest{SiteId: other,
			Now: first.GetPrepareStart()})
		if err != nil {
			t.Fatal(err)
		}
		if next.GetAssignment().GetBlockId() != id || next.GetPlanVersion() != 2 {
			t.Fatalf("NextAssignment at %s: %v (version %d), want the moved block", other, next.GetAssignment().GetBlockId(), next.GetPlanVersion())
		}
	case <-ctx.Done():
		t.Fatal("no new version reached the other site's watcher")
	}
}

// TestNetworkRefusals: bad input is INVALID_ARGUMENT naming the field and
// stores nothing; a site-held token cannot plan a network with other
// members.
func TestNetworkRefusals(t *testing.T) {
	ne := newNetEnv(t)
	ne.queue(t, ne.block(ne.south, "L", 10))
	before := ne.snapshot(t)
	op := as(RoleOperator, ne.env)
	cases := []struct {
		name  string
		call  func() error
		code  codes.Code
		field string
	}{
		{"closure that ends before it starts", func() error {
			t0 := time.Date(2031, 3, 15, 22, 0, 0, 0, time.UTC)
			_, err := ne.nets.MakeNetworkPlan(op, &nightloomv1.MakeNetworkPlanRequest{NetworkId: ne.network, Night: testNight,
				Closures: []*nightloomv1.SiteClosure{{SiteId: ne.east, Closure: &nightloomv1.Closure{Interval: &nightloomv1.TimeInterval{
					Start: ts(t0), End: ts(t0.Add(-time.Hour))}}}}})
			return err
		}, codes.InvalidArgument, "closures[0].closure.interval.end"},
		{"aperture out of range", func() error {
			s := testSiteWest()
			s.Instrument.ApertureMm = -5
			_, err := ne.sites.CreateSite(ne.admin(), &nightloomv1.CreateSiteRequest{Site: s})
			return err
		}, codes.InvalidArgument, "site.instrument.aperture_mm"},
		{"time budget out of range", func() error {
			_, err := ne.nets.MakeNetworkPlan(op, &nightloomv1.MakeNetworkPlanRequest{NetworkId: ne.network, Night: testNight, TimeBudget: dur(time.Hour)})
			return err
		}, codes.InvalidArgument, "time_budget"},
		{"no night", func() error {
			_, err := ne.nets.MakeNetworkPlan(op, &nightloomv1.MakeNetworkPlanRequest{NetworkId: ne.network})
			return err
		}, codes.InvalidArgument, "night"},
		{"nights out of range", func() error {
			_, err := ne.nets.MakeNetworkPlan(op, &nightloomv1.MakeNetworkPlanRequest{NetworkId: ne.network, Night: testNight, Nights: 99})
			return err
		}, codes.InvalidArgument, "nights"},
		{"closure of a site outside the network", func() error {
			_, err := ne.nets.MakeNetworkPlan(op, &nightloomv1.MakeNetworkPlanRequest{NetworkId: ne.network, Night: testNight,
				Closures: []*nightloomv1.SiteClosure{{SiteId: "site-elsewhere", Closure: &nightloomv1.Closure{Interval: &nightloomv1.TimeInterval{
					Start: ts(time.Date(2031, 3, 15, 22, 0, 0, 0, time.UTC)), End: ts(time.Date(2031, 3, 15, 23, 0, 0, 0, time.UTC))}}}}})
			return err
		}, codes.InvalidArgument, "closures[0].site_id"},
		{"unknown network", func() error {
			_, err := ne.nets.MakeNetworkPlan(op, &nightloomv1.MakeNetworkPlanRequest{NetworkId: "net-nowhere", Night: testNight})
			return err
		}, codes.NotFound, ""},
		{"a site twice", func() error {
			_, err := ne.nets.CreateNetwork(ne.admin(), &nightloomv1.CreateNetworkRequest{Network: &nightloomv1.Network{Name: "Twice",
				SiteIds: []string{ne.east, ne.east}}})
			return err
		}, codes.InvalidArgument, "network.site_ids[1]"},
		{"a taken name", func() error {
			_, err := ne.nets.CreateNetwork(ne.admin(), &nightloomv1.CreateNetworkRequest{Network: &nightloomv1.Network{Name: "Two Roofs",
				SiteIds: []string{ne.east}}})
			return err
		}, codes.InvalidArgument, "network.name"},
		{"allowed site outside the network", func() error {
			b := ne.block(ne.south, "L", 10)
			b.AllowedSiteIds = []string{"site-elsewhere"}
			_, err := ne.env.queue.QueueBlocks(op, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{b}})
			return err
		}, codes.InvalidArgument, "blocks[0].allowed_site_ids[0]"},
		{"a filter no allowed site has", func() error {
			b := ne.block(ne.south, "Ha", 10)
			b.AllowedSiteIds = []string{ne.west}
			_, err := ne.env.queue.QueueBlocks(op, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{b}})
			return err
		}, codes.InvalidArgument, "blocks[0].filter"},
		{"needs without a network", func() error {
			b := testBlock(ne.east, ne.south, "L", 10, 5)
			b.Needs = &nightloomv1.TelescopeNeeds{MinApertureMm: 100}
			_, err := ne.env.queue.QueueBlocks(op, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{b}})
			return err
		}, codes.InvalidArgument, "blocks[0].needs"},
		{"pixel scale range upside down", func() error {
			b := ne.block(ne.south, "L", 10)
			b.Needs = &nightloomv1.TelescopeNeeds{MinPixelScaleArcsec: 2, MaxPixelScaleArcsec: 1}
			_, err := ne.env.queue.QueueBlocks(op, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{b}})
			return err
		}, codes.InvalidArgument, "blocks[0].needs.max_pixel_scale_arcsec"},
		{"network with queued blocks", func() error {
			_, err := ne.nets.DeleteNetwork(ne.admin(), &nightloomv1.DeleteNetworkRequest{NetworkId: ne.network})
			return err
		}, codes.FailedPrecondition, ""},
		{"replan with no network plan", func() error {
			_, err := ne.nets.ReplanNetwork(op, &nightloomv1.ReplanNetworkRequest{NetworkId: ne.network})
			return err
		}, codes.FailedPrecondition, ""},
	}
	// A token held to one member may not plan the network, nor queue for it.
	held, _, err := CreateTokenSpec(t.Context(), ne.srv.Storage(), TokenSpec{Role: RoleOperator, Label: "east only", SiteID: ne.east})
	if err != nil {
		t.Fatal(err)
	}
	hctx := withToken(context.Background(), held)
	cases = append(cases, struct {
		name  string
		call  func() error
		code  codes.Code
		field string
	}{"site-held token plans the network", func() error {
		_, err := ne.nets.MakeNetworkPlan(hctx, &nightloomv1.MakeNetworkPlanRequest{NetworkId: ne.network, Night: testNight})
		return err
	}, codes.PermissionDenied, ""}, struct {
		name  string
		call  func() error
		code  codes.Code
		field string
	}{"site-held token queues for the network", func() error {
		b := ne.block(ne.south, "L", 10)
		b.SiteId = ne.east
		_, err := ne.env.queue.QueueBlocks(hctx, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{b}})
		return err
	}, codes.PermissionDenied, ""})
	for _, c := range cases {
		err := c.call()
		wantCode(t, err, c.code, c.name)
		if c.field != "" && !slices.Contains(violationFields(err), c.field) {
			t.Errorf("%s: violations %v, want %s", c.name, violationFields(err), c.field)
		}
	}
	if after := ne.snapshot(t); after.digest != before.digest {
		t.Fatalf("refused calls changed the store:\nbefore %s\nafter  %s", before.digest, after.digest)
	}
	// The member's token sees its network, and only networks it is in.
	l, err := ne.nets.ListNetworks(hctx, &nightloomv1.ListNetworksRequest{})
	if err != nil || len(l.GetNetworks()) != 1 {
		t.Fatalf("ListNetworks for a member: %v, %v", l, err)
	}
}

// metadataCtx is ctx with a role's token.
func metadataCtx(ctx context.Context, e *env, r Role) context.Context {
	return withToken(ctx, e.tokens[r])
}

// TestNetworkTwoNights: the second night counts the first night's frames as
// done (over both sites), so the two never plan more than is wanted.
func TestNetworkTwoNights(t *testing.T) {
	ne := newNetEnv(t)
	const wanted = 800 // 800 x 120 s = 26.7 h: more than both sites' nights together
	bs := ne.queue(t, ne.block(ne.nrth, "L", wanted))
	r, err := ne.nets.MakeNetworkPlan(as(RoleOperator, ne.env), &nightloomv1.MakeNetworkPlanRequest{NetworkId: ne.network,
		Night: testNight, Nights: 2, TimeBudget: dur(400 * time.Millisecond), Seed: 3})
	if err != nil {
		t.Fatal(err)
	}
	if len(r.GetNights()) != 2 {
		t.Fatalf("%d nights, want 2", len(r.GetNights()))
	}
	total := 0
	for i, nn := range r.GetNights() {
		if d := nn.GetNight().GetDay(); d != testNight.GetDay()+int32(i) {
			t.Errorf("night %d is the %d-th", i, d)
		}
		n := 0
		for _, f := range framesAt(nn, bs[0].GetId()) {
			n += f
		}
		if n == 0 {
			t.Errorf("night %d plans none of the block", i)
		}
		for _, p := range nn.GetPlans() {
			if !proto.Equal(p.GetNight(), nn.GetNight()) {
				t.Errorf("plan of %s on night %d is for %v", p.GetSiteId(), i, p.GetNight())
			}
		}
		total += n
	}
	if total > wanted {
		t.Fatalf("two nights plan %d frames of the %d wanted", total, wanted)
	}
}

// TestNetworkDispatchSeesOtherSitesReports: a member's executor asks for
// its own next run only; when another member's reports have nearly filled
// the block, the run it gets holds only the frames still wanted.
func TestNetworkDispatchSeesOtherSitesReports(t *testing.T) {
	ne := newNetEnv(t)
	const wanted = 300
	bs := ne.queue(t, ne.block(ne.nrth, "L", wanted))
	id := bs[0].GetId()
	nn := ne.makePlan(t)
	var eastRun, westRun *nightloomv1.Assignment
	var eastPlan string
	for _, p := range nn.GetPlans() {
		for _, a := range p.GetAssignments() {
			if a.GetBlockId() != id {
				continue
			}
			switch {
			case p.GetSiteId() == ne.east && eastRun == nil:
				eastRun, eastPlan = a, p.GetId()
			case p.GetSiteId() == ne.west && westRun == nil && a.GetFrames() > 2:
				westRun = a
			}
		}
	}
	if eastRun == nil || westRun == nil {
		t.Fatalf("the block is not shared: east %v, west %v", eastRun, westRun)
	}
	now := westRun.GetPrepareStart().AsTime()
	if !eastRun.GetEnd().AsTime().Before(now) {
		t.Fatalf("the eastern run (%v) does not end before the western one starts (%v)", eastRun.GetEnd().AsTime(), now)
	}
	ne.clock.Set(now)
	// The eastern site reports all but 2 of the frames the block wants.
	if _, err := ne.env.queue.ReportProgress(as(RoleTelescope, ne.env), &nightloomv1.ReportProgressRequest{
		Report: &nightloomv1.ProgressReport{ReportId: "east-nearly-all", BlockId: id, FramesKept: wanted - 2,
			Interval: &nightloomv1.TimeInterval{Start: ts(now.Add(-12 * time.Hour)), End: ts(now.Add(-time.Minute))},
			Outcome:  nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE, PlanId: eastPlan}}); err != nil {
		t.Fatal(err)
	}
	next, err := ne.plans.NextAssignment(as(RoleTelescope, ne.env), &nightloomv1.NextAssignmentRequest{SiteId: ne.west, Now: ts(now)})
	if err != nil {
		t.Fatal(err)
	}
	if next.GetAssignment().GetBlockId() != id || next.GetAssignment().GetFrames() > 2 {
		t.Fatalf("the western executor is sent %d frames of %s (planned %d); want at most the 2 left",
			next.GetAssignment().GetFrames(), next.GetAssignment().GetBlockId(), westRun.GetFrames())
	}
}

// Members far apart in longitude plan the nights that happen together, not
// the nights of the same calendar date: with an invented Australian site
// first, an invented Chilean member plans its night of the day before
// (which ends, in UTC, as the Australian one begins), not the one of the
// same date a day later. The two sites planned for a date both lie
// within one day of UTC.
func TestNetworkNightsPairedInUTC(t *testing.T) {
	e := newEnv(t, "", withTCP(), func(c *Config) { c.ReplanPriority = -1 })
	nets := nightloomv1.NewNetworkServiceClient(e.conn)
	ctx := e.admin()
	aus := testSite()
	aus.Name, aus.LatitudeDeg, aus.LongitudeDeg, aus.ElevationM, aus.TimeZone = "Ironbark Ridge (invented)", -31.3, 149.1, 1100, "Australia/Sydney"
	aus.Horizon = nil
	chile := testSite()
	chile.Name, chile.LatitudeDeg, chile.LongitudeDeg, chile.ElevationM, chile.TimeZone = "Cerro Lechuza (invented)", -30.2, -70.8, 1700, "America/Santiago"
	chile.Horizon = nil
	var ids []string
	for _, s := range []*nightloomv1.Site{aus, chile} {
		r, err := e.sites.CreateSite(ctx, &nightloomv1.CreateSiteRequest{Site: s})
		if err != nil {
			t.Fatal(err)
		}
		ids = append(ids, r.GetSite().GetId())
	}
	n, err := nets.CreateNetwork(ctx, &nightloomv1.CreateNetworkRequest{Network: &nightloomv1.Network{Name: "Across the date line", SiteIds: ids}})
	if err != nil {
		t.Fatal(err)
	}
	r, err := nets.MakeNetworkPlan(as(RoleOperator, e), &nightloomv1.MakeNetworkPlanRequest{NetworkId: n.GetNetwork().GetId(),
		Night: testNight, TimeBudget: dur(0), Seed: 1})
	if err != nil {
		t.Fatal(err)
	}
	plans := r.GetNights()[0].GetPlans()
	if len(plans) != 2 {
		t.Fatalf("%d plans, want one per site", len(plans))
	}
	ref, other := plans[0], plans[1]
	if ref.GetSiteId() != ids[0] {
		ref, other = other, ref
	}
	want := time.Date(int(testNight.GetYear()), time.Month(testNight.GetMonth()), int(testNight.GetDay())-1, 0, 0, 0, 0, time.UTC)
	if got := other.GetNight(); got.GetDay() != int32(want.Day()) || got.GetMonth() != int32(want.Month()) {
		t.Errorf("the Chilean member planned its night of %v, want %s (the one that meets the Australian night in UTC)", got, want.Format("2006-01-02"))
	}
	gap := other.GetInterval().GetEnd().AsTime().Sub(ref.GetInterval().GetStart().AsTime())
	if gap.Abs() > 3*time.Hour {
		t.Errorf("the Chilean night ends %v from the Australian night's start; want them together", gap)
	}
	t.Logf("Australia %v..%v, Chile (night of %v) %v..%v", ref.GetInterval().GetStart().AsTime(), ref.GetInterval().GetEnd().AsTime(),
		other.GetNight(), other.GetInterval().GetStart().AsTime(), other.GetInterval().GetEnd().AsTime())
}
