package server

import (
	"github.com/nightloom/nightloom/constraints"
	"math"
	"testing"
	"time"

	"google.golang.org/protobuf/proto"

	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// Tolerances in physical units.
const (
	arcsec        = 1.0 / 3600 // deg
	eventAltTol   = 0.01       // deg of solar altitude at a reported event (~3 s of time)
	darkSampleTol = 2 * time.Minute
)

// kastenYoung is the airmass formula of Kasten & Young (1989, Applied Optics
// 28, 4735, eq. 3), written out here independently of ephem.Airmass:
// X = 1 / (sin h + 0.50572 (h + 6.07995 deg)^-1.6364), h in degrees.
func kastenYoung(hDeg float64) float64 {
	return 1 / (math.Sin(hDeg*math.Pi/180) + 0.50572*math.Pow(hDeg+6.07995, -1.6364))
}

func TestNight(t *testing.T) {
	e := newEnv(t, "")
	f := e.seed(t, 0)
	ctx := as(RoleViewer, e)
	n, err := e.sky.Night(ctx, &nightloomv1.NightRequest{SiteId: f.site.GetId(), Date: testNight})
	if err != nil {
		t.Fatal(err)
	}
	order := []struct {
		name string
		at   time.Time
		alt  float64 // the Sun's geometric altitude at the event (sky.proto)
	}{
		{"sunset", n.GetSunset().AsTime(), -0.8333},
		{"civil dusk", n.GetCivilDusk().AsTime(), -6},
		{"nautical dusk", n.GetNauticalDusk().AsTime(), -12},
		{"astronomical dusk", n.GetAstronomicalDusk().AsTime(), -18},
		{"astronomical dawn", n.GetAstronomicalDawn().AsTime(), -18},
		{"nautical dawn", n.GetNauticalDawn().AsTime(), -12},
		{"civil dawn", n.GetCivilDawn().AsTime(), -6},
		{"sunrise", n.GetSunrise().AsTime(), -0.8333},
	}
	w0, w1 := n.GetWindow().GetStart().AsTime(), n.GetWindow().GetEnd().AsTime()
	if w1.Sub(w0) != 24*time.Hour {
		t.Errorf("window %v-%v is not 24 h", w0, w1)
	}
	for i, ev := range order {
		if ev.at.Before(w0) || !ev.at.Before(w1) || (i > 0 && !ev.at.After(order[i-1].at)) {
			t.Fatalf("%s at %v out of order or outside the window", ev.name, ev.at)
		}
		// Each event against the Sun's altitude in an Ephemeris row at that
		// instant (another code path: direct place, no root finding).
		eph, err := e.sky.Ephemeris(ctx, &nightloomv1.EphemerisRequest{SiteId: f.site.GetId(),
			Subject:  &nightloomv1.EphemerisRequest_TargetId{TargetId: f.targets[0].GetId()},
			Interval: &nightloomv1.TimeInterval{Start: ts(ev.at), End: ts(ev.at.Add(time.Second))}})
		if err != nil {
			t.Fatal(err)
		}
		if got := eph.GetRows()[0].GetSunAltitudeDeg(); math.Abs(got-ev.alt) > eventAltTol {
			t.Errorf("%s: Sun at %.4f deg, want %.4f +- %v", ev.name, got, ev.alt, eventAltTol)
		}
	}
	pi := n.GetPlanningInterval()
	if !pi.GetStart().AsTime().Equal(n.GetSunset().AsTime()) || !pi.GetEnd().AsTime().Equal(n.GetSunrise().AsTime()) {
		t.Errorf("planning interval %v, want sunset to sunrise", pi)
	}
	if n.GetMoonIllumination() < 0 || n.GetMoonIllumination() > 1 {
		t.Errorf("moon illumination %v", n.GetMoonIllumination())
	}
	// Dark times against a 1-minute sampling of the same night.
	eph, err := e.sky.Ephemeris(ctx, &nightloomv1.EphemerisRequest{SiteId: f.site.GetId(),
		Subject: &nightloomv1.EphemerisRequest_TargetId{TargetId: f.targets[0].GetId()}, Interval: n.GetWindow(), Step: dur(time.Minute)})
	if err != nil {
		t.Fatal(err)
	}
	var dark, moonless time.Duration
	for _, r := range eph.GetRows() {
		if r.GetSunAltitudeDeg() < -18 {
			dark += time.Minute
			// Moon down: its apparent centre below minus its
			// semidiameter (about 0.26 deg) - the upper limb under the
			// horizon, as moonrise and moonset define it.
			if r.GetMoonAltitudeDeg() < -0.26 {
				moonless += time.Minute
			}
		}
		if r.GetDarkness() != darknessLevel(r.GetSunAltitudeDeg()) {
			t.Fatalf("row %v: darkness %v for the Sun at %v", r.GetTime().AsTime(), r.GetDarkness(), r.GetSunAltitudeDeg())
		}
	}
	if d := n.GetAstronomicalDark().AsDuration() - dark; d > darkSampleTol || d < -darkSampleTol {
		t.Errorf("astronomical dark %v, sampled %v (+- %v)", n.GetAstronomicalDark().AsDuration(), dark, darkSampleTol)
	}
	if d := n.GetMoonlessDark().AsDuration() - moonless; d > 3*darkSampleTol || d < -3*darkSampleTol {
		t.Errorf("moonless dark %v, sampled %v (+- %v)", n.GetMoonlessDark().AsDuration(), moonless, 3*darkSampleTol)
	}
}

// TestNightPolarDay: where the Sun does not set, sunset is unset (never
// invented), there is no planning interval, and MakePlan stores a plan
// that covers nothing.
func TestNightPolarDay(t *testing.T) {
	e := newEnv(t, "")
	s := testSite()
	s.Name, s.LatitudeDeg, s.LongitudeDeg, s.TimeZone = "Skerrivane Station", 78.2, 15.6, "Arctic/Longyearbyen"
	cs, err := e.sites.CreateSite(e.admin(), &nightloomv1.CreateSiteRequest{Site: s})
	if err != nil {
		t.Fatal(err)
	}
	midsummer := &nightloomv1.LocalDate{Year: 2031, Month: 6, Day: 21}
	n, err := e.sky.Night(e.admin(), &nightloomv1.NightRequest{SiteId: cs.GetSite().GetId(), Date: midsummer})
	if err != nil {
		t.Fatal(err)
	}
	if n.GetSunset() != nil || n.GetSunrise() != nil || n.GetPlanningInterval() != nil || n.GetAstronomicalDark().AsDuration() != 0 {
		t.Errorf("polar day: sunset %v sunrise %v planning %v dark %v", n.GetSunset(), n.GetSunrise(), n.GetPlanningInterval(), n.GetAstronomicalDark())
	}
	mk, err := e.plans.MakePlan(e.admin(), &nightloomv1.MakePlanRequest{SiteId: cs.GetSite().GetId(),
		Span: &nightloomv1.MakePlanRequest_Night{Night: midsummer}})
	if err != nil {
		t.Fatal(err)
	}
	p := mk.GetPlans()[0]
	if !p.GetInterval().GetStart().AsTime().Equal(p.GetInterval().GetEnd().AsTime()) || len(p.GetAssignments()) != 0 {
		t.Errorf("polar-day plan covers %v with %d assignments", p.GetInterval(), len(p.GetAssignments()))
	}
}

func TestEphemeris(t *testing.T) {
	e := newEnv(t, "")
	ctx := e.admin()
	// A site without refraction (pressure 0), so that altitudes are
	// geometric and the textbook relation holds.
	s := testSite()
	s.PressureHpa = proto.Float64(0)
	cs, err := e.sites.CreateSite(ctx, &nightloomv1.CreateSiteRequest{Site: s})
	if err != nil {
		t.Fatal(err)
	}
	site := cs.GetSite()
	start := time.Date(2031, 3, 15, 18, 0, 0, 0, time.UTC)
	eph, err := e.sky.Ephemeris(ctx, &nightloomv1.EphemerisRequest{SiteId: site.GetId(),
		Subject:  &nightloomv1.EphemerisRequest_Target{Target: testFixed("Thimbleweed Nebula", 101.5, 18.2)},
		Interval: &nightloomv1.TimeInterval{Start: ts(start), End: ts(start.Add(12*time.Hour + time.Second))}, Step: dur(30 * time.Minute)})
	if err != nil {
		t.Fatal(err)
	}
	if len(eph.GetRows()) != 25 {
		t.Fatalf("%d rows, want 25 (12 h at 30 min, end exclusive, plus one second)", len(eph.GetRows()))
	}
	phi := site.GetLatitudeDeg() * math.Pi / 180
	for i, r := range eph.GetRows() {
		if !r.GetTime().AsTime().Equal(start.Add(time.Duration(i) * 30 * time.Minute)) {
			t.Fatalf("row %d at %v", i, r.GetTime().AsTime())
		}
		p := r.GetPointing()
		// Meeus, Astronomical Algorithms, 2nd ed., eq. 13.6:
		// sin h = sin phi sin delta + cos phi cos delta cos H.
		d, H := p.GetDecApparentDeg()*math.Pi/180, p.GetHourAngleDeg()*math.Pi/180
		h := math.Asin(math.Sin(phi)*math.Sin(d)+math.Cos(phi)*math.Cos(d)*math.Cos(H)) * 180 / math.Pi
		if math.Abs(h-p.GetAltitudeDeg()) > arcsec {
			t.Errorf("row %d: altitude %.6f, eq. 13.6 gives %.6f (tolerance 1 arcsec)", i, p.GetAltitudeDeg(), h)
		}
		if side := p.GetMeridianSide(); (p.GetHourAngleDeg() < 0) != (side == nightloomv1.MeridianSide_MERIDIAN_SIDE_EAST) {
			t.Errorf("row %d: hour angle %v on side %v", i, p.GetHourAngleDeg(), side)
		}
		if p.GetAltitudeDeg() < 0 {
			if r.Airmass != nil || r.SkyBrightnessVMagArcsec2 != nil {
				t.Errorf("row %d below the horizon has airmass %v sky %v", i, r.Airmass, r.SkyBrightnessVMagArcsec2)
			}
			continue
		}
		// ephem tabulates the power term; it documents a relative error
		// below 5e-6 (ephem.AirmassSin).
		if x := kastenYoung(p.GetAltitudeDeg()); r.Airmass == nil || math.Abs(r.GetAirmass()-x) > 5e-6*x {
			t.Errorf("row %d: airmass %v, Kasten & Young give %v (relative tolerance 5e-6)", i, r.GetAirmass(), x)
		}
	}

	// A fixed target with proper motion from epoch 2016.0: at that epoch
	// (TT) its ICRS place is the catalogue place.
	pm := testFixed("Quillfen Runaway", 152.0, 31.0)
	pm.GetFixed().ProperMotion = &nightloomv1.ProperMotion{RaCosDecMasPerYr: 4000, DecMasPerYr: -9000, EpochJulianYear: 2016}
	// J2016.0 = JD 2457389.0 TT = 2016-01-01T12:00:00 TT; UTC = TT - 68.184 s.
	at := time.Date(2016, 1, 1, 12, 0, 0, 0, time.UTC).Add(-68184 * time.Millisecond)
	eph, err = e.sky.Ephemeris(ctx, &nightloomv1.EphemerisRequest{SiteId: site.GetId(), Subject: &nightloomv1.EphemerisRequest_Target{Target: pm},
		Interval: &nightloomv1.TimeInterval{Start: ts(at), End: ts(at.Add(time.Second))}})
	if err != nil {
		t.Fatal(err)
	}
	p := eph.GetRows()[0].GetPointing()
	if dra, ddec := (p.GetRaIcrsDeg()-152)*math.Cos(31*math.Pi/180), p.GetDecIcrsDeg()-31; math.Hypot(dra, ddec) > 1e-4*arcsec {
		t.Errorf("ICRS place at the catalogue epoch: %.7f %.7f, want 152 31 (within 1e-4 arcsec)", p.GetRaIcrsDeg(), p.GetDecIcrsDeg())
	}

	// The invented comet: orbit state, its magnitude law, and extinction.
	ct, err := e.targets.CreateTarget(ctx, &nightloomv1.CreateTargetRequest{Target: testComet()})
	if err != nil {
		t.Fatal(err)
	}
	eph, err = e.sky.Ephemeris(ctx, &nightloomv1.EphemerisRequest{SiteId: site.GetId(), Subject: &nightloomv1.EphemerisRequest_TargetId{TargetId: ct.GetTarget().GetId()},
		Interval: &nightloomv1.TimeInterval{Start: ts(start), End: ts(start.Add(24 * time.Hour))}, Step: dur(time.Hour)})
	if err != nil {
		t.Fatal(err)
	}
	for i, r := range eph.GetRows() {
		o := r.GetOrbit()
		if o == nil || o.Magnitude == nil {
			t.Fatalf("row %d: no orbit state or magnitude: %v", i, o)
		}
		// m = M1 + 5 log10(delta) + K1 log10(r) (target.proto).
		m := 7.5 + 5*math.Log10(o.GetGeocentricDistanceAu()) + 10*math.Log10(o.GetHeliocentricDistanceAu())
		if math.Abs(o.GetMagnitude()-m) > 1e-6 {
			t.Errorf("row %d: magnitude %v, the law gives %v", i, o.GetMagnitude(), m)
		}
		if r.Airmass != nil {
			if want := o.GetMagnitude() + 0.2*r.GetAirmass(); o.ObservedMagnitude == nil || math.Abs(o.GetObservedMagnitude()-want) > 1e-9 {
				t.Errorf("row %d: observed magnitude %v, want %v", i, o.ObservedMagnitude, want)
			}
		}
		if o.GetRate() == nil || (o.GetRate().GetRaCosDecArcsecPerMin() == 0 && o.GetRate().GetDecArcsecPerMin() == 0) {
			t.Errorf("row %d: comet without motion: %v", i, o.GetRate())
		}
	}
}

func TestVisibility(t *testing.T) {
	e := newEnv(t, "")
	f := e.seed(t, 0)
	ctx := as(RoleViewer, e)
	cons := &nightloomv1.ConstraintSet{MaxAirmass: proto.Float64(1.6), RequiredDarkness: nightloomv1.Darkness_DARKNESS_ASTRONOMICAL,
		MinMoonSeparationDeg: proto.Float64(20)}
	v, err := e.sky.Visibility(ctx, &nightloomv1.VisibilityRequest{Subject: &nightloomv1.VisibilityRequest_TargetId{TargetId: f.targets[1].GetId()},
		SiteId: f.site.GetId(), Constraints: cons, Span: &nightloomv1.VisibilityRequest_Night{Night: testNight}})
	if err != nil {
		t.Fatal(err)
	}
	if len(v.GetWindows()) == 0 || len(v.GetBlocked()) == 0 {
		t.Fatalf("windows %d, blocked %d: want both", len(v.GetWindows()), len(v.GetBlocked()))
	}
	// Windows and blocked spans tile the interval in time order.
	type span struct {
		a, b time.Time
		ok   bool
	}
	var all []span
	var visible time.Duration
	for _, w := range v.GetWindows() {
		all = append(all, span{w.GetInterval().GetStart().AsTime(), w.GetInterval().GetEnd().AsTime(), true})
		visible += w.GetInterval().GetEnd().AsTime().Sub(w.GetInterval().GetStart().AsTime())
		if w.GetMinAirmass() > 1.6 || w.GetBestQuality() <= 0 || w.GetBestQuality() > 1 || w.GetMeanQuality() > w.GetBestQuality() {
			t.Errorf("window %v: airmass %v quality %v/%v", w.GetInterval(), w.GetMinAirmass(), w.GetMeanQuality(), w.GetBestQuality())
		}
	}
	for _, b := range v.GetBlocked() {
		all = append(all, span{b.GetInterval().GetStart().AsTime(), b.GetInterval().GetEnd().AsTime(), false})
		if b.GetReason() == nightloomv1.Reason_REASON_UNSPECIFIED {
			t.Errorf("blocked span %v without a reason", b.GetInterval())
		}
	}
	sortSpans := func(s []span) {
		for i := 1; i < len(s); i++ {
			for j := i; j > 0 && s[j].a.Before(s[j-1].a); j-- {
				s[j], s[j-1] = s[j-1], s[j]
			}
		}
	}
	sortSpans(all)
	if !all[0].a.Equal(v.GetInterval().GetStart().AsTime()) || !all[len(all)-1].b.Equal(v.GetInterval().GetEnd().AsTime()) {
		t.Errorf("spans run %v-%v, interval %v", all[0].a, all[len(all)-1].b, v.GetInterval())
	}
	for i := 1; i < len(all); i++ {
		if !all[i].a.Equal(all[i-1].b) {
			t.Errorf("gap or overlap between %v and %v", all[i-1].b, all[i].a)
		}
	}
	if visible != v.GetVisibleTime().AsDuration() {
		t.Errorf("visible time %v, windows add up to %v", v.GetVisibleTime().AsDuration(), visible)
	}
	// The windows are the planner's continuous intervals: checked directly
	// at single instants, each window holds at its start, middle and last
	// second, and fails within constraints.EdgeResolution beyond either
	// edge that is not the interval's; every blocked span fails at its
	// middle.
	sm, _, err := e.srv.loadSite(ctx, f.site.GetId())
	if err != nil {
		t.Fatal(err)
	}
	_, tgt, err := e.srv.loadTarget(ctx, f.targets[1].GetId())
	if err != nil {
		t.Fatal(err)
	}
	ivA, ivB := v.GetInterval().GetStart().AsTime(), v.GetInterval().GetEnd().AsTime()
	g, err := constraints.NewGrid(sm.cons, ivA, ivB, v.GetStep().AsDuration(), constraints.Options{})
	if err != nil {
		t.Fatal(err)
	}
	req := constraints.Request{Set: constraintSet(cons, false)}
	for _, w := range v.GetWindows() {
		a, b := w.GetInterval().GetStart().AsTime(), w.GetInterval().GetEnd().AsTime()
		for _, at := range []time.Time{a, a.Add(b.Sub(a) / 2), b.Add(-time.Second)} {
			if r := g.CheckAt(tgt, req, at); r != constraints.OK {
				t.Errorf("window %v-%v: %v at %v", a, b, r, at)
			}
		}
		if a.After(ivA) && g.CheckAt(tgt, req, a.Add(-constraints.EdgeResolution)) == constraints.OK {
			t.Errorf("window %v-%v: observable %v before its start", a, b, constraints.EdgeResolution)
		}
		if b.Before(ivB) && g.CheckAt(tgt, req, b.Add(constraints.EdgeResolution)) == constraints.OK {
			t.Errorf("window %v-%v: observable %v after its end", a, b, constraints.EdgeResolution)
		}
		if a.Sub(ivA)%v.GetStep().AsDuration() == 0 && b.Sub(ivA)%v.GetStep().AsDuration() == 0 {
			t.Logf("window %v-%v: both edges on the grid", a, b)
		}
	}
	for _, bs := range v.GetBlocked() {
		a, b := bs.GetInterval().GetStart().AsTime(), bs.GetInterval().GetEnd().AsTime()
		if r := g.CheckAt(tgt, req, a.Add(b.Sub(a)/2)); r == constraints.OK {
			t.Errorf("blocked span %v-%v (%v) is observable at its middle", a, b, bs.GetReason())
		}
	}

	// At the start of the night the sky is not dark enough.
	if r := v.GetBlocked()[0].GetReason(); r != nightloomv1.Reason_REASON_TOO_BRIGHT_TWILIGHT {
		t.Errorf("first blocked span: %v, want TOO_BRIGHT_TWILIGHT", r)
	}

	// A block: its own constraints; a block whose dates exclude the night
	// is blocked all night by its date window.
	b := testBlock(f.site.GetId(), f.targets[1].GetId(), "L", 10, 5)
	late := proto.Clone(b).(*nightloomv1.Block)
	late.EarliestDate = &nightloomv1.LocalDate{Year: 2031, Month: 4, Day: 1}
	q, err := e.queue.QueueBlocks(e.admin(), &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{b, late}})
	if err != nil {
		t.Fatal(err)
	}
	vb, err := e.sky.Visibility(ctx, &nightloomv1.VisibilityRequest{Subject: &nightloomv1.VisibilityRequest_BlockId{BlockId: q.GetBlocks()[0].GetId()},
		Span: &nightloomv1.VisibilityRequest_Night{Night: testNight}})
	if err != nil {
		t.Fatal(err)
	}
	if len(vb.GetWindows()) == 0 || !vb.GetWindows()[0].GetFitsShortestRun() {
		t.Errorf("block visibility: %v", vb.GetWindows())
	}
	vl, err := e.sky.Visibility(ctx, &nightloomv1.VisibilityRequest{Subject: &nightloomv1.VisibilityRequest_BlockId{BlockId: q.GetBlocks()[1].GetId()},
		Span: &nightloomv1.VisibilityRequest_Night{Night: testNight}})
	if err != nil {
		t.Fatal(err)
	}
	if len(vl.GetWindows()) != 0 || len(vl.GetBlocked()) != 1 || vl.GetBlocked()[0].GetReason() != nightloomv1.Reason_REASON_DATE_WINDOW {
		t.Errorf("block outside its dates: windows %v blocked %v", vl.GetWindows(), vl.GetBlocked())
	}
}
