package server

import (
	"context"
	"errors"

	"github.com/nightloom/nightloom/internal/export"
	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// exportService renders stored plans (export.proto) through internal/export.
type exportService struct {
	nightloomv1.UnimplementedExportServiceServer
	s *Server
}

func (x *exportService) ExportPlan(ctx context.Context, req *nightloomv1.ExportPlanRequest) (*nightloomv1.ExportPlanResponse, error) {
	var v violations
	requiredID(&v, "plan_id", req.GetPlanId())
	switch req.GetFormat() {
	case nightloomv1.ExportFormat_EXPORT_FORMAT_CSV, nightloomv1.ExportFormat_EXPORT_FORMAT_ICALENDAR:
	default:
		v.add("format", "want EXPORT_FORMAT_CSV or EXPORT_FORMAT_ICALENDAR")
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	rec, err := x.s.db.GetPlan(ctx, req.GetPlanId())
	if errors.Is(err, store.ErrNotFound) {
		return nil, planNotFound(req.GetPlanId())
	}
	if err != nil {
		return nil, err
	}
	p, err := planFromRecord(rec)
	if err != nil {
		return nil, err
	}
	site, err := x.s.newSiteCache().get(ctx, rec.SiteID)
	if err != nil {
		return nil, err
	}
	if req.GetFormat() == nightloomv1.ExportFormat_EXPORT_FORMAT_CSV {
		b, err := export.CSV(p, site.loc())
		if err != nil {
			return nil, err
		}
		return &nightloomv1.ExportPlanResponse{ContentType: "text/csv; charset=utf-8", Content: b, FileName: p.GetId() + ".csv"}, nil
	}
	return &nightloomv1.ExportPlanResponse{ContentType: "text/calendar; charset=utf-8",
		Content: export.ICalendar(p, site.pb.GetName(), site.loc()), FileName: p.GetId() + ".ics"}, nil
}
