package server

import (
	"math"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/protobuf/proto"

	"github.com/nightloom/nightloom/ephem"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// Invented objects in the one-line formats (columns as in ephem/elements).
const (
	importComet = "    CK31X010  2032 01 14.5282  0.214760  1.000412  128.3342  301.9915  141.0077  20320120   6.5  4.0  C/2031 X1 (Invented)"
	importMinor = "K29B07Q 15.31  0.15 K31AH 200.12345   85.54321  123.45678   10.98765  0.1834567  0.21249448   2.7812345"
)

// TestBodyTarget: a planet as a target is stored, refused by bad name, and
// planned like an orbit target: the plan's pointing at run start is the
// planet's place from ephem directly, with rates and magnitude.
func TestBodyTarget(t *testing.T) {
	e := newEnv(t, "")
	f := e.seed(t, 0)
	ctx := e.admin()
	_, err := e.targets.CreateTarget(ctx, &nightloomv1.CreateTargetRequest{Target: &nightloomv1.Target{Name: "Pluto",
		Position: &nightloomv1.Target_Body{Body: &nightloomv1.BodyTarget{Name: "pluto"}}}})
	wantCode(t, err, codes.InvalidArgument, "unknown body")
	if fs := violationFields(err); len(fs) != 1 || fs[0] != "target.body.name" {
		t.Errorf("violations %v, want target.body.name", fs)
	}

	// Pick the planet that climbs highest in the dark part of the test
	// night (hourly, 21-04 UTC), so that the test does not depend on which
	// planets happen to be up.
	o, _ := ephem.NewObserver(41.6, -4.2, 900)
	best, bestAlt := "", -90.0
	for h := 21; h <= 28; h++ {
		s := ephem.Prepare(ephem.NewInstant(time.Date(2031, 3, 15, h, 0, 0, 0, time.UTC)))
		l := s.Local(&o)
		for _, n := range ephem.BodyNames()[:7] {
			b, _ := ephem.ParseBody(n)
			m, _ := ephem.NewBody(b)
			p, _, _ := l.OrbitPlace(m)
			if p.Alt*ephem.Rad2Deg > bestAlt {
				best, bestAlt = n, p.Alt*ephem.Rad2Deg
			}
		}
	}
	if bestAlt < 30 {
		t.Fatalf("no planet above 30 deg in the night (best %s at %.1f)", best, bestAlt)
	}
	ct, err := e.targets.CreateTarget(ctx, &nightloomv1.CreateTargetRequest{Target: &nightloomv1.Target{Name: best,
		Position: &nightloomv1.Target_Body{Body: &nightloomv1.BodyTarget{Name: best}}}})
	if err != nil {
		t.Fatal(err)
	}
	blk := testBlock(f.site.GetId(), ct.GetTarget().GetId(), "R", 20, 7)
	blk.Exposure = dur(10 * time.Second)
	blk.NonSiderealTracking = true
	blk.Constraints.MaxAirmass = proto.Float64(3)
	if _, err := e.queue.QueueBlocks(as(RoleOperator, e), &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{blk}}); err != nil {
		t.Fatal(err)
	}
	mk, err := e.plans.MakePlan(as(RoleOperator, e), &nightloomv1.MakePlanRequest{SiteId: f.site.GetId(),
		Span: &nightloomv1.MakePlanRequest_Night{Night: testNight}, TimeBudget: dur(200 * time.Millisecond), Seed: 3})
	if err != nil {
		t.Fatal(err)
	}
	var a *nightloomv1.Assignment
	for _, x := range mk.GetPlans()[0].GetAssignments() {
		if x.GetTargetId() == ct.GetTarget().GetId() {
			a = x
		}
	}
	if a == nil {
		t.Fatalf("%s not planned: unplaced %v", best, mk.GetPlans()[0].GetUnplaced())
	}
	// The pointing at run start against ephem: apparent place of date.
	start := a.GetStart().AsTime()
	s := ephem.Prepare(ephem.NewInstant(start))
	l := s.Local(&o)
	b, _ := ephem.ParseBody(best)
	m, _ := ephem.NewBody(b)
	p, topo, _ := l.OrbitPlace(m)
	const tolArcsec = 1.0
	got := ephem.SphericalToVec(a.GetPointing().GetRaApparentDeg()*ephem.Deg2Rad, a.GetPointing().GetDecApparentDeg()*ephem.Deg2Rad)
	if d := ephem.Separation(got, p.OfDate) * ephem.Rad2Arcsec; d > tolArcsec {
		t.Errorf("pointing at %v is %.3f arcsec from ephem's %s (tolerance %g)", start, d, best, tolArcsec)
	}
	if a.GetRate() == nil || math.Abs(a.GetRate().GetRaCosDecArcsecPerMin()-topo.RateRA) > 0.01 {
		t.Errorf("rate %v, want %.4f arcsec/min in RA", a.GetRate(), topo.RateRA)
	}
	if a.GetConditionsAtStart().Magnitude == nil {
		t.Errorf("no predicted magnitude for %s", best)
	}
}

