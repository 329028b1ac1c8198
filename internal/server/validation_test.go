package server

import (
	"math"
	"slices"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/fieldmaskpb"

	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// TestValidation sends bad requests to every service; each must fail with
// its code, name the field at fault in a BadRequest field violation (for
// INVALID_ARGUMENT), and leave the database unchanged.
func TestValidation(t *testing.T) {
	e := newEnv(t, "")
	f := e.seed(t, 3)
	site, fixedT, comet := f.site.GetId(), f.targets[0].GetId(), f.targets[4].GetId()
	mk, err := e.plans.MakePlan(as(RoleOperator, e), &nightloomv1.MakePlanRequest{SiteId: site,
		Span: &nightloomv1.MakePlanRequest_Night{Night: testNight}, LookaheadNights: proto.Int32(0), TimeBudget: dur(50 * time.Millisecond)})
	if err != nil {
		t.Fatal(err)
	}
	plan := mk.GetPlans()[0]
	ctx := e.admin()
	siteWith := func(mod func(s *nightloomv1.Site)) *nightloomv1.CreateSiteRequest {
		s := testSite()
		mod(s)
		return &nightloomv1.CreateSiteRequest{Site: s}
	}
	targetWith := func(mod func(o *nightloomv1.OrbitElements)) *nightloomv1.CreateTargetRequest {
		tg := testComet()
		mod(tg.GetOrbit())
		return &nightloomv1.CreateTargetRequest{Target: tg}
	}
	blocksWith := func(mod func(b []*nightloomv1.Block)) *nightloomv1.QueueBlocksRequest {
		bs := []*nightloomv1.Block{testBlock(site, fixedT, "L", 10, 5), testBlock(site, fixedT, "R", 10, 5), testBlock(site, comet, "G", 10, 5)}
		mod(bs)
		return &nightloomv1.QueueBlocksRequest{Blocks: bs}
	}
	t0 := time.Date(2031, 3, 15, 21, 0, 0, 0, time.UTC)
	reportWith := func(mod func(r *nightloomv1.ProgressReport)) *nightloomv1.ReportProgressRequest {
		r := &nightloomv1.ProgressReport{ReportId: "r-1", BlockId: f.blocks[0].GetId(), FramesKept: 2,
			Interval: &nightloomv1.TimeInterval{Start: ts(t0), End: ts(t0.Add(time.Minute))}, Outcome: nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE}
		mod(r)
		return &nightloomv1.ReportProgressRequest{Report: r}
	}
	night := &nightloomv1.MakePlanRequest_Night{Night: testNight}
	many := func(n int) []*nightloomv1.Block {
		out := make([]*nightloomv1.Block, n)
		for i := range out {
			out[i] = testBlock(site, fixedT, "L", 10, 5)
		}
		return out
	}
	closures := func(n int) []*nightloomv1.Closure {
		out := make([]*nightloomv1.Closure, n)
		for i := range out {
			s := t0.Add(time.Duration(i) * time.Minute)
			out[i] = &nightloomv1.Closure{Interval: &nightloomv1.TimeInterval{Start: ts(s), End: ts(s.Add(30 * time.Second))}}
		}
		return out
	}

	cases := []struct {
		name      string
		call      func() error
		wantCode  codes.Code
		wantField string // for INVALID_ARGUMENT: a field the violations must name
	}{
		// SiteService
		{"site missing", func() error { _, err := e.sites.CreateSite(ctx, &nightloomv1.CreateSiteRequest{}); return err }, codes.InvalidArgument, "site"},
		{"latitude 91", func() error {
			_, err := e.sites.CreateSite(ctx, siteWith(func(s *nightloomv1.Site) { s.LatitudeDeg = 91 }))
			return err
		}, codes.InvalidArgument, "site.latitude_deg"},
		{"longitude NaN", func() error {
			_, err := e.sites.CreateSite(ctx, siteWith(func(s *nightloomv1.Site) { s.LongitudeDeg = math.NaN() }))
			return err
		}, codes.InvalidArgument, "site.longitude_deg"},
		{"elevation +Inf", func() error {
			_, err := e.sites.CreateSite(ctx, siteWith(func(s *nightloomv1.Site) { s.ElevationM = math.Inf(1) }))
			return err
		}, codes.InvalidArgument, "site.elevation_m"},
		{"horizon point altitude 95", func() error {
			_, err := e.sites.CreateSite(ctx, siteWith(func(s *nightloomv1.Site) { s.Horizon[3].AltitudeDeg = 95 }))
			return err
		}, codes.InvalidArgument, "site.horizon[3].altitude_deg"},
		{"horizon azimuth twice", func() error {
			_, err := e.sites.CreateSite(ctx, siteWith(func(s *nightloomv1.Site) { s.Horizon[2].AzimuthDeg = 45 }))
			return err
		}, codes.InvalidArgument, "site.horizon[2].azimuth_deg"},
		{"horizon of 721 points", func() error {
			return callErr(e.sites.CreateSite(ctx, siteWith(func(s *nightloomv1.Site) {
				s.Horizon = nil
				for i := 0; i < 721; i++ {
					s.Horizon = append(s.Horizon, &nightloomv1.HorizonPoint{AzimuthDeg: float64(i) * 0.49, AltitudeDeg: 3})
				}
			})))
		}, codes.InvalidArgument, "site.horizon"},
		{"unknown time zone", func() error {
			_, err := e.sites.CreateSite(ctx, siteWith(func(s *nightloomv1.Site) { s.TimeZone = "Mars/Olympus_Mons" }))
			return err
		}, codes.InvalidArgument, "site.time_zone"},
		{"no mount", func() error {
			_, err := e.sites.CreateSite(ctx, siteWith(func(s *nightloomv1.Site) { s.Mount = nil }))
			return err
		},
			codes.InvalidArgument, "site.mount"},
		{"german mount without flip", func() error {
			_, err := e.sites.CreateSite(ctx, siteWith(func(s *nightloomv1.Site) { s.Mount.MeridianFlip = nil }))
			return err
		}, codes.InvalidArgument, "site.mount.meridian_flip"},
		{"fork mount with flip", func() error {
			_, err := e.sites.CreateSite(ctx, siteWith(func(s *nightloomv1.Site) { s.Mount.Kind = nightloomv1.MountKind_MOUNT_KIND_FORK_EQUATORIAL }))
			return err
		}, codes.InvalidArgument, "site.mount.meridian_flip"},
		{"unknown mount kind", func() error {
			_, err := e.sites.CreateSite(ctx, siteWith(func(s *nightloomv1.Site) { s.Mount.Kind = 42 }))
			return err
		}, codes.InvalidArgument, "site.mount.kind"},
		{"slew rate 0", func() error {
			_, err := e.sites.CreateSite(ctx, siteWith(func(s *nightloomv1.Site) { s.Mount.SecondaryAxis.RateDegPerS = 0 }))
			return err
		}, codes.InvalidArgument, "site.mount.secondary_axis.rate_deg_per_s"},
		{"solar avoidance 3", func() error {
			_, err := e.sites.CreateSite(ctx, siteWith(func(s *nightloomv1.Site) { s.SolarAvoidanceDeg = proto.Float64(3) }))
			return err
		}, codes.InvalidArgument, "site.solar_avoidance_deg"},
		{"focus without duration", func() error {
			_, err := e.sites.CreateSite(ctx, siteWith(func(s *nightloomv1.Site) { s.Instrument.Focus.Duration = nil }))
			return err
		}, codes.InvalidArgument, "site.instrument.focus.duration"},
		{"filter twice", func() error {
			_, err := e.sites.CreateSite(ctx, siteWith(func(s *nightloomv1.Site) { s.Instrument.Filters[3] = "L" }))
			return err
		}, codes.InvalidArgument, "site.instrument.filters[3]"},
		{"negative readout", func() error {
			_, err := e.sites.CreateSite(ctx, siteWith(func(s *nightloomv1.Site) { s.Instrument.Readout = dur(-time.Second) }))
			return err
		}, codes.InvalidArgument, "site.instrument.readout"},
		{"empty name", func() error {
			_, err := e.sites.CreateSite(ctx, siteWith(func(s *nightloomv1.Site) { s.Name = "" }))
			return err
		},
			codes.InvalidArgument, "site.name"},
		{"update: output-only path", func() error {
			_, err := e.sites.UpdateSite(ctx, &nightloomv1.UpdateSiteRequest{Site: &nightloomv1.Site{Id: site}, UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"create_time"}}})
			return err
		}, codes.InvalidArgument, "update_mask.paths[0]"},
		{"update: unknown path", func() error {
			_, err := e.sites.UpdateSite(ctx, &nightloomv1.UpdateSiteRequest{Site: &nightloomv1.Site{Id: site}, UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"name", "colour"}}})
			return err
		}, codes.InvalidArgument, "update_mask.paths[1]"},
		{"update: bad value", func() error {
			_, err := e.sites.UpdateSite(ctx, &nightloomv1.UpdateSiteRequest{Site: &nightloomv1.Site{Id: site, LatitudeDeg: 200}, UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"latitude_deg"}}})
			return err
		}, codes.InvalidArgument, "site.latitude_deg"},
		{"update: mask clears a required message", func() error {
			_, err := e.sites.UpdateSite(ctx, &nightloomv1.UpdateSiteRequest{Site: &nightloomv1.Site{Id: site}, UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"mount"}}})
			return err
		}, codes.InvalidArgument, "site.mount"},
		{"update: unknown site", func() error {
			_, err := e.sites.UpdateSite(ctx, &nightloomv1.UpdateSiteRequest{Site: &nightloomv1.Site{Id: "site-nonesuch", Name: "x"}, UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"name"}}})
			return err
		}, codes.NotFound, ""},
		{"get: no id", func() error { _, err := e.sites.GetSite(ctx, &nightloomv1.GetSiteRequest{}); return err }, codes.InvalidArgument, "site_id"},
		{"list: page size 501", func() error {
			_, err := e.sites.ListSites(ctx, &nightloomv1.ListSitesRequest{PageSize: 501})
			return err
		},
			codes.InvalidArgument, "page_size"},
		{"list: forged token", func() error {
			_, err := e.sites.ListSites(ctx, &nightloomv1.ListSitesRequest{PageToken: "AQID"})
			return err
		},
			codes.InvalidArgument, "page_token"},

		// TargetService
		{"target: no position", func() error {
			_, err := e.targets.CreateTarget(ctx, &nightloomv1.CreateTargetRequest{Target: &nightloomv1.Target{Name: "Nowhere"}})
			return err
		}, codes.InvalidArgument, "target.position"},
		{"target: ra 360", func() error {
			_, err := e.targets.CreateTarget(ctx, &nightloomv1.CreateTargetRequest{Target: testFixed("Edge", 360, 0)})
			return err
		}, codes.InvalidArgument, "target.fixed.ra_deg"},
		{"target: eccentricity below 0", func() error {
			_, err := e.targets.CreateTarget(ctx, targetWith(func(o *nightloomv1.OrbitElements) { o.Eccentricity = -0.1 }))
			return err
		}, codes.InvalidArgument, "target.orbit.eccentricity"},
		{"target: q NaN", func() error {
			_, err := e.targets.CreateTarget(ctx, targetWith(func(o *nightloomv1.OrbitElements) { o.PerihelionDistanceAu = math.NaN() }))
			return err
		}, codes.InvalidArgument, "target.orbit.perihelion_distance_au"},
		{"target: no perihelion time", func() error {
			_, err := e.targets.CreateTarget(ctx, targetWith(func(o *nightloomv1.OrbitElements) { o.PerihelionTimeTt = nil }))
			return err
		}, codes.InvalidArgument, "target.orbit.perihelion_time_tt"},
		{"target: K1 60", func() error {
			_, err := e.targets.CreateTarget(ctx, targetWith(func(o *nightloomv1.OrbitElements) {
				o.MagnitudeLaw = &nightloomv1.OrbitElements_Comet{Comet: &nightloomv1.CometMagnitude{M1: 8, K1: 60}}
			}))
			return err
		}, codes.InvalidArgument, "target.orbit.comet.k1"},
		{"target: hyperbola the ephemeris refuses", func() error {
			_, err := e.targets.CreateTarget(ctx, targetWith(func(o *nightloomv1.OrbitElements) { o.PerihelionDistanceAu, o.Eccentricity = 1e-9, 100 }))
			return err
		}, codes.InvalidArgument, "target.orbit"},
		{"target update: unknown", func() error {
			_, err := e.targets.UpdateTarget(ctx, &nightloomv1.UpdateTargetRequest{Target: &nightloomv1.Target{Id: "tgt-nonesuch"}})
			return err
		}, codes.NotFound, ""},
		{"target update: becomes an orbit while blocks use it", func() error {
			_, err := e.targets.UpdateTarget(ctx, &nightloomv1.UpdateTargetRequest{Target: &nightloomv1.Target{Id: fixedT, Position: testComet().GetPosition()},
				UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"orbit"}}})
			return err
		}, codes.FailedPrecondition, ""},

		// QueueService
		{"queue: no blocks", func() error { _, err := e.queue.QueueBlocks(ctx, &nightloomv1.QueueBlocksRequest{}); return err },
			codes.InvalidArgument, "blocks"},
		{"queue: 501 blocks", func() error {
			_, err := e.queue.QueueBlocks(ctx, &nightloomv1.QueueBlocksRequest{Blocks: many(501)})
			return err
		},
			codes.InvalidArgument, "blocks"},
		{"queue: zero exposure in the third", func() error {
			_, err := e.queue.QueueBlocks(ctx, blocksWith(func(b []*nightloomv1.Block) { b[2].Exposure = dur(0) }))
			return err
		}, codes.InvalidArgument, "blocks[2].exposure"},
		{"queue: filter not in the wheel", func() error {
			_, err := e.queue.QueueBlocks(ctx, blocksWith(func(b []*nightloomv1.Block) { b[1].Filter = "OIII" }))
			return err
		}, codes.InvalidArgument, "blocks[1].filter"},
		{"queue: non-sidereal fixed target", func() error {
			_, err := e.queue.QueueBlocks(ctx, blocksWith(func(b []*nightloomv1.Block) { b[0].NonSiderealTracking = true }))
			return err
		}, codes.InvalidArgument, "blocks[0].non_sidereal_tracking"},
		{"queue: priority 11", func() error {
			_, err := e.queue.QueueBlocks(ctx, blocksWith(func(b []*nightloomv1.Block) { b[0].Priority = 11 }))
			return err
		}, codes.InvalidArgument, "blocks[0].priority"},
		{"queue: min run above frames", func() error {
			_, err := e.queue.QueueBlocks(ctx, blocksWith(func(b []*nightloomv1.Block) { b[0].MinRunFrames = 11 }))
			return err
		}, codes.InvalidArgument, "blocks[0].min_run_frames"},
		{"queue: max run below min run", func() error {
			_, err := e.queue.QueueBlocks(ctx, blocksWith(func(b []*nightloomv1.Block) { b[0].MaxRunFrames = 2 }))
			return err
		}, codes.InvalidArgument, "blocks[0].max_run_frames"},
		{"queue: latest before earliest", func() error {
			_, err := e.queue.QueueBlocks(ctx, blocksWith(func(b []*nightloomv1.Block) {
				b[0].EarliestDate, b[0].LatestDate = &nightloomv1.LocalDate{Year: 2031, Month: 3, Day: 20}, &nightloomv1.LocalDate{Year: 2031, Month: 3, Day: 19}
			}))
			return err
		}, codes.InvalidArgument, "blocks[0].latest_date"},
		{"queue: February 30", func() error {
			_, err := e.queue.QueueBlocks(ctx, blocksWith(func(b []*nightloomv1.Block) {
				b[0].EarliestDate = &nightloomv1.LocalDate{Year: 2031, Month: 2, Day: 30}
			}))
			return err
		}, codes.InvalidArgument, "blocks[0].earliest_date.day"},
		{"queue: cadence of a minute", func() error {
			_, err := e.queue.QueueBlocks(ctx, blocksWith(func(b []*nightloomv1.Block) { b[0].Cadence = &nightloomv1.Cadence{Interval: dur(time.Minute)} }))
			return err
		}, codes.InvalidArgument, "blocks[0].cadence.interval"},
		{"queue: airmass 0.5", func() error {
			_, err := e.queue.QueueBlocks(ctx, blocksWith(func(b []*nightloomv1.Block) { b[1].Constraints.MaxAirmass = proto.Float64(0.5) }))
			return err
		}, codes.InvalidArgument, "blocks[1].constraints.max_airmass"},
		{"queue: empty local window", func() error {
			_, err := e.queue.QueueBlocks(ctx, blocksWith(func(b []*nightloomv1.Block) {
				b[0].Constraints.LocalTimeWindow = &nightloomv1.LocalTimeWindow{Start: &nightloomv1.LocalTimeOfDay{Hour: 22}, End: &nightloomv1.LocalTimeOfDay{Hour: 22}}
			}))
			return err
		}, codes.InvalidArgument, "blocks[0].constraints.local_time_window.end"},
		{"queue: unknown darkness", func() error {
			_, err := e.queue.QueueBlocks(ctx, blocksWith(func(b []*nightloomv1.Block) { b[0].Constraints.RequiredDarkness = 7 }))
			return err
		}, codes.InvalidArgument, "blocks[0].constraints.required_darkness"},
		{"queue: request id with a space", func() error {
			r := blocksWith(func([]*nightloomv1.Block) {})
			r.RequestId = "batch 1"
			_, err := e.queue.QueueBlocks(ctx, r)
			return err
		}, codes.InvalidArgument, "request_id"},
		{"queue: unknown site", func() error {
			_, err := e.queue.QueueBlocks(ctx, blocksWith(func(b []*nightloomv1.Block) { b[1].SiteId = "site-nonesuch" }))
			return err
		}, codes.NotFound, ""},
		{"queue: unknown target", func() error {
			_, err := e.queue.QueueBlocks(ctx, blocksWith(func(b []*nightloomv1.Block) { b[2].TargetId = "tgt-nonesuch" }))
			return err
		}, codes.NotFound, ""},
		{"list blocks: unknown state", func() error {
			_, err := e.queue.ListBlocks(ctx, &nightloomv1.ListBlocksRequest{States: []nightloomv1.BlockState{99}})
			return err
		}, codes.InvalidArgument, "states[0]"},
		{"list blocks: page size 1001", func() error {
			_, err := e.queue.ListBlocks(ctx, &nightloomv1.ListBlocksRequest{PageSize: 1001})
			return err
		}, codes.InvalidArgument, "page_size"},
		{"withdraw: unknown block", func() error {
			_, err := e.queue.WithdrawBlock(ctx, &nightloomv1.WithdrawBlockRequest{BlockId: "blk-nonesuch"})
			return err
		}, codes.NotFound, ""},
		{"report: missing", func() error { _, err := e.queue.ReportProgress(ctx, &nightloomv1.ReportProgressRequest{}); return err },
			codes.InvalidArgument, "report"},
		{"report: no outcome", func() error {
			_, err := e.queue.ReportProgress(ctx, reportWith(func(r *nightloomv1.ProgressReport) { r.Outcome = 0 }))
			return err
		}, codes.InvalidArgument, "report.outcome"},
		{"report: failed with frames", func() error {
			_, err := e.queue.ReportProgress(ctx, reportWith(func(r *nightloomv1.ProgressReport) { r.Outcome = nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_FAILED }))
			return err
		}, codes.InvalidArgument, "report.frames_kept"},
		{"report: end before start", func() error {
			_, err := e.queue.ReportProgress(ctx, reportWith(func(r *nightloomv1.ProgressReport) { r.Interval.End = ts(t0.Add(-time.Minute)) }))
			return err
		}, codes.InvalidArgument, "report.interval.end"},
		{"report: id of 129 bytes", func() error {
			_, err := e.queue.ReportProgress(ctx, reportWith(func(r *nightloomv1.ProgressReport) { r.ReportId = string(make([]byte, 129)) }))
			return err
		}, codes.InvalidArgument, "report.report_id"},
		{"report: negative frames", func() error {
			_, err := e.queue.ReportProgress(ctx, reportWith(func(r *nightloomv1.ProgressReport) { r.FramesKept = -1 }))
			return err
		}, codes.InvalidArgument, "report.frames_kept"},
		{"report: unknown block", func() error {
			_, err := e.queue.ReportProgress(ctx, reportWith(func(r *nightloomv1.ProgressReport) { r.BlockId = "blk-nonesuch" }))
			return err
		}, codes.NotFound, ""},

		// PlanService
		{"plan: no span", func() error { _, err := e.plans.MakePlan(ctx, &nightloomv1.MakePlanRequest{SiteId: site}); return err },
			codes.InvalidArgument, "span"},
		{"plan: 31 nights", func() error {
			_, err := e.plans.MakePlan(ctx, &nightloomv1.MakePlanRequest{SiteId: site, Span: night, Nights: 31})
			return err
		}, codes.InvalidArgument, "nights"},
		{"plan: 10-year horizon", func() error {
			_, err := e.plans.MakePlan(ctx, &nightloomv1.MakePlanRequest{SiteId: site, Span: night, Nights: 3653})
			return err
		}, codes.InvalidArgument, "nights"},
		{"plan: grid step 5 s", func() error {
			_, err := e.plans.MakePlan(ctx, &nightloomv1.MakePlanRequest{SiteId: site, Span: night, GridStep: dur(5 * time.Second)})
			return err
		}, codes.InvalidArgument, "grid_step"},
		{"plan: 1 s grid over a month", func() error {
			_, err := e.plans.MakePlan(ctx, &nightloomv1.MakePlanRequest{SiteId: site, Span: night, Nights: 30, GridStep: dur(time.Second)})
			return err
		}, codes.InvalidArgument, "grid_step"},
		{"plan: budget 61 s", func() error {
			_, err := e.plans.MakePlan(ctx, &nightloomv1.MakePlanRequest{SiteId: site, Span: night, TimeBudget: dur(61 * time.Second)})
			return err
		}, codes.InvalidArgument, "time_budget"},
		{"plan: interval of 49 h", func() error {
			_, err := e.plans.MakePlan(ctx, &nightloomv1.MakePlanRequest{SiteId: site, Span: &nightloomv1.MakePlanRequest_Interval{Interval: &nightloomv1.TimeInterval{Start: ts(t0), End: ts(t0.Add(49 * time.Hour))}}})
			return err
		}, codes.InvalidArgument, "interval"},
		{"plan: interval with 2 nights", func() error {
			_, err := e.plans.MakePlan(ctx, &nightloomv1.MakePlanRequest{SiteId: site, Nights: 2, Span: &nightloomv1.MakePlanRequest_Interval{Interval: &nightloomv1.TimeInterval{Start: ts(t0), End: ts(t0.Add(time.Hour))}}})
			return err
		}, codes.InvalidArgument, "nights"},
		{"plan: 101 closures", func() error {
			_, err := e.plans.MakePlan(ctx, &nightloomv1.MakePlanRequest{SiteId: site, Span: night, Closures: closures(101)})
			return err
		}, codes.InvalidArgument, "closures"},
		{"plan: closure ending before it starts", func() error {
			c := closures(1)
			c[0].Interval.End = ts(t0.Add(-time.Hour))
			_, err := e.plans.MakePlan(ctx, &nightloomv1.MakePlanRequest{SiteId: site, Span: night, Closures: c})
			return err
		}, codes.InvalidArgument, "closures[0].interval.end"},
		{"plan: lookahead 61", func() error {
			_, err := e.plans.MakePlan(ctx, &nightloomv1.MakePlanRequest{SiteId: site, Span: night, LookaheadNights: proto.Int32(61)})
			return err
		}, codes.InvalidArgument, "lookahead_nights"},
		{"plan: unknown site", func() error {
			_, err := e.plans.MakePlan(ctx, &nightloomv1.MakePlanRequest{SiteId: "site-nonesuch", Span: night})
			return err
		}, codes.NotFound, ""},
		{"get plan: unknown", func() error {
			_, err := e.plans.GetPlan(ctx, &nightloomv1.GetPlanRequest{PlanId: "plan-nonesuch"})
			return err
		},
			codes.NotFound, ""},
		{"list plans: unknown site", func() error {
			_, err := e.plans.ListPlans(ctx, &nightloomv1.ListPlansRequest{SiteId: "site-nonesuch"})
			return err
		}, codes.NotFound, ""},
		{"list plans: forged token", func() error {
			_, err := e.plans.ListPlans(ctx, &nightloomv1.ListPlansRequest{SiteId: site, PageToken: "7.deadbeef"})
			return err
		}, codes.InvalidArgument, "page_token"},
		{"replan: from after the end", func() error {
			_, err := e.plans.Replan(ctx, &nightloomv1.ReplanRequest{SiteId: site, PlanId: plan.GetId(), From: ts(plan.GetInterval().GetEnd().AsTime().Add(time.Hour))})
			return err
		}, codes.FailedPrecondition, ""},
		{"replan: unknown plan", func() error {
			_, err := e.plans.Replan(ctx, &nightloomv1.ReplanRequest{SiteId: site, PlanId: "plan-nonesuch"})
			return err
		}, codes.NotFound, ""},
		{"replan: no plan covers from", func() error {
			_, err := e.plans.Replan(ctx, &nightloomv1.ReplanRequest{SiteId: site, From: ts(time.Date(2031, 6, 1, 0, 0, 0, 0, time.UTC))})
			return err
		}, codes.NotFound, ""},
		{"replan: bad closure", func() error {
			_, err := e.plans.Replan(ctx, &nightloomv1.ReplanRequest{SiteId: site, PlanId: plan.GetId(), Closures: []*nightloomv1.Closure{{}}})
			return err
		}, codes.InvalidArgument, "closures[0].interval"},
		{"next: altitude 100", func() error {
			_, err := e.plans.NextAssignment(ctx, &nightloomv1.NextAssignmentRequest{SiteId: site,
				State: &nightloomv1.TelescopeState{Position: &nightloomv1.HorizontalPosition{AltitudeDeg: 100}}})
			return err
		}, codes.InvalidArgument, "state.position.altitude_deg"},
		{"watch: no site", func() error {
			st, err := e.plans.WatchPlans(ctx, &nightloomv1.WatchPlansRequest{})
			if err != nil {
				return err
			}
			_, err = st.Recv()
			return err
		}, codes.InvalidArgument, "site_id"},
		{"watch: unknown site", func() error {
			st, err := e.plans.WatchPlans(ctx, &nightloomv1.WatchPlansRequest{SiteId: "site-nonesuch"})
			if err != nil {
				return err
			}
			_, err = st.Recv()
			return err
		}, codes.NotFound, ""},

		// SkyService
		{"ephemeris: 86 400 rows", func() error {
			_, err := e.sky.Ephemeris(ctx, &nightloomv1.EphemerisRequest{SiteId: site, Subject: &nightloomv1.EphemerisRequest_TargetId{TargetId: fixedT},
				Interval: &nightloomv1.TimeInterval{Start: ts(t0), End: ts(t0.Add(24 * time.Hour))}, Step: dur(time.Second)})
			return err
		}, codes.InvalidArgument, "step"},
		{"ephemeris: 400 days", func() error {
			_, err := e.sky.Ephemeris(ctx, &nightloomv1.EphemerisRequest{SiteId: site, Subject: &nightloomv1.EphemerisRequest_TargetId{TargetId: fixedT},
				Interval: &nightloomv1.TimeInterval{Start: ts(t0), End: ts(t0.Add(400 * 24 * time.Hour))}, Step: dur(24 * time.Hour)})
			return err
		}, codes.InvalidArgument, "interval"},
		{"ephemeris: bad inline target", func() error {
			_, err := e.sky.Ephemeris(ctx, &nightloomv1.EphemerisRequest{SiteId: site, Subject: &nightloomv1.EphemerisRequest_Target{Target: testFixed("Off", 10, 95)},
				Interval: &nightloomv1.TimeInterval{Start: ts(t0), End: ts(t0.Add(time.Hour))}})
			return err
		}, codes.InvalidArgument, "target.fixed.dec_deg"},
		{"ephemeris: unknown target", func() error {
			_, err := e.sky.Ephemeris(ctx, &nightloomv1.EphemerisRequest{SiteId: site, Subject: &nightloomv1.EphemerisRequest_TargetId{TargetId: "tgt-nonesuch"},
				Interval: &nightloomv1.TimeInterval{Start: ts(t0), End: ts(t0.Add(time.Hour))}})
			return err
		}, codes.NotFound, ""},
		{"night: no date", func() error { _, err := e.sky.Night(ctx, &nightloomv1.NightRequest{SiteId: site}); return err },
			codes.InvalidArgument, "date"},
		{"night: year 2300", func() error {
			_, err := e.sky.Night(ctx, &nightloomv1.NightRequest{SiteId: site, Date: &nightloomv1.LocalDate{Year: 2300, Month: 1, Day: 1}})
			return err
		}, codes.InvalidArgument, "date.year"},
		{"visibility: block with constraints", func() error {
			_, err := e.sky.Visibility(ctx, &nightloomv1.VisibilityRequest{Subject: &nightloomv1.VisibilityRequest_BlockId{BlockId: f.blocks[0].GetId()},
				Constraints: &nightloomv1.ConstraintSet{}, Span: &nightloomv1.VisibilityRequest_Night{Night: testNight}})
			return err
		}, codes.InvalidArgument, "constraints"},
		{"visibility: step 5 s", func() error {
			_, err := e.sky.Visibility(ctx, &nightloomv1.VisibilityRequest{Subject: &nightloomv1.VisibilityRequest_TargetId{TargetId: fixedT}, SiteId: site,
				Step: dur(5 * time.Second), Span: &nightloomv1.VisibilityRequest_Night{Night: testNight}})
			return err
		}, codes.InvalidArgument, "step"},
		{"visibility: interval of 5 min", func() error {
			_, err := e.sky.Visibility(ctx, &nightloomv1.VisibilityRequest{Subject: &nightloomv1.VisibilityRequest_TargetId{TargetId: fixedT}, SiteId: site,
				Span: &nightloomv1.VisibilityRequest_Interval{Interval: &nightloomv1.TimeInterval{Start: ts(t0), End: ts(t0.Add(5 * time.Minute))}}})
			return err
		}, codes.InvalidArgument, "interval"},
		{"visibility: target without site", func() error {
			_, err := e.sky.Visibility(ctx, &nightloomv1.VisibilityRequest{Subject: &nightloomv1.VisibilityRequest_TargetId{TargetId: fixedT},
				Span: &nightloomv1.VisibilityRequest_Night{Night: testNight}})
			return err
		}, codes.InvalidArgument, "site_id"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			before := e.snapshot(t)
			err := c.call()
			wantCode(t, err, c.wantCode, c.name)
			if c.wantCode == codes.InvalidArgument {
				fields := violationFields(err)
				if !slices.Contains(fields, c.wantField) {
					t.Errorf("violations name %v, want %q (err %v)", fields, c.wantField, err)
				}
			}
			if after := e.snapshot(t); after != before {
				t.Errorf("a refused request wrote to the database:\nbefore %+v\nafter  %+v", before, after)
			}
		})
	}
}

