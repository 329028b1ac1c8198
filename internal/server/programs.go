package server

// Programs (program.proto): whose time a block spends on a shared
// telescope. This file keeps them (ProgramService), works out a program's
// period and the time charged to it in that period, and gives the planner
// the allocations and use that the scheduler's fair-share factor balances
// (scheduler package doc, "Shared telescopes").

import (
	"context"
	"errors"
	"regexp"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
	"github.com/nightloom/nightloom/scheduler"
)

// Limits of a program (program.proto).
const (
	MaxProgramNameBytes        = 64
	MaxProgramDescriptionBytes = 500
	MaxProgramAllocation       = 366 * 24 * time.Hour
	MaxFixedPeriod             = 2 * 366 * 24 * time.Hour
)

// programName is the form of a program's name: letters, digits, '.', '_'
// and '-', starting with a letter or digit.
var programName = regexp.MustCompile(`^[A-Za-z0-9][A-Za-z0-9._-]*$`)

// checkProgramName checks a program's name (required) at path.
func checkProgramName(v *violations, path, name string) {
	switch {
	case name == "":
		v.add(path, "is required")
	case len(name) > MaxProgramNameBytes:
		v.add(path, "must be at most %d bytes", MaxProgramNameBytes)
	case !programName.MatchString(name):
		v.add(path, "%q: use letters, digits, '.', '_' and '-', starting with a letter or digit", name)
	}
}

// programService implements ProgramService (program.proto).
type programService struct {
	nightloomv1.UnimplementedProgramServiceServer
	s *Server
}

var programOutputOnly = map[string]bool{"name": true, "create_time": true, "update_time": true}

// programProto decodes a stored program.
func programProto(rec store.Program) (*nightloomv1.Program, error) {
	p := &nightloomv1.Program{}
	if err := proto.Unmarshal(rec.Spec, p); err != nil {
		return nil, err
	}
	p.Name, p.SiteId = rec.Name, rec.SiteID
	p.CreateTime, p.UpdateTime = timestamppb.New(rec.CreatedAt), timestamppb.New(rec.UpdatedAt)
	return p, nil
}

// checkProgram checks a program for storing; path prefixes the violations.
func checkProgram(v *violations, path string, p *nightloomv1.Program) {
	if p == nil {
		v.add(path, "is required")
		return
	}
	checkProgramName(v, path+".name", p.GetName())
	text(v, path+".description", p.GetDescription(), 0, MaxProgramDescriptionBytes)
	duration(v, path+".allocation", p.GetAllocation(), time.Second, MaxProgramAllocation, 0, true)
	enumKnown(v, path+".period", int32(p.GetPeriod()), nightloomv1.PeriodKind_name, false)
	switch fixed := p.GetFixedPeriod(); {
	case p.GetPeriod() == nightloomv1.PeriodKind_PERIOD_KIND_FIXED:
		interval(v, path+".fixed_period", fixed, time.Second, MaxFixedPeriod)
	case fixed != nil:
		v.add(path+".fixed_period", "is only for period PERIOD_KIND_FIXED")
	}
	optionalID(v, path+".site_id", p.GetSiteId())
}

// storableProgram is the record of a checked program.
func storableProgram(p *nightloomv1.Program) (store.Program, error) {
	c := proto.Clone(p).(*nightloomv1.Program)
	c.CreateTime, c.UpdateTime = nil, nil
	spec, err := storable(c)
	if err != nil {
		return store.Program{}, err
	}
	return store.Program{Name: p.GetName(), SiteID: p.GetSiteId(), Spec: spec}, nil
}

// programSiteErr turns the store's "no such site" into NOT_FOUND naming
// the field.
func programSiteErr(err error, path, site string) error {
	if errors.Is(err, store.ErrNotFound) {
		return notFound("%s: site %s not found", path, site)
	}
	return err
}

