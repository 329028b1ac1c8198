package server

import (
	"context"
	"errors"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/constraints"
	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// targetService implements TargetService (target.proto).
type targetService struct {
	nightloomv1.UnimplementedTargetServiceServer
	s *Server
}

var targetOutputOnly = map[string]bool{"id": true, "create_time": true, "update_time": true}

// targetProto decodes a stored target.
func targetProto(rec store.Target) (*nightloomv1.Target, error) {
	t := &nightloomv1.Target{}
	if err := proto.Unmarshal(rec.Spec, t); err != nil {
		return nil, err
	}
	t.Id = rec.ID
	t.CreateTime, t.UpdateTime = timestamppb.New(rec.CreatedAt), timestamppb.New(rec.UpdatedAt)
	return t, nil
}

// loadTarget reads a target and builds its domain form.
func (s *Server) loadTarget(ctx context.Context, id string) (*nightloomv1.Target, *constraints.Target, error) {
	rec, err := s.db.GetTarget(ctx, id)
	if err != nil {
		return nil, nil, err
	}
	pb, err := targetProto(rec)
	if err != nil {
		return nil, nil, err
	}
	ct, err := targetModel(pb)
	if err != nil {
		return nil, nil, err
	}
	return pb, ct, nil
}

func (x *targetService) CreateTarget(ctx context.Context, req *nightloomv1.CreateTargetRequest) (*nightloomv1.CreateTargetResponse, error) {
	var v violations
	if req.GetTarget() == nil {
		v.add("target", "is required")
		return nil, v.err()
	}
	t := normalizeTarget(req.GetTarget())
	checkTarget(&v, "target", t)
	if err := v.err(); err != nil {
		return nil, err
	}
	spec, err := storable(t)
	if err != nil {
		return nil, err
	}
	x.s.targetNames.Lock()
	defer x.s.targetNames.Unlock()
	if err := x.s.checkTargetName(ctx, t.GetName(), ""); err != nil {
		return nil, err
	}
	rec, err := x.s.db.CreateTarget(ctx, store.Target{ID: newID(targetPrefix), Name: t.GetName(), Kind: targetKind(t), Spec: spec})
	if err != nil {
		return nil, err
	}
	out, err := targetProto(rec)
	if err != nil {
		return nil, err
	}
	return &nightloomv1.CreateTargetResponse{Target: out}, nil
}

func (x *targetService) GetTarget(ctx context.Context, req *nightloomv1.GetTargetRequest) (*nightloomv1.GetTargetResponse, error) {
	var v violations
	requiredID(&v, "target_id", req.GetTargetId())
	if err := v.err(); err != nil {
		return nil, err
	}
	rec, err := x.s.db.GetTarget(ctx, req.GetTargetId())
	if err != nil {
		return nil, err
	}
	out, err := targetProto(rec)
	if err != nil {
		return nil, err
	}
	return &nightloomv1.GetTargetResponse{Target: out}, nil
}

func (x *targetService) ListTargets(ctx context.Context, req *nightloomv1.ListTargetsRequest) (*nightloomv1.ListTargetsResponse, error) {
	var v violations
	size := pageSize(&v, "page_size", req.GetPageSize(), DefaultPageSize, MaxPageSize)
	pageToken(&v, "page_token", req.GetPageToken())
	if err := v.err(); err != nil {
		return nil, err
	}
	recs, next, err := x.s.db.ListTargets(ctx, store.Page{Size: size, Token: req.GetPageToken()})
	if err != nil {
		return nil, pageErr(err)
	}
	resp := &nightloomv1.ListTargetsResponse{NextPageToken: next}
	for _, r := range recs {
		t, err := targetProto(r)
		if err != nil {
			return nil, err
		}
		resp.Targets = append(resp.Targets, t)
	}
	return resp, nil
}

func (x *targetService) UpdateTarget(ctx context.Context, req *nightloomv1.UpdateTargetRequest) (*nightloomv1.UpdateTargetResponse, error) {
	var v violations
	if req.GetTarget() == nil {
		v.add("target", "is required")
	} else {
		requiredID(&v, "target.id", req.GetTarget().GetId())
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	for attempt := 0; ; attempt++ {
		rec, err := x.s.db.GetTarget(ctx, req.GetTarget().GetId())
		if err != nil {
			return nil, err
		}
		cur, err := targetProto(rec)
		if err != nil {
			return nil, err
		}
		applyMask(&v, cur, req.GetTarget(), req.GetUpdateMask(), targetOutputOnly)
		if err := v.err(); err != nil {
			return nil, err
		}
		t := normalizeTarget(cur)
		checkTarget(&v, "target", t)
		if err := v.err(); err != nil {
			return nil, err
		}
		if targetKind(t) != rec.Kind {
			// A fixed target that becomes an orbit (or back) changes what
			// its queued blocks mean; the kinds stay checked at queue time,
			// so refuse a change of kind while blocks use it.
			blocks, _, err := x.s.db.ListBlocks(ctx, store.BlockFilter{TargetID: rec.ID}, store.Page{Size: 1})
			if err != nil {
				return nil, err
			}
			if len(blocks) > 0 {
				return nil, failedPrecondition("target %s is used by blocks; its kind (%s) cannot change", rec.ID, rec.Kind)
			}
		}
		spec, err := storable(t)
		if err != nil {
			return nil, err
		}
		x.s.targetNames.Lock()
		if err := x.s.checkTargetName(ctx, t.GetName(), rec.ID); err != nil {
			x.s.targetNames.Unlock()
			return nil, err
		}
		out, err := x.s.db.UpdateTarget(ctx, store.Target{ID: rec.ID, Name: t.GetName(), Kind: targetKind(t), Spec: spec, Revision: rec.Revision})
		x.s.targetNames.Unlock()
		if errors.Is(err, store.ErrConflict) && attempt < updateRetries {
			continue
		}
		if errors.Is(err, store.ErrConflict) {
			return nil, status.Errorf(codes.Aborted, "target %s kept changing during the update; retry", rec.ID)
		}
		if err != nil {
			return nil, err
		}
		pb, err := targetProto(out)
		if err != nil {
			return nil, err
		}
		return &nightloomv1.UpdateTargetResponse{Target: pb}, nil
	}
}

func (x *targetService) DeleteTarget(ctx context.Context, req *nightloomv1.DeleteTargetRequest) (*nightloomv1.DeleteTargetResponse, error) {
	var v violations
	requiredID(&v, "target_id", req.GetTargetId())
	if err := v.err(); err != nil {
		return nil, err
	}
	id := req.GetTargetId()
	if _, err := x.s.db.GetTarget(ctx, id); err != nil {
		return nil, err
	}
	blocks, _, err := x.s.db.ListBlocks(ctx, store.BlockFilter{TargetID: id}, store.Page{Size: 1})
	if err != nil {
		return nil, err
	}
	if len(blocks) > 0 {
		return nil, failedPrecondition("target %s is used by blocks", id)
	}
	if err := x.s.db.DeleteTarget(ctx, id); err != nil {
		if errors.Is(err, store.ErrConflict) {
			return nil, failedPrecondition("target %s: %v", id, err)
		}
		return nil, err
	}
	return &nightloomv1.DeleteTargetResponse{}, nil
}
