package server

import (
	"bytes"
	"context"
	"errors"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"

	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// queueService implements QueueService (queue.proto).
type queueService struct {
	nightloomv1.UnimplementedQueueServiceServer
	s *Server
}

// siteCache loads each site of a call once.
type siteCache struct {
	s     *Server
	sites map[string]*siteModel
}

func (s *Server) newSiteCache() *siteCache { return &siteCache{s: s, sites: map[string]*siteModel{}} }

func (c *siteCache) get(ctx context.Context, id string) (*siteModel, error) {
	if m, ok := c.sites[id]; ok {
		return m, nil
	}
	m, _, err := c.s.loadSite(ctx, id)
	if err != nil {
		return nil, err
	}
	c.sites[id] = m
	return m, nil
}

// blockOut decodes a stored block with its API state.
func (c *siteCache) blockOut(ctx context.Context, rec store.Block) (*nightloomv1.Block, error) {
	var site *siteModel
	if rec.State == store.StateQueued {
		m, err := c.get(ctx, rec.SiteID)
		if err != nil {
			return nil, err
		}
		site = m
	}
	return blockProto(rec, site, c.s.now())
}

func (x *queueService) QueueBlocks(ctx context.Context, req *nightloomv1.QueueBlocksRequest) (*nightloomv1.QueueBlocksResponse, error) {
	var v violations
	n := len(req.GetBlocks())
	switch {
	case n == 0:
		v.add("blocks", "at least one block is required")
	case n > MaxBlocksPerCall:
		v.add("blocks", "at most %d blocks per call, got %d", MaxBlocksPerCall, n)
	}
	printableASCII(&v, "request_id", req.GetRequestId(), 0, MaxRequestIDBytes)
	if err := v.err(); err != nil {
		return nil, err
	}
	for i, b := range req.GetBlocks() {
		checkBlockStatic(&v, idx("blocks", i), b)
	}
	if err := v.err(); err != nil {
		return nil, err
	}

	// Every site and target must exist (NOT_FOUND otherwise), then the
	// checks that depend on them. Network blocks get their home site first.
	sites := x.s.newSiteCache()
	blocks := make([]*nightloomv1.Block, n)
	for i, b := range req.GetBlocks() {
		blocks[i] = proto.Clone(b).(*nightloomv1.Block)
	}
	if err := x.s.resolveNetworkBlocks(ctx, &v, blocks, sites); err != nil {
		return nil, err
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	targets := map[string]*nightloomv1.Target{}
	programs := map[string]*nightloomv1.Program{}
	for i, b := range blocks {
		site, err := sites.get(ctx, b.GetSiteId())
		if errors.Is(err, store.ErrNotFound) {
			return nil, notFound("blocks[%d].site_id: site %s not found", i, b.GetSiteId())
		}
		if err != nil {
			return nil, err
		}
		t, ok := targets[b.GetTargetId()]
		if !ok {
			rec, err := x.s.db.GetTarget(ctx, b.GetTargetId())
			if errors.Is(err, store.ErrNotFound) {
				return nil, notFound("blocks[%d].target_id: target %s not found", i, b.GetTargetId())
			}
			if err != nil {
				return nil, err
			}
			if t, err = targetProto(rec); err != nil {
				return nil, err
			}
			targets[b.GetTargetId()] = t
		}
		checkBlockRefs(&v, idx("blocks", i), b, site.pb, t)
		if err := x.s.checkBlockProgram(ctx, &v, idx("blocks", i)+".program", b, programs); err != nil {
			return nil, err
		}
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	recs := make([]store.Block, n)
	for i, b := range blocks {
		spec, err := storable(normalizeBlock(b))
		if err != nil {
			return nil, err
		}
		id := newID(blockPrefix)
		if req.GetRequestId() != "" {
			id = requestBlockID(req.GetRequestId(), i)
		}
		recs[i] = store.Block{ID: id, SiteID: b.GetSiteId(), TargetID: b.GetTargetId(), Priority: float64(b.GetPriority()),
			FramesWanted: int(b.GetFramesWanted()), Spec: spec, Program: b.GetProgram(), NetworkID: b.GetNetworkId()}
	}
	var over error
	perSite := map[string]int{}
	for _, b := range blocks {
		perSite[b.GetSiteId()]++
	}
	for id, k := range perSite {
		queued, err := x.s.db.QueueSize(ctx, id)
		if err != nil {
			return nil, err
		}
		if limit := x.s.cfg.maxQueuedPerSite; queued+k > limit {
			over = status.Errorf(codes.ResourceExhausted, "site %s has %d queued blocks; %d more would pass the limit of %d",
				id, queued, k, limit)
		}
	}

	var (
		stored    []store.Block
		err       error
		duplicate bool
	)
	switch {
	case over != nil && req.GetRequestId() == "":
		return nil, over
	case over != nil:
		// Over the limit, a retry of an accepted call still succeeds.
		if stored, err = x.s.sameRequest(ctx, recs); err != nil {
			if status.Code(err) == codes.AlreadyExists {
				return nil, over
			}
			return nil, err
		}
		duplicate = true
	default:
		stored, err = x.s.db.CreateBlocks(ctx, recs)
	}
	if errors.Is(err, store.ErrAlreadyExists) && req.GetRequestId() != "" {
		if stored, err = x.s.sameRequest(ctx, recs); err != nil {
			return nil, err
		}
		duplicate = true
	}
	if err != nil {
		return nil, err
	}
	resp := &nightloomv1.QueueBlocksResponse{Duplicate: duplicate}
	for _, r := range stored {
		b, err := sites.blockOut(ctx, r)
		if err != nil {
			return nil, err
		}
		resp.Blocks = append(resp.Blocks, b)
	}
	if !duplicate {
		x.s.urgentBlocksQueued(resp.Blocks)
	}
	return resp, nil
}

// sameRequest decides a QueueBlocks retry: the blocks of a request id have
// ids derived from it (requestBlockID), so a retry collides with them. It
// is the same call when every block is stored with the same site, target and
// spec and the earlier call had no more blocks; then the stored blocks are
// returned. Anything else is ALREADY_EXISTS.
func (s *Server) sameRequest(ctx context.Context, recs []store.Block) ([]store.Block, error) {
	reused := status.Error(codes.AlreadyExists, "request_id was used before with different blocks")
	out := make([]store.Block, len(recs))
	for i, r := range recs {
		got, err := s.db.GetBlock(ctx, r.ID)
		if errors.Is(err, store.ErrNotFound) {
			return nil, reused
		}
		if err != nil {
			return nil, err
		}
		if got.SiteID != r.SiteID || got.TargetID != r.TargetID || got.FramesWanted != r.FramesWanted || !bytes.Equal(got.Spec, r.Spec) {
			return nil, reused
		}
		out[i] = got
	}
	// An earlier call with more blocks under the same id is another call.
	first := recs[0].ID
	more := first[:len(first)-1] + itoa(len(recs))
	if _, err := s.db.GetBlock(ctx, more); err == nil {
		return nil, reused
	} else if !errors.Is(err, store.ErrNotFound) {
		return nil, err
	}
	return out, nil
}

func (x *queueService) GetBlock(ctx context.Context, req *nightloomv1.GetBlockRequest) (*nightloomv1.GetBlockResponse, error) {
	var v violations
	requiredID(&v, "block_id", req.GetBlockId())
	if err := v.err(); err != nil {
		return nil, err
	}
	rec, err := x.s.db.GetBlock(ctx, req.GetBlockId())
	if err != nil {
		return nil, err
	}
	b, err := x.s.newSiteCache().blockOut(ctx, rec)
	if err != nil {
		return nil, err
	}
	return &nightloomv1.GetBlockResponse{Block: b}, nil
}

// maxListScan bounds the records one filtered List call reads from the
// store; a page may then hold fewer than page_size blocks (with a token to
// go on).
const maxListScan = 10_000

func (x *queueService) ListBlocks(ctx context.Context, req *nightloomv1.ListBlocksRequest) (*nightloomv1.ListBlocksResponse, error) {
	var v violations
	optionalID(&v, "site_id", req.GetSiteId())
	optionalID(&v, "target_id", req.GetTargetId())
	if len(req.GetStates()) > MaxListStateFilters {
		v.add("states", "at most %d states", MaxListStateFilters)
	}
	want := map[nightloomv1.BlockState]bool{}
	for i, st := range req.GetStates() {
		enumKnown(&v, idx("states", i), int32(st), nightloomv1.BlockState_name, false)
		want[st] = true
	}
	size := pageSize(&v, "page_size", req.GetPageSize(), DefaultBlockPageSize, MaxBlockPageSize)
	pageToken(&v, "page_token", req.GetPageToken())
	if err := v.err(); err != nil {
		return nil, err
	}
	// The store filters by its own state when the API states asked for map
	// to one; open and expired are both "queued" there and told apart here.
	f := store.BlockFilter{SiteID: req.GetSiteId(), TargetID: req.GetTargetId()}
	if len(want) > 0 {
		ss := map[string]bool{}
		for st := range want {
			switch st {
			case nightloomv1.BlockState_BLOCK_STATE_OPEN, nightloomv1.BlockState_BLOCK_STATE_EXPIRED:
				ss[store.StateQueued] = true
			case nightloomv1.BlockState_BLOCK_STATE_COMPLETED:
				ss[store.StateCompleted] = true
			case nightloomv1.BlockState_BLOCK_STATE_WITHDRAWN:
				ss[store.StateWithdrawn] = true
			}
		}
		if len(ss) == 1 {
			for st := range ss {
				f.State = st
			}
		}
	}
	sites := x.s.newSiteCache()
	resp := &nightloomv1.ListBlocksResponse{}
	token := req.GetPageToken()
	scanned := 0
	for {
		need := size - len(resp.Blocks)
		recs, next, err := x.s.db.ListBlocks(ctx, f, store.Page{Size: need, Token: token})
		if err != nil {
			return nil, pageErr(err)
		}
		for _, r := range recs {
			b, err := sites.blockOut(ctx, r)
			if err != nil {
				return nil, err
			}
			if len(want) == 0 || want[b.GetState()] {
				resp.Blocks = append(resp.Blocks, b)
			}
		}
		scanned += len(recs)
		token = next
		if next == "" || len(resp.Blocks) >= size || scanned >= maxListScan {
			break
		}
	}
	resp.NextPageToken = token
	return resp, nil
}

func (x *queueService) WithdrawBlock(ctx context.Context, req *nightloomv1.WithdrawBlockRequest) (*nightloomv1.WithdrawBlockResponse, error) {
	var v violations
	requiredID(&v, "block_id", req.GetBlockId())
	text(&v, "reason", req.GetReason(), 0, MaxReasonBytes)
	if err := v.err(); err != nil {
		return nil, err
	}
	sites := x.s.newSiteCache()
	rec, err := x.s.db.GetBlock(ctx, req.GetBlockId())
	if err != nil {
		return nil, err
	}
	cur, err := sites.blockOut(ctx, rec)
	if err != nil {
		return nil, err
	}
	switch cur.GetState() {
	case nightloomv1.BlockState_BLOCK_STATE_EXPIRED:
		return nil, failedPrecondition("block %s has expired (its latest night is over)", rec.ID)
	case nightloomv1.BlockState_BLOCK_STATE_COMPLETED:
		return nil, failedPrecondition("block %s is completed", rec.ID)
	}
	out, err := x.s.db.WithdrawBlock(ctx, rec.ID)
	if errors.Is(err, store.ErrConflict) {
		return nil, failedPrecondition("block %s: %v", rec.ID, err)
	}
	if err != nil {
		return nil, err
	}
	b, err := sites.blockOut(ctx, out)
	if err != nil {
		return nil, err
	}
	return &nightloomv1.WithdrawBlockResponse{Block: b}, nil
}

// checkReport validates a progress report (queue.proto).
func checkReport(v *violations, path string, r *nightloomv1.ProgressReport) (time.Time, time.Time) {
	if r == nil {
		v.add(path, "is required")
		return time.Time{}, time.Time{}
	}
	printableASCII(v, path+".report_id", r.GetReportId(), 1, MaxReportIDBytes)
	requiredID(v, path+".block_id", r.GetBlockId())
	intRange(v, path+".frames_kept", int64(r.GetFramesKept()), 0, MaxFramesWanted)
	start, end, _ := interval(v, path+".interval", r.GetInterval(), time.Nanosecond, 0)
	enumKnown(v, path+".outcome", int32(r.GetOutcome()), nightloomv1.ProgressOutcome_name, false)
	switch r.GetOutcome() {
	case nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_FAILED, nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_SKIPPED:
		if r.GetFramesKept() != 0 {
			v.add(path+".frames_kept", "must be 0 for outcome %s", r.GetOutcome())
		}
	}
	optionalID(v, path+".plan_id", r.GetPlanId())
	text(v, path+".note", r.GetNote(), 0, MaxNoteBytes)
	return start, end
}

// Limits on what a progress report may claim (checkReportFacts).
const (
	// ReportClockTolerance is how far past the server's clock a report's
	// interval may end (the telescope's clock may run ahead).
	ReportClockTolerance = 2 * time.Minute
	// MaxReportSpan is the longest interval a report may cover: no run
	// lasts longer than a night.
	MaxReportSpan = 24 * time.Hour
	// reportFitTolerance absorbs the rounding of the telescope's clock
	// when frames are checked against the interval.
	reportFitTolerance = 2 * time.Second
)

// checkReportFacts refuses a report that cannot be true (and returns the
// block's exposure): frames whose
// exposures alone do not fit its interval, an interval that ends in the
// future beyond ReportClockTolerance, starts before the block was queued
// or lasts longer than MaxReportSpan. Nothing is stored for a refused
// report. The site's readout is a planning figure that real cameras may
// beat (the INDI simulator reads a frame out in 0.03 s where the test site
// models 1 s), so only the exposures, which the block fixes, must fit.
func (s *Server) checkReportFacts(ctx context.Context, r *nightloomv1.ProgressReport, start, end time.Time) (time.Duration, error) {
	rec, err := s.db.GetBlock(ctx, r.GetBlockId())
	if err != nil {
		return 0, err
	}
	b, err := blockProto(rec, nil, s.now())
	if err != nil {
		return 0, err
	}
	var v violations
	now := s.now()
	if end.After(now.Add(ReportClockTolerance)) {
		v.add("report.interval.end", "%s is in the future (now %s, tolerance %v)", end.Format(time.RFC3339),
			now.Format(time.RFC3339), ReportClockTolerance)
	}
	if start.Before(rec.CreatedAt.Add(-ReportClockTolerance)) {
		v.add("report.interval.start", "%s is before the block was queued (%s)", start.Format(time.RFC3339),
			rec.CreatedAt.Format(time.RFC3339))
	}
	if d := end.Sub(start); d > MaxReportSpan {
		v.add("report.interval", "lasts %v, longer than a night (at most %v)", d, MaxReportSpan)
	}
	if n := int(r.GetFramesKept()); n > 0 {
		exp := b.GetExposure().AsDuration()
		if need := time.Duration(n) * exp; need > end.Sub(start)+reportFitTolerance {
			v.add("report.frames_kept", "%d frames of %v exposure need at least %v; the interval lasts %v",
				n, exp, need, end.Sub(start))
		}
	}
	return b.GetExposure().AsDuration(), v.err()
}

func (x *queueService) ReportProgress(ctx context.Context, req *nightloomv1.ReportProgressRequest) (*nightloomv1.ReportProgressResponse, error) {
	var v violations
	start, end := checkReport(&v, "report", req.GetReport())
	if err := v.err(); err != nil {
		return nil, err
	}
	r := req.GetReport()
	exposure, err := x.s.checkReportFacts(ctx, r, start, end)
	if err != nil {
		return nil, err
	}
	site, err := x.s.reportingSite(ctx, r)
	if err != nil {
		return nil, err
	}
	setup, err := x.s.reportSetup(ctx, r, start, end)
	if err != nil {
		return nil, err
	}
	// Exposure is what the run charges to the block's program, with the
	// rest of the interval and the setup as overheads (program.proto).
	after, dup, err := x.s.db.ReportProgress(ctx, store.ProgressReport{
		ReportID: r.GetReportId(), BlockID: r.GetBlockId(), FramesKept: int(r.GetFramesKept()),
		Start: start, End: end, Outcome: r.GetOutcome().String(), SiteID: site,
		Exposure: time.Duration(r.GetFramesKept()) * exposure, Setup: setup,
	})
	if errors.Is(err, store.ErrConflict) {
		return nil, status.Errorf(codes.AlreadyExists, "report_id %q was used before with different content", r.GetReportId())
	}
	if err != nil {
		return nil, err
	}
	b, err := x.s.newSiteCache().blockOut(ctx, after)
	if err != nil {
		return nil, err
	}
	resp := &nightloomv1.ReportProgressResponse{Block: b, Duplicate: dup}
	if !dup {
		// frames_counted is what this report added, as the store recorded
		// it in the same transaction (frames kept capped at frames wanted),
		// so concurrent reports for one block are each counted right.
		stored, err := x.s.db.GetProgressReport(ctx, r.GetReportId())
		if err != nil {
			return nil, err
		}
		resp.FramesCounted = int32(stored.FramesApplied)
	}
	return resp, nil
}

// checkBlockProgram checks a queued block's program (path names the field):
// it must exist and be open to the block's site. cache holds the programs
// looked up so far.
func (s *Server) checkBlockProgram(ctx context.Context, v *violations, path string, b *nightloomv1.Block,
	cache map[string]*nightloomv1.Program) error {
	name := b.GetProgram()
	if name == "" {
		return nil
	}
	p, ok := cache[name]
	if !ok {
		rec, err := s.db.GetProgram(ctx, name)
		if errors.Is(err, store.ErrNotFound) {
			v.add(path, "program %q does not exist (create it with CreateProgram)", name)
			cache[name] = nil
			return nil
		}
		if err != nil {
			return err
		}
		if p, err = programProto(rec); err != nil {
			return err
		}
		cache[name] = p
	}
	if p != nil && !openTo(p, b.GetSiteId()) {
		v.add(path, "program %q is held to site %s, not %s", name, p.GetSiteId(), b.GetSiteId())
	}
	return nil
}

// reportSetup is the setup (slew, settle, filter change, focus, acquisition)
// before a reported run, as the plan the report names predicted it: the
// time from prepare_start to start of that plan's assignment of the block
// that overlaps the reported interval (the one starting nearest to it). It
// is 0 when the report names no plan, the plan is unknown, and when no
// assignment matches: the report's interval alone is charged then.
func (s *Server) reportSetup(ctx context.Context, r *nightloomv1.ProgressReport, start, end time.Time) (time.Duration, error) {
	if r.GetPlanId() == "" {
		return 0, nil
	}
	rec, err := s.db.GetPlan(ctx, r.GetPlanId())
	if errors.Is(err, store.ErrNotFound) {
		return 0, nil
	}
	if err != nil {
		return 0, err
	}
	p, err := planFromRecord(rec)
	if err != nil {
		return 0, err
	}
	var best *nightloomv1.Assignment
	for _, a := range p.GetAssignments() {
		if a.GetBlockId() != r.GetBlockId() || !overlaps(a.GetStart().AsTime(), a.GetEnd().AsTime(), start, end) {
			continue
		}
		if best == nil || a.GetStart().AsTime().Sub(start).Abs() < best.GetStart().AsTime().Sub(start).Abs() {
			best = a
		}
	}
	if best == nil || best.GetPrepareStart() == nil {
		return 0, nil
	}
	return max(0, best.GetStart().AsTime().Sub(best.GetPrepareStart().AsTime())), nil
}