func (x *programService) CreateProgram(ctx context.Context, req *nightloomv1.CreateProgramRequest) (*nightloomv1.CreateProgramResponse, error) {
	var v violations
	checkProgram(&v, "program", req.GetProgram())
	if err := v.err(); err != nil {
		return nil, err
	}
	rec, err := storableProgram(req.GetProgram())
	if err != nil {
		return nil, err
	}
	out, err := x.s.db.CreateProgram(ctx, rec)
	if errors.Is(err, store.ErrAlreadyExists) {
		return nil, status.Errorf(codes.AlreadyExists, "program %q exists", rec.Name)
	}
	if err != nil {
		return nil, programSiteErr(err, "program.site_id", rec.SiteID)
	}
	pb, err := programProto(out)
	if err != nil {
		return nil, err
	}
	return &nightloomv1.CreateProgramResponse{Program: pb}, nil
}

func (x *programService) GetProgram(ctx context.Context, req *nightloomv1.GetProgramRequest) (*nightloomv1.GetProgramResponse, error) {
	var v violations
	checkProgramName(&v, "name", req.GetName())
	if err := v.err(); err != nil {
		return nil, err
	}
	rec, err := x.s.db.GetProgram(ctx, req.GetName())
	if err != nil {
		return nil, err
	}
	pb, err := programProto(rec)
	if err != nil {
		return nil, err
	}
	return &nightloomv1.GetProgramResponse{Program: pb}, nil
}

func (x *programService) ListPrograms(ctx context.Context, req *nightloomv1.ListProgramsRequest) (*nightloomv1.ListProgramsResponse, error) {
	var v violations
	size := pageSize(&v, "page_size", req.GetPageSize(), DefaultPageSize, MaxPageSize)
	pageToken(&v, "page_token", req.GetPageToken())
	if err := v.err(); err != nil {
		return nil, err
	}
	recs, next, err := x.s.db.ListPrograms(ctx, store.Page{Size: size, Token: req.GetPageToken()})
	if err != nil {
		return nil, pageErr(err)
	}
	resp := &nightloomv1.ListProgramsResponse{NextPageToken: next}
	for _, r := range recs {
		pb, err := programProto(r)
		if err != nil {
			return nil, err
		}
		resp.Programs = append(resp.Programs, pb)
	}
	return resp, nil
}

