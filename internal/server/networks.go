package server

// NetworkService (network.proto): networks of sites, their blocks'
// references, and the reporting site of progress. Joint planning is in
// networkplan.go.

import (
	"context"
	"errors"
	"slices"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

const networkPrefix = "net-"

// networkService implements NetworkService.
type networkService struct {
	nightloomv1.UnimplementedNetworkServiceServer
	s *Server
}

// networkProto decodes a stored network.
func networkProto(rec store.Network) (*nightloomv1.Network, error) {
	n := &nightloomv1.Network{}
	if err := proto.Unmarshal(rec.Spec, n); err != nil {
		return nil, err
	}
	n.Id, n.Name, n.SiteIds = rec.ID, rec.Name, slices.Clone(rec.SiteIDs)
	n.CreateTime = timestamppb.New(rec.CreatedAt)
	return n, nil
}

// loadNetwork reads a network; an unknown id is NOT_FOUND naming path.
func (s *Server) loadNetwork(ctx context.Context, path, id string) (*nightloomv1.Network, error) {
	rec, err := s.db.GetNetwork(ctx, id)
	if errors.Is(err, store.ErrNotFound) {
		return nil, notFound("%s: network %s not found", path, id)
	}
	if err != nil {
		return nil, err
	}
	return networkProto(rec)
}

// checkAllowedSites validates Block.allowed_site_ids on its own (the
// membership is checked against the network later).
func checkAllowedSites(v *violations, path string, ids []string) {
	if len(ids) > MaxAllowedSites {
		v.add(path, "at most %d sites, got %d", MaxAllowedSites, len(ids))
		return
	}
	seen := map[string]int{}
	for i, id := range ids {
		requiredID(v, idx(path, i), id)
		if j, dup := seen[id]; dup {
			v.add(idx(path, i), "site %s is also %s", id, idx(path, j))
		}
		seen[id] = i
	}
}

// checkNeeds validates Block.needs (queue.proto TelescopeNeeds).
func checkNeeds(v *violations, path string, n *nightloomv1.TelescopeNeeds) {
	if n == nil {
		return
	}
	rangeCheck(v, path+".min_aperture_mm", n.GetMinApertureMm(), 0, MaxApertureMM)
	rangeCheck(v, path+".min_pixel_scale_arcsec", n.GetMinPixelScaleArcsec(), 0, MaxNeedsPixelScaleArcs)
	rangeCheck(v, path+".max_pixel_scale_arcsec", n.GetMaxPixelScaleArcsec(), 0, MaxNeedsPixelScaleArcs)
	if mx := n.GetMaxPixelScaleArcsec(); mx > 0 && mx < n.GetMinPixelScaleArcsec() {
		v.add(path+".max_pixel_scale_arcsec", "must be 0 or at least min_pixel_scale_arcsec (%v)", n.GetMinPixelScaleArcsec())
	}
}

// resolveNetworkBlocks checks the network blocks of a QueueBlocks call
// against their networks (and fills in the home site of those that name
// none): the network exists, allowed sites and the home site are members,
// and at least one allowed member's wheel has the filter.
func (s *Server) resolveNetworkBlocks(ctx context.Context, v *violations, blocks []*nightloomv1.Block, sites *siteCache) error {
	nets := map[string]*nightloomv1.Network{}
	for i, b := range blocks {
		if b.GetNetworkId() == "" {
			continue
		}
		path := idx("blocks", i)
		n, ok := nets[b.GetNetworkId()]
		if !ok {
			var err error
			if n, err = s.loadNetwork(ctx, path+".network_id", b.GetNetworkId()); err != nil {
				return err
			}
			nets[b.GetNetworkId()] = n
		}
		allowed := b.GetAllowedSiteIds()
		for j, id := range allowed {
			if !slices.Contains(n.GetSiteIds(), id) {
				v.add(idx(path+".allowed_site_ids", j), "site %s is not a member of network %s", id, n.GetId())
			}
		}
		if b.GetSiteId() == "" {
			if len(allowed) > 0 {
				b.SiteId = allowed[0]
			} else {
				b.SiteId = n.GetSiteIds()[0]
			}
		} else if !slices.Contains(n.GetSiteIds(), b.GetSiteId()) {
			v.add(path+".site_id", "site %s is not a member of network %s (a network block's site is its home member)", b.GetSiteId(), n.GetId())
		}
		if !v.ok() {
			continue
		}
		candidates := allowed
		if len(candidates) == 0 {
			candidates = n.GetSiteIds()
		}
		found := false
		for _, id := range candidates {
			m, err := sites.get(ctx, id)
			if err != nil {
				return err
			}
			fs := m.pb.GetInstrument().GetFilters()
			found = found || len(fs) == 0 || slices.Contains(fs, b.GetFilter())
		}
		if !found {
			v.add(path+".filter", "filter %q is in the wheel of none of the sites that may take the block", b.GetFilter())
		}
	}
	return nil
}

// reportingSite is the site a progress report comes from: the site of the
// plan it names, else the site a site-held token is held to, else the
// block's own (home) site. The store keeps it so that each member's
// replans see their own runs of a network block.
func (s *Server) reportingSite(ctx context.Context, r *nightloomv1.ProgressReport) (string, error) {
	if id := r.GetPlanId(); id != "" {
		p, err := s.db.GetPlan(ctx, id)
		switch {
		case err == nil:
			return p.SiteID, nil
		case !errors.Is(err, store.ErrNotFound):
			return "", err
		}
	}
	if p, ok := principalFrom(ctx); ok && p.siteID != "" {
		return p.siteID, nil
	}
	b, err := s.db.GetBlock(ctx, r.GetBlockId())
	if err != nil {
		return "", err
	}
	return b.SiteID, nil
}

func (x *networkService) CreateNetwork(ctx context.Context, req *nightloomv1.CreateNetworkRequest) (*nightloomv1.CreateNetworkResponse, error) {
	var v violations
	n := req.GetNetwork()
	if n == nil {
		v.add("network", "is required")
		return nil, v.err()
	}
	text(&v, "network.name", n.GetName(), 1, MaxNameBytes)
	text(&v, "network.description", n.GetDescription(), 0, MaxDescriptionBytes)
	switch k := len(n.GetSiteIds()); {
	case k == 0:
		v.add("network.site_ids", "at least one site is required")
	case k > MaxNetworkSites:
		v.add("network.site_ids", "at most %d sites, got %d", MaxNetworkSites, k)
	default:
		checkAllowedSites(&v, "network.site_ids", n.GetSiteIds())
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	for i, id := range n.GetSiteIds() {
		if _, err := x.s.db.GetSite(ctx, id); errors.Is(err, store.ErrNotFound) {
			return nil, notFound("network.site_ids[%d]: site %s not found", i, id)
		} else if err != nil {
			return nil, err
		}
	}
	spec, err := storable(&nightloomv1.Network{Description: n.GetDescription()})
	if err != nil {
		return nil, err
	}
	rec, err := x.s.db.CreateNetwork(ctx, store.Network{ID: newID(networkPrefix), Name: n.GetName(), SiteIDs: n.GetSiteIds(), Spec: spec})
	if errors.Is(err, store.ErrAlreadyExists) {
		return nil, fieldError("network.name", "a network named %q exists", n.GetName())
	}
	if err != nil {
		return nil, err
	}
	out, err := networkProto(rec)
	if err != nil {
		return nil, err
	}
	return &nightloomv1.CreateNetworkResponse{Network: out}, nil
}

func (x *networkService) GetNetwork(ctx context.Context, req *nightloomv1.GetNetworkRequest) (*nightloomv1.GetNetworkResponse, error) {
	var v violations
	requiredID(&v, "network_id", req.GetNetworkId())
	if err := v.err(); err != nil {
		return nil, err
	}
	rec, err := x.s.db.GetNetwork(ctx, req.GetNetworkId())
	if err != nil {
		return nil, err
	}
	out, err := networkProto(rec)
	if err != nil {
		return nil, err
	}
	return &nightloomv1.GetNetworkResponse{Network: out}, nil
}

func (x *networkService) ListNetworks(ctx context.Context, req *nightloomv1.ListNetworksRequest) (*nightloomv1.ListNetworksResponse, error) {
	var v violations
	size := pageSize(&v, "page_size", req.GetPageSize(), DefaultPageSize, MaxPageSize)
	pageToken(&v, "page_token", req.GetPageToken())
	if err := v.err(); err != nil {
		return nil, err
	}
	recs, next, err := x.s.db.ListNetworks(ctx, store.Page{Size: size, Token: req.GetPageToken()})
	if err != nil {
		return nil, pageErr(err)
	}
	resp := &nightloomv1.ListNetworksResponse{NextPageToken: next}
	for _, r := range recs {
		n, err := networkProto(r)
		if err != nil {
			return nil, err
		}
		resp.Networks = append(resp.Networks, n)
	}
	return resp, nil
}

func (x *networkService) DeleteNetwork(ctx context.Context, req *nightloomv1.DeleteNetworkRequest) (*nightloomv1.DeleteNetworkResponse, error) {
	var v violations
	requiredID(&v, "network_id", req.GetNetworkId())
	if err := v.err(); err != nil {
		return nil, err
	}
	err := x.s.db.DeleteNetwork(ctx, req.GetNetworkId())
	if errors.Is(err, store.ErrConflict) {
		return nil, failedPrecondition("network %s: %v; withdraw them first", req.GetNetworkId(), err)
	}
	if err != nil {
		return nil, err
	}
	return &nightloomv1.DeleteNetworkResponse{}, nil
}
