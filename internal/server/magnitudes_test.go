package server

import (
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc/codes"

	"github.com/nightloom/nightloom/ephem"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// TestRefitMagnitudeLaw: magnitudes of the test comet simulated from a
// known law (M1 6.8, K1 12) with 0.2 mag of noise (fixed seed) are
// reported, refitted and applied: the fit recovers the law within three of
// its stated sigmas, the target's law changes, Ephemeris predicts with it,
// and the history lists the fit. One observation, a fixed target and a
// retried report behave as documented.
func TestRefitMagnitudeLaw(t *testing.T) {
	const trueM1, trueK1, sigma = 6.8, 12.0, 0.2
	e := newEnv(t, "")
	f := e.seed(t, 0)
	cl := nightloomv1.NewApparitionServiceClient(e.conn)
	op := as(RoleOperator, e)
	comet := f.targets[4]
	_, ct, err := e.srv.loadTarget(t.Context(), comet.GetId())
	if err != nil {
		t.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(31, 2031))
	var obs []*nightloomv1.MagnitudeObservation
	var zero ephem.Vec3
	for i := 0; i < 20; i++ {
		at := time.Date(2031, 2, 10, 4, 0, 0, 0, time.UTC).Add(time.Duration(i*2) * 24 * time.Hour)
		s := ephem.Prepare(ephem.NewInstant(at))
		w := ct.Orbit.Observe(s.TT, s.EarthPos, s.EarthVel, zero, zero)
		m := trueM1 + 5*math.Log10(w.DeltaAU) + trueK1*math.Log10(w.RAU) + sigma*rng.NormFloat64()
		obs = append(obs, &nightloomv1.MagnitudeObservation{Id: fmt.Sprintf("obs-%02d", i), Time: ts(at), Magnitude: m, SigmaMag: sigma})
	}
	_, err = cl.RefitMagnitudeLaw(op, &nightloomv1.RefitMagnitudeLawRequest{TargetId: comet.GetId()})
	wantCode(t, err, codes.FailedPrecondition, "refit without observations")
	r1, err := cl.ReportMagnitudes(as(RoleTelescope, e), &nightloomv1.ReportMagnitudesRequest{TargetId: comet.GetId(), Observations: obs[:1]})
	if err != nil || r1.GetAdded() != 1 {
		t.Fatalf("report one: %v %v", r1, err)
	}
	_, err = cl.RefitMagnitudeLaw(op, &nightloomv1.RefitMagnitudeLawRequest{TargetId: comet.GetId()})
	wantCode(t, err, codes.FailedPrecondition, "refit from one observation")
	if !strings.Contains(err.Error(), "at least 2 observations") {
		t.Errorf("message %q should say at least 2 observations", err)
	}
	r2, err := cl.ReportMagnitudes(op, &nightloomv1.ReportMagnitudesRequest{TargetId: comet.GetId(), Observations: obs})
	if err != nil || r2.GetAdded() != 19 {
		t.Fatalf("report all (one retried): %v %v", r2, err)
	}
	rf, err := cl.RefitMagnitudeLaw(op, &nightloomv1.RefitMagnitudeLawRequest{TargetId: comet.GetId(), Apply: true})
	if err != nil {
		t.Fatal(err)
	}
	fit := rf.GetFit()
	t.Logf("M1 %.3f +- %.3f, K1 %.3f +- %.3f, chi2 %.1f / %d", fit.GetFitted().GetM1(), fit.GetSigmaM1(), fit.GetFitted().GetK1(),
		fit.GetSigmaK1(), fit.GetChi2(), fit.GetDegreesOfFreedom())
	if fit.GetK1Fixed() || math.Abs(fit.GetFitted().GetM1()-trueM1) > 3*fit.GetSigmaM1() ||
		math.Abs(fit.GetFitted().GetK1()-trueK1) > 3*fit.GetSigmaK1() || len(fit.GetResiduals()) != 20 {
		t.Errorf("fit %v does not recover M1 %.1f, K1 %.1f", fit, trueM1, trueK1)
	}
	if fit.GetPrior().GetM1() != 7.5 || fit.GetResiduals()[0].PriorMagnitude == nil {
		t.Errorf("prior law %v", fit.GetPrior())
	}
	law := rf.GetTarget().GetOrbit().GetComet()
	if law.GetM1() != fit.GetFitted().GetM1() || law.GetK1() != fit.GetFitted().GetK1() {
		t.Errorf("target law %v after apply, want %v", law, fit.GetFitted())
	}
	// Ephemeris now predicts with the fitted law.
	at := time.Date(2031, 3, 15, 4, 0, 0, 0, time.UTC)
	eph, err := e.sky.Ephemeris(as(RoleViewer, e), &nightloomv1.EphemerisRequest{SiteId: f.site.GetId(),
		Subject:  &nightloomv1.EphemerisRequest_TargetId{TargetId: comet.GetId()},
		Interval: &nightloomv1.TimeInterval{Start: ts(at), End: ts(at.Add(time.Minute))}})
	if err != nil {
		t.Fatal(err)
	}
	o := eph.GetRows()[0].GetOrbit()
	want := law.GetM1() + 5*math.Log10(o.GetGeocentricDistanceAu()) + law.GetK1()*math.Log10(o.GetHeliocentricDistanceAu())
	if math.Abs(o.GetMagnitude()-want) > 1e-3 {
		t.Errorf("ephemeris magnitude %.4f, want %.4f from the fitted law", o.GetMagnitude(), want)
	}
	hist, err := cl.MagnitudeHistory(as(RoleViewer, e), &nightloomv1.MagnitudeHistoryRequest{TargetId: comet.GetId()})
	if err != nil || len(hist.GetFits()) != 1 || !hist.GetFits()[0].GetApplied() || len(hist.GetObservations()) != 20 {
		t.Fatalf("history: %v %v", hist, err)
	}
	// A fixed target has no comet law to fit.
	_, err = cl.ReportMagnitudes(op, &nightloomv1.ReportMagnitudesRequest{TargetId: f.targets[0].GetId(), Observations: obs[:1]})
	wantCode(t, err, codes.FailedPrecondition, "fixed target")
	// Bad input names the field.
	_, err = cl.ReportMagnitudes(op, &nightloomv1.ReportMagnitudesRequest{TargetId: comet.GetId(),
		Observations: []*nightloomv1.MagnitudeObservation{{Id: "x", Time: ts(at), Magnitude: 9, SigmaMag: 0}}})
	wantCode(t, err, codes.InvalidArgument, "zero sigma")
	if fs := violationFields(err); len(fs) != 1 || fs[0] != "observations[0].sigma_mag" {
		t.Errorf("violations %v", fs)
	}
}
