package server

import (
	"context"
	"errors"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// siteService implements SiteService (site.proto).
type siteService struct {
	nightloomv1.UnimplementedSiteServiceServer
	s *Server
}

var siteOutputOnly = map[string]bool{"id": true, "create_time": true, "update_time": true}

// siteProto decodes a stored site.
func siteProto(rec store.Site) (*nightloomv1.Site, error) {
	s := &nightloomv1.Site{}
	if err := proto.Unmarshal(rec.Spec, s); err != nil {
		return nil, err
	}
	s.Id = rec.ID
	s.CreateTime, s.UpdateTime = timestamppb.New(rec.CreatedAt), timestamppb.New(rec.UpdatedAt)
	return s, nil
}

// loadSite reads a site and builds its model.
func (s *Server) loadSite(ctx context.Context, id string) (*siteModel, store.Site, error) {
	rec, err := s.db.GetSite(ctx, id)
	if err != nil {
		return nil, rec, err
	}
	pb, err := siteProto(rec)
	if err != nil {
		return nil, rec, err
	}
	m, err := newSiteModel(pb)
	if err != nil {
		return nil, rec, err
	}
	return m, rec, nil
}

// validSite normalizes and checks a site for storing; path prefixes the
// violations.
func validSite(v *violations, path string, in *nightloomv1.Site) *nightloomv1.Site {
	if in == nil {
		v.add(path, "is required")
		return nil
	}
	s := normalizeSite(in)
	checkSite(v, path, s)
	if !v.ok() {
		return nil
	}
	if _, err := newSiteModel(s); err != nil {
		v.add(path, "%v", err)
		return nil
	}
	return s
}

func (x *siteService) CreateSite(ctx context.Context, req *nightloomv1.CreateSiteRequest) (*nightloomv1.CreateSiteResponse, error) {
	var v violations
	s := validSite(&v, "site", req.GetSite())
	if err := v.err(); err != nil {
		return nil, err
	}
	spec, err := storable(s)
	if err != nil {
		return nil, err
	}
	rec, err := x.s.db.CreateSite(ctx, store.Site{ID: newID(sitePrefix), Name: s.GetName(), Spec: spec})
	if err != nil {
		return nil, err
	}
	out, err := siteProto(rec)
	if err != nil {
		return nil, err
	}
	return &nightloomv1.CreateSiteResponse{Site: out}, nil
}

func (x *siteService) GetSite(ctx context.Context, req *nightloomv1.GetSiteRequest) (*nightloomv1.GetSiteResponse, error) {
	var v violations
	requiredID(&v, "site_id", req.GetSiteId())
	if err := v.err(); err != nil {
		return nil, err
	}
	rec, err := x.s.db.GetSite(ctx, req.GetSiteId())
	if err != nil {
		return nil, err
	}
	out, err := siteProto(rec)
	if err != nil {
		return nil, err
	}
	return &nightloomv1.GetSiteResponse{Site: out}, nil
}

func (x *siteService) ListSites(ctx context.Context, req *nightloomv1.ListSitesRequest) (*nightloomv1.ListSitesResponse, error) {
	var v violations
	size := pageSize(&v, "page_size", req.GetPageSize(), DefaultPageSize, MaxPageSize)
	pageToken(&v, "page_token", req.GetPageToken())
	if err := v.err(); err != nil {
		return nil, err
	}
	recs, next, err := x.s.db.ListSites(ctx, store.Page{Size: size, Token: req.GetPageToken()})
	if err != nil {
		return nil, pageErr(err)
	}
	resp := &nightloomv1.ListSitesResponse{NextPageToken: next}
	for _, r := range recs {
		s, err := siteProto(r)
		if err != nil {
			return nil, err
		}
		resp.Sites = append(resp.Sites, s)
	}
	return resp, nil
}

// pageErr reports a page token the store refused as a field violation.
func pageErr(err error) error {
	if errors.Is(err, store.ErrInvalid) {
		return fieldError("page_token", "not a page token of this list (pass next_page_token from the previous page unchanged)")
	}
	return err
}

// updateRetries bounds the read-modify-write retries of an update whose
// stored revision changed in between.
const updateRetries = 3

func (x *siteService) UpdateSite(ctx context.Context, req *nightloomv1.UpdateSiteRequest) (*nightloomv1.UpdateSiteResponse, error) {
	var v violations
	if req.GetSite() == nil {
		v.add("site", "is required")
	} else {
		requiredID(&v, "site.id", req.GetSite().GetId())
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	for attempt := 0; ; attempt++ {
		rec, err := x.s.db.GetSite(ctx, req.GetSite().GetId())
		if err != nil {
			return nil, err
		}
		cur, err := siteProto(rec)
		if err != nil {
			return nil, err
		}
		applyMask(&v, cur, req.GetSite(), req.GetUpdateMask(), siteOutputOnly)
		if err := v.err(); err != nil {
			return nil, err
		}
		s := validSite(&v, "site", cur)
		if err := v.err(); err != nil {
			return nil, err
		}
		spec, err := storable(s)
		if err != nil {
			return nil, err
		}
		out, err := x.s.db.UpdateSite(ctx, store.Site{ID: rec.ID, Name: s.GetName(), Spec: spec, Revision: rec.Revision})
		if errors.Is(err, store.ErrConflict) && attempt < updateRetries {
			continue
		}
		if errors.Is(err, store.ErrConflict) {
			return nil, status.Errorf(codes.Aborted, "site %s kept changing during the update; retry", rec.ID)
		}
		if err != nil {
			return nil, err
		}
		pb, err := siteProto(out)
		if err != nil {
			return nil, err
		}
		return &nightloomv1.UpdateSiteResponse{Site: pb}, nil
	}
}

func (x *siteService) DeleteSite(ctx context.Context, req *nightloomv1.DeleteSiteRequest) (*nightloomv1.DeleteSiteResponse, error) {
	var v violations
	requiredID(&v, "site_id", req.GetSiteId())
	if err := v.err(); err != nil {
		return nil, err
	}
	id := req.GetSiteId()
	if _, err := x.s.db.GetSite(ctx, id); err != nil {
		return nil, err
	}
	if !req.GetForce() {
		blocks, _, err := x.s.db.ListBlocks(ctx, store.BlockFilter{SiteID: id}, store.Page{Size: 1})
		if err != nil {
			return nil, err
		}
		if len(blocks) > 0 {
			return nil, failedPrecondition("site %s still has blocks; withdraw them or delete with force", id)
		}
	} else {
		// The store deletes a site only once no block of it is queued:
		// withdraw them first (each withdrawal is its own transaction; a
		// failure part way leaves the site with some blocks withdrawn and
		// the call can be repeated).
		for {
			blocks, _, err := x.s.db.ListBlocks(ctx, store.BlockFilter{SiteID: id, State: store.StateQueued}, store.Page{Size: store.MaxPageSize})
			if err != nil {
				return nil, err
			}
			if len(blocks) == 0 {
				break
			}
			for _, b := range blocks {
				if _, err := x.s.db.WithdrawBlock(ctx, b.ID); err != nil && !errors.Is(err, store.ErrConflict) {
					return nil, err
				}
			}
		}
	}
	if err := x.s.db.DeleteSite(ctx, id); err != nil {
		if errors.Is(err, store.ErrConflict) {
			return nil, failedPrecondition("site %s: %v", id, err)
		}
		return nil, err
	}
	return &nightloomv1.DeleteSiteResponse{}, nil
}