func callErr[T any](_ T, err error) error { return err }

// TestBlockStepLimit: a planning problem over MaxBlockSteps is refused
// before any work, naming grid_step.
func TestBlockStepLimit(t *testing.T) {
	e := newEnv(t, "")
	f := e.seed(t, 0)
	// 12 h at 10 s is 4320 steps; 1200 blocks make 5.2 million.
	var bs []*nightloomv1.Block
	for i := 0; i < 1200; i++ {
		bs = append(bs, testBlock(f.site.GetId(), f.targets[i%4].GetId(), "L", 10, 1))
	}
	for len(bs) > 0 {
		k := min(len(bs), MaxBlocksPerCall)
		if _, err := e.queue.QueueBlocks(e.admin(), &nightloomv1.QueueBlocksRequest{Blocks: bs[:k]}); err != nil {
			t.Fatal(err)
		}
		bs = bs[k:]
	}
	before := e.snapshot(t)
	_, err := e.plans.MakePlan(e.admin(), &nightloomv1.MakePlanRequest{SiteId: f.site.GetId(),
		Span: &nightloomv1.MakePlanRequest_Night{Night: testNight}, GridStep: dur(10 * time.Second)})
	wantCode(t, err, codes.InvalidArgument, "MakePlan over the block-step limit")
	if fields := violationFields(err); !slices.Contains(fields, "grid_step") {
		t.Errorf("violations %v, want grid_step", fields)
	}
	if e.snapshot(t) != before {
		t.Error("refused MakePlan wrote")
	}
}

