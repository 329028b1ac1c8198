package server

import (
	"context"
	"math"
	"time"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/constraints"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// apparitionService implements ApparitionService (apparition.proto). It
// converts and validates; the outlook itself is constraints.ApparitionOutlook.
type apparitionService struct {
	nightloomv1.UnimplementedApparitionServiceServer
	s *Server
}

func (x *apparitionService) Outlook(ctx context.Context, req *nightloomv1.OutlookRequest) (*nightloomv1.OutlookResponse, error) {
	var v violations
	requiredID(&v, "site_id", req.GetSiteId())
	switch sub := req.GetSubject().(type) {
	case *nightloomv1.OutlookRequest_TargetId:
		requiredID(&v, "target_id", sub.TargetId)
	case *nightloomv1.OutlookRequest_Target:
		if sub.Target == nil {
			v.add("target", "is required")
		}
	default:
		v.add("subject", "one of target_id or target is required")
	}
	checkConstraintSet(&v, "constraints", req.GetConstraints())
	exposure := duration(&v, "exposure", req.GetExposure(), 0, time.Hour, 0, false)
	first, _ := localDate(&v, "first_night", req.GetFirstNight(), true)
	nights := int(req.GetNights())
	switch {
	case nights == 0:
		nights = constraints.DefaultOutlookNights
	case nights < 0 || nights > constraints.MaxOutlookNights:
		v.add("nights", "must be within 0..%d", constraints.MaxOutlookNights)
	}
	step := duration(&v, "step", req.GetStep(), time.Minute, time.Hour, constraints.DefaultOutlookStep, false)
	if err := v.err(); err != nil {
		return nil, err
	}
	tpb, target, err := x.s.subjectTarget(ctx, &v, req.GetTargetId(), req.GetTarget(), "target")
	if err != nil {
		return nil, err
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	site, _, err := x.s.loadSite(ctx, req.GetSiteId())
	if err != nil {
		return nil, err
	}
	creq := constraints.Request{Set: constraintSet(req.GetConstraints(), hasMagLaw(tpb)), Exposure: exposure,
		NonSidereal: req.GetNonSiderealTracking()}
	out, err := constraints.ApparitionOutlook(site.cons, target, first, nights, creq, step)
	if err != nil {
		return nil, err
	}
	resp := &nightloomv1.OutlookResponse{Step: durationpb.New(step)}
	for i, n := range out.Nights {
		on := &nightloomv1.OutlookNight{Night: protoDate(n.Date), Reason: reasonProto(n.Reason)}
		for _, w := range n.Windows {
			on.Windows = append(on.Windows, &nightloomv1.TimeInterval{Start: timestamppb.New(w.Start), End: timestamppb.New(w.End)})
		}
		if n.HasBest {
			on.Best = outlookMoment(n.Best)
			on.Darkness = &nightloomv1.TimeInterval{Start: timestamppb.New(n.DarkFrom), End: timestamppb.New(n.DarkTo)}
			on.DuskAltitudeDeg, on.DawnAltitudeDeg = optFinite(n.DuskAltDeg), optFinite(n.DawnAltDeg)
		}
		if i == out.First {
			resp.FirstObservableNight = protoDate(n.Date)
		}
		if i == out.Last {
			resp.LastObservableNight = protoDate(n.Date)
		}
		resp.Nights = append(resp.Nights, on)
	}
	return resp, nil
}

// protoDate is the API form of a civil date.
func protoDate(d time.Time) *nightloomv1.LocalDate {
	return &nightloomv1.LocalDate{Year: int32(d.Year()), Month: int32(d.Month()), Day: int32(d.Day())}
}

// optFinite is x, or unset when x is NaN or infinite.
func optFinite(x float64) *float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return proto.Float64(x)
}

func outlookMoment(m constraints.OutlookMoment) *nightloomv1.OutlookMoment {
	return &nightloomv1.OutlookMoment{Time: timestamppb.New(m.Time), AltitudeDeg: m.AltDeg, AzimuthDeg: m.AzDeg,
		Airmass: optFinite(m.Airmass), SolarElongationDeg: optFinite(m.SolarElongDeg), Magnitude: optFinite(m.Magnitude),
		SkyBrightnessVMagArcsec2: optFinite(m.SkyMagArcsec2), MoonAltitudeDeg: m.MoonAltDeg,
		MoonIllumination: m.MoonIllumination, MoonSeparationDeg: optFinite(m.MoonSepDeg)}
}