func (x *programService) UpdateProgram(ctx context.Context, req *nightloomv1.UpdateProgramRequest) (*nightloomv1.UpdateProgramResponse, error) {
	var v violations
	if req.GetProgram() == nil {
		v.add("program", "is required")
	} else {
		checkProgramName(&v, "program.name", req.GetProgram().GetName())
	}
	if len(req.GetUpdateMask().GetPaths()) == 0 {
		v.add("update_mask", "at least one path is required")
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	for attempt := 0; ; attempt++ {
		rec, err := x.s.db.GetProgram(ctx, req.GetProgram().GetName())
		if err != nil {
			return nil, err
		}
		cur, err := programProto(rec)
		if err != nil {
			return nil, err
		}
		applyMask(&v, cur, req.GetProgram(), req.GetUpdateMask(), programOutputOnly)
		if err := v.err(); err != nil {
			return nil, err
		}
		checkProgram(&v, "program", cur)
		if err := v.err(); err != nil {
			return nil, err
		}
		next, err := storableProgram(cur)
		if err != nil {
			return nil, err
		}
		next.Revision = rec.Revision
		out, err := x.s.db.UpdateProgram(ctx, next)
		if errors.Is(err, store.ErrConflict) && attempt < updateRetries {
			continue
		}
		if errors.Is(err, store.ErrConflict) {
			return nil, status.Errorf(codes.Aborted, "program %s kept changing during the update; retry", rec.Name)
		}
		if err != nil {
			return nil, programSiteErr(err, "program.site_id", next.SiteID)
		}
		pb, err := programProto(out)
		if err != nil {
			return nil, err
		}
		return &nightloomv1.UpdateProgramResponse{Program: pb}, nil
	}
}

func (x *programService) DeleteProgram(ctx context.Context, req *nightloomv1.DeleteProgramRequest) (*nightloomv1.DeleteProgramResponse, error) {
	var v violations
	checkProgramName(&v, "name", req.GetName())
	if err := v.err(); err != nil {
		return nil, err
	}
	if err := x.s.db.DeleteProgram(ctx, req.GetName()); err != nil {
		if errors.Is(err, store.ErrConflict) {
			return nil, failedPrecondition("program %s: %v", req.GetName(), err)
		}
		return nil, err
	}
	return &nightloomv1.DeleteProgramResponse{}, nil
}

// programPeriod returns the period of p that contains t: the UTC calendar
// month for PERIOD_KIND_CALENDAR_MONTH, the fixed period when it contains
// t; ok is false when no period of p contains t.
func programPeriod(p *nightloomv1.Program, t time.Time) (start, end time.Time, ok bool) {
	t = t.UTC()
	switch p.GetPeriod() {
	case nightloomv1.PeriodKind_PERIOD_KIND_CALENDAR_MONTH:
		start = time.Date(t.Year(), t.Month(), 1, 0, 0, 0, 0, time.UTC)
		return start, start.AddDate(0, 1, 0), true
	case nightloomv1.PeriodKind_PERIOD_KIND_FIXED:
		start, end = p.GetFixedPeriod().GetStart().AsTime(), p.GetFixedPeriod().GetEnd().AsTime()
		return start, end, !t.Before(start) && t.Before(end)
	}
	return time.Time{}, time.Time{}, false
}

// openTo says whether blocks of site may spend program p's time.
func openTo(p *nightloomv1.Program, site string) bool {
	return p.GetSiteId() == "" || site == "" || p.GetSiteId() == site
}

// programState is a program with its period at some instant and the time
// charged to it in that period.
type programState struct {
	pb                  *nightloomv1.Program
	start, end          time.Time // the period; zero when none contains the instant
	inPeriod            bool
	allocation          time.Duration // 0 outside its period
	exposure, overheads time.Duration // charged from reports in the period
}

// programStates loads every program open to site ("" for every program)
// with its period at t and the time charged in it, in creation order.
func (s *Server) programStates(ctx context.Context, site string, t time.Time) ([]programState, error) {
	var out []programState
	token := ""
	for {
		recs, next, err := s.db.ListPrograms(ctx, store.Page{Size: store.MaxPageSize, Token: token})
		if err != nil {
			return nil, err
		}
		for _, rec := range recs {
			pb, err := programProto(rec)
			if err != nil {
				return nil, err
			}
			if !openTo(pb, site) {
				continue
			}
			ps := programState{pb: pb}
			ps.start, ps.end, ps.inPeriod = programPeriod(pb, t)
			if ps.inPeriod {
				ps.allocation = pb.GetAllocation().AsDuration()
				cs, err := s.db.ProgramCharges(ctx, pb.GetName(), ps.start, ps.end)
				if err != nil {
					return nil, err
				}
				for _, c := range cs {
					ps.exposure += c.Exposure
					ps.overheads += c.Overheads
				}
			}
			out = append(out, ps)
		}
		if next == "" {
			return out, nil
		}
		token = next
	}
}

// plannedCharge is what an earlier night of the same MakePlan call charges
// a program: the time, and the start of that night's plan.
type plannedCharge struct {
	program string
	at      time.Time
	charged time.Duration
}

// chargesPlanned lists what a plan body charges per named program.
func chargesPlanned(body *nightloomv1.Plan) []plannedCharge {
	var out []plannedCharge
	for _, c := range body.GetCharges() {
		if c.GetProgram() != "" {
			out = append(out, plannedCharge{program: c.GetProgram(), at: body.GetInterval().GetStart().AsTime(),
				charged: c.GetExposure().AsDuration() + c.GetOverheads().AsDuration()})
		}
	}
	return out
}

// planPrograms is what the scheduler needs of the programs for a plan of
// site starting at t: each program's allocation for its period at t and
// the time used in it, from the reports plus what earlier nights of the
// same call plan in that period (earlier; nil for none).
func (s *Server) planPrograms(ctx context.Context, site string, t time.Time, earlier []plannedCharge) ([]scheduler.Program, error) {
	states, err := s.programStates(ctx, site, t)
	if err != nil {
		return nil, err
	}
	out := make([]scheduler.Program, len(states))
	for i, ps := range states {
		used := ps.exposure + ps.overheads
		for _, c := range earlier {
			if ps.inPeriod && c.program == ps.pb.GetName() && !c.at.Before(ps.start) && c.at.Before(ps.end) {
				used += c.charged
			}
		}
		out[i] = scheduler.Program{Name: ps.pb.GetName(), Allocation: ps.allocation, Used: used}
	}
	return out, nil
}

// chargesOf converts a plan's charges per program.
func chargesOf(cs []scheduler.Charge) []*nightloomv1.ProgramCharge {
	var out []*nightloomv1.ProgramCharge
	for _, c := range cs {
		out = append(out, &nightloomv1.ProgramCharge{Program: c.Program, Allocation: durationpb.New(c.Allocation),
			Used: durationpb.New(c.Used), Exposure: durationpb.New(c.Exposure), Overheads: durationpb.New(c.Overheads),
			FairShare: c.Share})
	}
	return out
}

func (x *programService) GetProgramUsage(ctx context.Context, req *nightloomv1.GetProgramUsageRequest) (*nightloomv1.GetProgramUsageResponse, error) {
	var v violations
	at := instant(&v, "at", req.GetAt(), false)
	optionalID(&v, "site_id", req.GetSiteId())
	if err := v.err(); err != nil {
		return nil, err
	}
	if at.IsZero() {
		at = x.s.now()
	}
	site := req.GetSiteId()
	var sites []string
	if site != "" {
		if _, err := x.s.db.GetSite(ctx, site); err != nil {
			if errors.Is(err, store.ErrNotFound) {
				return nil, notFound("site_id: site %s not found", site)
			}
			return nil, err
		}
		sites = []string{site}
	} else {
		token := ""
		for {
			recs, next, err := x.s.db.ListSites(ctx, store.Page{Size: store.MaxPageSize, Token: token})
			if err != nil {
				return nil, err
			}
			for _, r := range recs {
				sites = append(sites, r.ID)
			}
			if next == "" {
				break
			}
			token = next
		}
	}
	states, err := x.s.programStates(ctx, site, at)
	if err != nil {
		return nil, err
	}
	// The current plans: each site's latest version, when it has not ended
	// at `at`.
	var plans []*nightloomv1.Plan
	for _, id := range sites {
		rec, err := x.s.db.LatestPlan(ctx, id)
		if errors.Is(err, store.ErrNotFound) {
			continue
		}
		if err != nil {
			return nil, err
		}
		p, err := planFromRecord(rec)
		if err != nil {
			return nil, err
		}
		if p.GetInterval().GetEnd().AsTime().After(at) {
			plans = append(plans, p)
		}
	}
	resp := &nightloomv1.GetProgramUsageResponse{}
	for _, ps := range states {
		u := &nightloomv1.ProgramUsage{Program: ps.pb, Allocation: durationpb.New(ps.allocation),
			Used: durationpb.New(ps.exposure + ps.overheads), UsedExposure: durationpb.New(ps.exposure)}
		var planned, plannedExp time.Duration
		if ps.inPeriod {
			u.Period = &nightloomv1.TimeInterval{Start: timestamppb.New(ps.start), End: timestamppb.New(ps.end)}
			for _, p := range plans {
				if st := p.GetInterval().GetStart().AsTime(); st.Before(ps.start) || !st.Before(ps.end) {
					continue
				}
				for _, c := range p.GetCharges() {
					if c.GetProgram() == ps.pb.GetName() {
						planned += c.GetExposure().AsDuration() + c.GetOverheads().AsDuration()
						plannedExp += c.GetExposure().AsDuration()
					}
				}
			}
		}
		u.Planned, u.PlannedExposure = durationpb.New(planned), durationpb.New(plannedExp)
		resp.Usage = append(resp.Usage, u)
	}
	return resp, nil
}
