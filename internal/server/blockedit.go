package server

// Editing the queue (issue 14): UpdateBlock changes an open block's
// request through a field mask, WithdrawBlocks withdraws a site's open
// blocks by filter in one call. Both are audited in the store (who: the
// token's id; when; which fields) and logged.

import (
	"context"
	"errors"
	"strings"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// blockEditable lists the top-level Block fields UpdateBlock may change
// (queue.proto). Site, target and filter stay: a different one is a new
// block.
var blockEditable = map[string]bool{
	"label": true, "exposure": true, "frames_wanted": true, "min_run_frames": true, "max_run_frames": true,
	"priority": true, "constraints": true, "earliest_date": true, "latest_date": true, "cadence": true,
	"dither_every_frames": true,
}

// actor is the id of the token that made the call, for the audit trail.
func actor(ctx context.Context) string {
	if p, ok := principalFrom(ctx); ok {
		return p.tokenID
	}
	return ""
}

func (x *queueService) UpdateBlock(ctx context.Context, req *nightloomv1.UpdateBlockRequest) (*nightloomv1.UpdateBlockResponse, error) {
	var v violations
	if req.GetBlock() == nil {
		v.add("block", "is required")
	} else {
		requiredID(&v, "block.id", req.GetBlock().GetId())
	}
	paths := req.GetUpdateMask().GetPaths()
	if len(paths) == 0 {
		v.add("update_mask", "name at least one field to change")
	}
	for i, p := range paths {
		if !blockEditable[strings.SplitN(p, ".", 2)[0]] {
			v.add(idx("update_mask.paths", i), "%q cannot be changed by UpdateBlock (editable: label, exposure, frames_wanted, min_run_frames, max_run_frames, priority, constraints, earliest_date, latest_date, cadence, dither_every_frames)", p)
		}
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	s := x.s
	for attempt := 0; ; attempt++ {
		sites := s.newSiteCache()
		rec, err := s.db.GetBlock(ctx, req.GetBlock().GetId())
		if errors.Is(err, store.ErrNotFound) {
			return nil, blockNotFound(req.GetBlock().GetId())
		}
		if err != nil {
			return nil, err
		}
		cur, err := sites.blockOut(ctx, rec)
		if err != nil {
			return nil, err
		}
		if cur.GetState() != nightloomv1.BlockState_BLOCK_STATE_OPEN {
			return nil, failedPrecondition("block %s is %s; only open blocks can be changed", rec.ID, stateWord(cur.GetState()))
		}
		done := cur.GetFramesDone()
		applyMask(&v, cur, req.GetBlock(), req.GetUpdateMask(), nil)
		if err := v.err(); err != nil {
			return nil, err
		}
		cur.Id, cur.SiteId, cur.TargetId = rec.ID, rec.SiteID, rec.TargetID
		checkBlockStatic(&v, "block", cur)
		if cur.GetFramesWanted() < done {
			v.add("block.frames_wanted", "must not be below the %d frames done", done)
		}
		if err := v.err(); err != nil {
			return nil, err
		}
		site, err := sites.get(ctx, rec.SiteID)
		if err != nil {
			return nil, err
		}
		trec, err := s.db.GetTarget(ctx, rec.TargetID)
		if err != nil {
			return nil, err
		}
		t, err := targetProto(trec)
		if err != nil {
			return nil, err
		}
		checkBlockRefs(&v, "block", cur, site.pb, t)
		if err := v.err(); err != nil {
			return nil, err
		}
		spec, err := storable(normalizeBlock(cur))
		if err != nil {
			return nil, err
		}
		out, err := s.db.UpdateBlock(ctx, store.Block{ID: rec.ID, Priority: float64(cur.GetPriority()),
			FramesWanted: int(cur.GetFramesWanted()), Spec: spec, Revision: rec.Revision}, actor(ctx), strings.Join(paths, ","))
		if errors.Is(err, store.ErrConflict) && attempt < updateRetries {
			continue
		}
		if errors.Is(err, store.ErrConflict) {
			return nil, status.Errorf(codes.Aborted, "block %s kept changing during the update; retry", rec.ID)
		}
		if err != nil {
			return nil, err
		}
		s.log.Info("block updated", "block_id", rec.ID, "site_id", rec.SiteID, "fields", strings.Join(paths, ","), "token_id", actor(ctx))
		b, err := sites.blockOut(ctx, out)
		if err != nil {
			return nil, err
		}
		return &nightloomv1.UpdateBlockResponse{Block: b}, nil
	}
}

func (x *queueService) WithdrawBlocks(ctx context.Context, req *nightloomv1.WithdrawBlocksRequest) (*nightloomv1.WithdrawBlocksResponse, error) {
	var v violations
	requiredID(&v, "site_id", req.GetSiteId())
	if req.GetTargetId() != "" {
		requiredID(&v, "target_id", req.GetTargetId())
	}
	text(&v, "reason", req.GetReason(), 0, MaxReasonBytes)
	if err := v.err(); err != nil {
		return nil, err
	}
	s := x.s
	sites := s.newSiteCache()
	site, err := sites.get(ctx, req.GetSiteId())
	if errors.Is(err, store.ErrNotFound) {
		return nil, siteNotFound(req.GetSiteId())
	}
	if err != nil {
		return nil, err
	}
	now := s.now()
	// Only open blocks: a queued block whose latest night is over is
	// EXPIRED in the API and stays as it is.
	open := func(b store.Block) bool {
		if b.NetworkID != "" {
			return false // the network's, not the site's (WithdrawBlock takes it)
		}
		pb, err := blockProto(b, site, now)
		return err == nil && pb.GetState() == nightloomv1.BlockState_BLOCK_STATE_OPEN
	}
	recs, err := s.db.WithdrawMatching(ctx, req.GetSiteId(), req.GetTargetId(), actor(ctx), open)
	if err != nil {
		return nil, err
	}
	resp := &nightloomv1.WithdrawBlocksResponse{}
	for _, r := range recs {
		b, err := sites.blockOut(ctx, r)
		if err != nil {
			return nil, err
		}
		resp.Blocks = append(resp.Blocks, b)
	}
	s.log.Info("blocks withdrawn", "site_id", req.GetSiteId(), "target_id", req.GetTargetId(), "count", len(recs),
		"reason", req.GetReason(), "token_id", actor(ctx))
	return resp, nil
}

// stateWord names a block state for messages.
func stateWord(s nightloomv1.BlockState) string {
	return strings.ToLower(strings.TrimPrefix(s.String(), "BLOCK_STATE_"))
}