// TestImportElements: all or nothing, idempotent on the request id, bad
// lines named with line and columns, skip_bad_lines, and the imported orbit
// equal to the line's elements.
func TestImportElements(t *testing.T) {
	e := newEnv(t, "")
	ctx := e.admin()
	count := func() int {
		lt, err := e.targets.ListTargets(ctx, &nightloomv1.ListTargetsRequest{PageSize: 500})
		if err != nil {
			t.Fatal(err)
		}
		return len(lt.GetTargets())
	}
	bad := strings.Replace(importMinor, "0.1834567", "1.1834567", 1)
	text := "# invented\n" + importComet + "\n" + bad + "\n"
	_, err := e.targets.ImportElements(ctx, &nightloomv1.ImportElementsRequest{RequestId: "imp-1", Text: text})
	wantCode(t, err, codes.InvalidArgument, "bad line")
	if !strings.Contains(err.Error(), "line 3, columns 71-79") {
		t.Errorf("error %q should name line 3, columns 71-79", err)
	}
	if n := count(); n != 0 {
		t.Fatalf("%d targets stored after a refused import", n)
	}

	text = importComet + "\n" + importMinor + "\n"
	r1, err := e.targets.ImportElements(ctx, &nightloomv1.ImportElementsRequest{RequestId: "imp-2", Text: text})
	if err != nil {
		t.Fatal(err)
	}
	if len(r1.GetTargets()) != 2 || r1.GetTargets()[0].GetName() != "C/2031 X1 (Invented)" || r1.GetTargets()[1].GetName() != "2029 BQ7" {
		t.Fatalf("imported %v", r1.GetTargets())
	}
	o := r1.GetTargets()[0].GetOrbit()
	if o.GetPerihelionDistanceAu() != 0.21476 || o.GetEccentricity() != 1.000412 || o.GetComet().GetK1() != 10 ||
		!o.GetPerihelionTimeTt().AsTime().Equal(time.Date(2032, 1, 14, 12, 40, 36, 480000000, time.UTC)) {
		t.Errorf("comet elements %v", o)
	}
	// A retry returns the same targets and stores nothing new.
	r2, err := e.targets.ImportElements(ctx, &nightloomv1.ImportElementsRequest{RequestId: "imp-2", Text: text})
	if err != nil {
		t.Fatal(err)
	}
	if len(r2.GetTargets()) != 2 || r2.GetTargets()[0].GetId() != r1.GetTargets()[0].GetId() || count() != 2 {
		t.Errorf("retry: %v, %d stored", r2.GetTargets(), count())
	}
	// The same id with another text is refused.
	_, err = e.targets.ImportElements(ctx, &nightloomv1.ImportElementsRequest{RequestId: "imp-2", Text: importComet})
	wantCode(t, err, codes.AlreadyExists, "reused request id")
	// skip_bad_lines keeps the good line and reports the bad one.
	r3, err := e.targets.ImportElements(ctx, &nightloomv1.ImportElementsRequest{RequestId: "imp-3",
		Text: bad + "\n" + importComet, SkipBadLines: true})
	if err != nil {
		t.Fatal(err)
	}
	if len(r3.GetTargets()) != 1 || len(r3.GetSkippedLines()) != 1 || r3.GetSkippedLines()[0].GetLine() != 1 ||
		r3.GetSkippedLines()[0].GetFirstColumn() != 71 {
		t.Errorf("skip_bad_lines: %v", r3)
	}
	// Only administrators import.
	_, err = e.targets.ImportElements(as(RoleViewer, e), &nightloomv1.ImportElementsRequest{RequestId: "imp-4", Text: importComet})
	wantCode(t, err, codes.PermissionDenied, "viewer import")
	_, err = e.targets.ImportElements(ctx, &nightloomv1.ImportElementsRequest{Text: importComet})
	wantCode(t, err, codes.InvalidArgument, "no request id")
}
