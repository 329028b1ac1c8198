package server

import (
	"context"
	"fmt"
	"math"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/ephem"
	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// Limits of the magnitude RPCs (apparition.proto).
const (
	MaxMagnitudesPerCall = 1000
	maxRefitObservations = 10000
	maxNoteBytes         = 200
	// defaultPriorK1 is K1 when a comet has no law yet: 2.5 times an
	// activity index of 4 (common practice, no source).
	defaultPriorK1 = 10
	fitPrefix      = "fit-"
)

// cometTarget loads a target and checks that it is a comet: an orbit with a
// comet law or none.
func (s *Server) cometTarget(ctx context.Context, id string) (store.Target, *nightloomv1.Target, error) {
	rec, err := s.db.GetTarget(ctx, id)
	if err != nil {
		return rec, nil, err
	}
	t, err := targetProto(rec)
	if err != nil {
		return rec, nil, err
	}
	if o := t.GetOrbit(); o == nil || o.GetAsteroid() != nil {
		return rec, nil, failedPrecondition("target %s is not a comet (an orbit target with a comet magnitude law or none)", id)
	}
	return rec, t, nil
}

func (x *apparitionService) ReportMagnitudes(ctx context.Context, req *nightloomv1.ReportMagnitudesRequest) (*nightloomv1.ReportMagnitudesResponse, error) {
	var v violations
	requiredID(&v, "target_id", req.GetTargetId())
	if n := len(req.GetObservations()); n < 1 || n > MaxMagnitudesPerCall {
		v.add("observations", "must hold 1..%d observations", MaxMagnitudesPerCall)
	}
	var recs []store.MagnitudeObservation
	for i, o := range req.GetObservations() {
		p := fmt.Sprintf("observations[%d]", i)
		requiredID(&v, p+".id", o.GetId())
		at := instant(&v, p+".time", o.GetTime(), true)
		rangeCheck(&v, p+".magnitude", o.GetMagnitude(), -30, 40)
		rangeCheck(&v, p+".sigma_mag", o.GetSigmaMag(), 0.01, 5)
		text(&v, p+".note", o.GetNote(), 0, maxNoteBytes)
		recs = append(recs, store.MagnitudeObservation{ID: o.GetId(), TargetID: req.GetTargetId(), ObservedAt: at,
			Magnitude: o.GetMagnitude(), Sigma: o.GetSigmaMag(), Note: o.GetNote()})
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	if _, _, err := x.s.cometTarget(ctx, req.GetTargetId()); err != nil {
		return nil, err
	}
	n, err := x.s.db.AddMagnitudeObservations(ctx, recs)
	if err != nil {
		return nil, err
	}
	return &nightloomv1.ReportMagnitudesResponse{Added: int32(n)}, nil
}

func (x *apparitionService) RefitMagnitudeLaw(ctx context.Context, req *nightloomv1.RefitMagnitudeLawRequest) (*nightloomv1.RefitMagnitudeLawResponse, error) {
	var v violations
	requiredID(&v, "target_id", req.GetTargetId())
	if err := v.err(); err != nil {
		return nil, err
	}
	rec, t, err := x.s.cometTarget(ctx, req.GetTargetId())
	if err != nil {
		return nil, err
	}
	ct, err := targetModel(t)
	if err != nil {
		return nil, err
	}
	obs, err := x.s.db.MagnitudeObservations(ctx, rec.ID, maxRefitObservations)
	if err != nil {
		return nil, err
	}
	if len(obs) < ephem.MinRefitObservations {
		return nil, failedPrecondition("a brightness fit needs at least %d observations; target %s has %d", ephem.MinRefitObservations, rec.ID, len(obs))
	}
	prior := t.GetOrbit().GetComet()
	priorK1 := float64(defaultPriorK1)
	if prior != nil {
		priorK1 = prior.GetK1()
	}
	// Geometry of each observation, geocentric (the observer's offset
	// changes Delta by under 5e-5 au for a comet beyond 0.1 au).
	mobs := make([]ephem.MagObservation, len(obs))
	var zero ephem.Vec3
	for i, o := range obs {
		s := ephem.Prepare(ephem.NewInstant(o.ObservedAt))
		w := ct.Orbit.Observe(s.TT, s.EarthPos, s.EarthVel, zero, zero)
		mobs[i] = ephem.MagObservation{Mag: o.Magnitude, SigmaMag: o.Sigma, RAU: w.RAU, DeltaAU: w.DeltaAU}
	}
	f, err := ephem.FitCometMagnitude(mobs, priorK1)
	if err != nil {
		return nil, failedPrecondition("%v", err)
	}
	fit := &nightloomv1.MagnitudeFit{Id: newID(fitPrefix), TargetId: rec.ID, Prior: prior,
		Fitted: &nightloomv1.CometMagnitude{M1: f.M1, K1: f.K1}, SigmaM1: f.SigmaM1, SigmaK1: f.SigmaK1,
		CovarianceM1K1: f.CovM1K1, K1Fixed: f.K1Fixed, Chi2: f.Chi2, DegreesOfFreedom: int32(f.Dof), Applied: req.GetApply()}
	for i, o := range obs {
		r := &nightloomv1.MagnitudeResidual{ObservationId: o.ID, Time: timestamppb.New(o.ObservedAt), ObservedMagnitude: o.Magnitude,
			FittedMagnitude: o.Magnitude - f.Residuals[i], SigmaMag: o.Sigma, HeliocentricDistanceAu: mobs[i].RAU,
			GeocentricDistanceAu: mobs[i].DeltaAU}
		if prior != nil {
			r.PriorMagnitude = proto.Float64(prior.GetM1() + 5*math.Log10(mobs[i].DeltaAU) + prior.GetK1()*math.Log10(mobs[i].RAU))
		}
		fit.Residuals = append(fit.Residuals, r)
	}
	var upd *store.Target
	if req.GetApply() {
		nt := proto.Clone(t).(*nightloomv1.Target)
		nt.GetOrbit().MagnitudeLaw = &nightloomv1.OrbitElements_Comet{Comet: proto.Clone(fit.GetFitted()).(*nightloomv1.CometMagnitude)}
		nt = normalizeTarget(nt)
		var tv violations
		checkTarget(&tv, "target", nt)
		if !tv.ok() {
			return nil, failedPrecondition("the fitted law (M1 %.2f, K1 %.2f) is outside the ranges a target accepts; not applied", f.M1, f.K1)
		}
		spec, err := storable(nt)
		if err != nil {
			return nil, err
		}
		upd = &store.Target{ID: rec.ID, Name: rec.Name, Kind: rec.Kind, Spec: spec, Revision: rec.Revision}
	}
	fit.CreateTime = timestamppb.New(x.s.now())
	spec, err := storable(fit)
	if err != nil {
		return nil, err
	}
	stored, err := x.s.db.CreateMagnitudeFit(ctx, store.MagnitudeFit{ID: fit.GetId(), TargetID: rec.ID, Spec: spec}, upd)
	if err != nil {
		return nil, err
	}
	fit.CreateTime = timestamppb.New(stored.CreatedAt)
	after, err := x.s.db.GetTarget(ctx, rec.ID)
	if err != nil {
		return nil, err
	}
	out, err := targetProto(after)
	if err != nil {
		return nil, err
	}
	return &nightloomv1.RefitMagnitudeLawResponse{Fit: fit, Target: out}, nil
}

func (x *apparitionService) MagnitudeHistory(ctx context.Context, req *nightloomv1.MagnitudeHistoryRequest) (*nightloomv1.MagnitudeHistoryResponse, error) {
	var v violations
	requiredID(&v, "target_id", req.GetTargetId())
	if err := v.err(); err != nil {
		return nil, err
	}
	if _, err := x.s.db.GetTarget(ctx, req.GetTargetId()); err != nil {
		return nil, err
	}
	recs, err := x.s.db.MagnitudeFits(ctx, req.GetTargetId())
	if err != nil {
		return nil, err
	}
	resp := &nightloomv1.MagnitudeHistoryResponse{}
	for _, r := range recs {
		f := &nightloomv1.MagnitudeFit{}
		if err := proto.Unmarshal(r.Spec, f); err != nil {
			return nil, err
		}
		f.CreateTime = timestamppb.New(r.CreatedAt)
		resp.Fits = append(resp.Fits, f)
	}
	obs, err := x.s.db.MagnitudeObservations(ctx, req.GetTargetId(), maxRefitObservations)
	if err != nil {
		return nil, err
	}
	for _, o := range obs {
		resp.Observations = append(resp.Observations, &nightloomv1.MagnitudeObservation{Id: o.ID, Time: timestamppb.New(o.ObservedAt),
			Magnitude: o.Magnitude, SigmaMag: o.Sigma, Note: o.Note})
	}
	return resp, nil
}