// TestOversizedMessage: a request above --max-recv-bytes is refused by gRPC
// with RESOURCE_EXHAUSTED, and the daemon keeps serving.
func TestOversizedMessage(t *testing.T) {
	e := newEnv(t, "", func(c *Config) { c.MaxRecvBytes = 64 << 10 })
	f := e.seed(t, 0)
	bs := make([]*nightloomv1.Block, 400)
	for i := range bs {
		b := testBlock(f.site.GetId(), f.targets[0].GetId(), "L", 10, 1)
		b.Label = string(make([]byte, 190))
		bs[i] = b
	}
	_, err := e.queue.QueueBlocks(e.admin(), &nightloomv1.QueueBlocksRequest{Blocks: bs})
	wantCode(t, err, codes.ResourceExhausted, "oversized QueueBlocks")
	if _, err := e.sites.GetSite(e.admin(), &nightloomv1.GetSiteRequest{SiteId: f.site.GetId()}); err != nil {
		t.Fatalf("after an oversized message: %v", err)
	}

}

// TestQueueLimitPerSite: queuing past the per-site limit is refused with
// RESOURCE_EXHAUSTED and writes nothing; a retry of an accepted call with
// a request id still succeeds as a duplicate.
func TestQueueLimitPerSite(t *testing.T) {
	e := newEnv(t, "", func(c *Config) { c.maxQueuedPerSite = 5 })
	f := e.seed(t, 0)
	mk := func(n int) []*nightloomv1.Block {
		var bs []*nightloomv1.Block
		for i := 0; i < n; i++ {
			bs = append(bs, testBlock(f.site.GetId(), f.targets[0].GetId(), "L", 10, 1))
		}
		return bs
	}
	first := &nightloomv1.QueueBlocksRequest{Blocks: mk(4), RequestId: "fill-1"}
	if _, err := e.queue.QueueBlocks(e.admin(), first); err != nil {
		t.Fatal(err)
	}
	before := e.snapshot(t)
	_, err := e.queue.QueueBlocks(e.admin(), &nightloomv1.QueueBlocksRequest{Blocks: mk(2)})
	wantCode(t, err, codes.ResourceExhausted, "past the queue limit")
	if e.snapshot(t) != before {
		t.Error("refused QueueBlocks wrote")
	}
	r, err := e.queue.QueueBlocks(e.admin(), first)
	if err != nil || !r.GetDuplicate() {
		t.Errorf("retry at the limit: %v %v", r, err)
	}
	if _, err := e.queue.QueueBlocks(e.admin(), &nightloomv1.QueueBlocksRequest{Blocks: mk(1)}); err != nil {
		t.Errorf("the fifth block: %v", err)
	}
}
