package server

// Tokens held to one site (`nightloomd token create --site ID`). Every call
// and stream of such a token is checked against the site its request
// names, directly (site_id) or through what it names (a block's or a plan's
// site). The rule fails closed: a request type that is not listed here is
// refused for a site-held token, so an RPC added later stays shut to them
// until someone says how it maps to a site.
//
//   - sites: GetSite, UpdateSite and DeleteSite of its own site only;
//     CreateSite is refused; ListSites lists its own site only.
//   - targets are shared by every site: they may be read (GetTarget,
//     ListTargets), not created, changed or deleted.
//   - blocks and plans: those of its own site; ListBlocks and ListPlans
//     without a site are narrowed to it.
//   - sky: Night and Ephemeris at its own site; Visibility of its own site's
//     blocks, or of a target at its own site.
//   - programs: GetProgram of a program open to its site (held to it or to
//     none); ListPrograms lists those only; GetProgramUsage of its own site
//     (narrowed to it without a site); CreateProgram, UpdateProgram and
//     DeleteProgram are refused (a program may span sites).
//   - networks: GetNetwork of a network it belongs to, ListNetworks narrowed
//     to those; CreateNetwork and DeleteNetwork are refused. Planning a
//     network (MakeNetworkPlan, ReplanNetwork) and queueing a network block
//     are refused unless its own site is the network's only member: they
//     spend other sites' time. A network block may be read (GetBlock) and
//     reported on (ReportProgress) by every member, since any member may
//     run it; edited and withdrawn by its home site only. A Replan at its
//     own site of a version that network planning made re-solves the
//     network (plans.go): the caller only closes its own roof, and the
//     blocks this frees or needs move under the network's rules, as a
//     block queued at or above the replan priority replans on its own.

import (
	"context"
	"errors"
	"fmt"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// scopeDenied is the refusal of a site-held token.
func scopeDenied(site, what string) error {
	return status.Errorf(codes.PermissionDenied, "this token is held to site %s; %s", site, what)
}

// checkScope checks (and for Lists without a site, narrows) a request of a
// site-held token.
func (s *Server) checkScope(ctx context.Context, site string, req any) error {
	same := func(field, id string) error {
		if id != site {
			return scopeDenied(site, fmt.Sprintf("%s %q is another site", field, id))
		}
		return nil
	}
	blockSite := func(id string) error {
		if id == "" {
			return nil // the handler refuses the missing id
		}
		b, err := s.db.GetBlock(ctx, id)
		if err != nil {
			return err
		}
		if b.SiteID != site {
			return scopeDenied(site, fmt.Sprintf("block %q belongs to another site", id))
		}
		return nil
	}
	// A network block may be seen and reported on by every member.
	memberOf := func(networkID string) (bool, error) {
		n, err := s.db.GetNetwork(ctx, networkID)
		if err != nil {
			return false, err
		}
		for _, id := range n.SiteIDs {
			if id == site {
				return true, nil
			}
		}
		return false, nil
	}
	blockMember := func(id string) error {
		if id == "" {
			return nil
		}
		b, err := s.db.GetBlock(ctx, id)
		if err != nil {
			return err
		}
		if b.SiteID == site {
			return nil
		}
		if b.NetworkID != "" {
			if ok, err := memberOf(b.NetworkID); err != nil || ok {
				return err
			}
		}
		return scopeDenied(site, fmt.Sprintf("block %q belongs to another site", id))
	}
	// Only a network whose one member is this site may be planned or
	// queued for.
	networkAlone := func(field, id string) error {
		if id == "" {
			return nil
		}
		n, err := s.db.GetNetwork(ctx, id)
		if err != nil {
			return err
		}
		for _, m := range n.SiteIDs {
			if m != site {
				return scopeDenied(site, fmt.Sprintf("%s %q has other member sites (%s)", field, id, m))
			}
		}
		return nil
	}
	planSite := func(id string) error {
		if id == "" {
			return nil
		}
		p, err := s.db.GetPlan(ctx, id)
		if err != nil {
			return err
		}
		if p.SiteID != site {
			return scopeDenied(site, fmt.Sprintf("plan %q belongs to another site", id))
		}
		return nil
	}
	switch r := req.(type) {
	case *nightloomv1.GetSiteRequest:
		return same("site_id", r.GetSiteId())
	case *nightloomv1.UpdateSiteRequest:
		return same("site.id", r.GetSite().GetId())
	case *nightloomv1.DeleteSiteRequest:
		return same("site_id", r.GetSiteId())
	case *nightloomv1.ListSitesRequest:
		return nil // the response is narrowed (scopeResponse)
	case *nightloomv1.CreateSiteRequest:
		return scopeDenied(site, "it cannot create sites")

	case *nightloomv1.GetTargetRequest, *nightloomv1.ListTargetsRequest:
		return nil
	case *nightloomv1.CreateTargetRequest, *nightloomv1.UpdateTargetRequest, *nightloomv1.DeleteTargetRequest:
		return scopeDenied(site, "targets are shared by every site, so it cannot change them")

	case *nightloomv1.QueueBlocksRequest:
		for i, b := range r.GetBlocks() {
			if err := same(fmt.Sprintf("blocks[%d].site_id", i), b.GetSiteId()); err != nil {
				return err
			}
			if err := networkAlone(fmt.Sprintf("blocks[%d].network_id", i), b.GetNetworkId()); err != nil {
				return err
			}
		}
		return nil
	case *nightloomv1.GetBlockRequest:
		return blockMember(r.GetBlockId())
	case *nightloomv1.WithdrawBlockRequest:
		return blockSite(r.GetBlockId())
	case *nightloomv1.ReportProgressRequest:
		if err := blockMember(r.GetReport().GetBlockId()); err != nil {
			return err
		}
		// The plan a report names says which site ran it (networks.go):
		// it must be one of this site's (an unknown id says nothing).
		if err := planSite(r.GetReport().GetPlanId()); err != nil && !errors.Is(err, store.ErrNotFound) {
			return err
		}
		return nil
	case *nightloomv1.UpdateBlockRequest:
		return blockSite(r.GetBlock().GetId())
	case *nightloomv1.WithdrawBlocksRequest:
		return same("site_id", r.GetSiteId())
	case *nightloomv1.ListBlocksRequest:
		if r.GetSiteId() == "" {
			r.SiteId = site
		}
		return same("site_id", r.GetSiteId())

	case *nightloomv1.MakePlanRequest:
		return same("site_id", r.GetSiteId())
	case *nightloomv1.ReplanRequest:
		return same("site_id", r.GetSiteId())
	case *nightloomv1.NextAssignmentRequest:
		return same("site_id", r.GetSiteId())
	case *nightloomv1.WatchPlansRequest:
		return same("site_id", r.GetSiteId())
	case *nightloomv1.ListPlansRequest:
		if r.GetSiteId() == "" {
			r.SiteId = site
		}
		return same("site_id", r.GetSiteId())
	case *nightloomv1.GetPlanRequest:
		return planSite(r.GetPlanId())
	case *nightloomv1.ExportPlanRequest:
		return planSite(r.GetPlanId())

	case *nightloomv1.GetProgramRequest:
		if r.GetName() == "" {
			return nil
		}
		p, err := s.db.GetProgram(ctx, r.GetName())
		if err != nil {
			return err
		}
		if p.SiteID != "" && p.SiteID != site {
			return scopeDenied(site, fmt.Sprintf("program %q is held to another site", r.GetName()))
		}
		return nil
	case *nightloomv1.ListProgramsRequest:
		return nil // the response is narrowed (scopeResponse)
	case *nightloomv1.GetProgramUsageRequest:
		if r.GetSiteId() == "" {
			r.SiteId = site
		}
		return same("site_id", r.GetSiteId())
	case *nightloomv1.CreateProgramRequest, *nightloomv1.UpdateProgramRequest, *nightloomv1.DeleteProgramRequest:
		return scopeDenied(site, "programs may span sites, so it cannot change them")
	case *nightloomv1.GetNetworkRequest:
		if r.GetNetworkId() == "" {
			return nil
		}
		ok, err := memberOf(r.GetNetworkId())
		if err != nil {
			return err
		}
		if !ok {
			return scopeDenied(site, fmt.Sprintf("it is not a member of network %q", r.GetNetworkId()))
		}
		return nil
	case *nightloomv1.ListNetworksRequest:
		return nil // the response is narrowed (scopeResponse)
	case *nightloomv1.CreateNetworkRequest, *nightloomv1.DeleteNetworkRequest:
		return scopeDenied(site, "it cannot create or delete networks")
	case *nightloomv1.MakeNetworkPlanRequest:
		if r.GetNetworkId() == "" {
			return scopeDenied(site, "network_id is missing")
		}
		return networkAlone("network_id", r.GetNetworkId())
	case *nightloomv1.ReplanNetworkRequest:
		if r.GetNetworkId() == "" {
			return scopeDenied(site, "network_id is missing")
		}
		return networkAlone("network_id", r.GetNetworkId())

	case *nightloomv1.NightRequest:
		return same("site_id", r.GetSiteId())
	case *nightloomv1.EphemerisRequest:
		return same("site_id", r.GetSiteId())
	case *nightloomv1.VisibilityRequest:
		if r.GetSiteId() != "" {
			if err := same("site_id", r.GetSiteId()); err != nil {
				return err
			}
		}
		if id := r.GetBlockId(); id != "" {
			return blockSite(id)
		}
		return same("site_id", r.GetSiteId())
	}
	return scopeDenied(site, fmt.Sprintf("%T is not open to site-held tokens", req))
}

// scopeResponse narrows a response for a site-held token.
func scopeResponse(site string, resp any) {
	if r, ok := resp.(*nightloomv1.ListNetworksResponse); ok {
		kept := r.Networks[:0]
		for _, x := range r.GetNetworks() {
			for _, id := range x.GetSiteIds() {
				if id == site {
					kept = append(kept, x)
					break
				}
			}
		}
		r.Networks = kept
	}
	if r, ok := resp.(*nightloomv1.ListSitesResponse); ok {
		kept := r.Sites[:0]
		for _, x := range r.GetSites() {
			if x.GetId() == site {
				kept = append(kept, x)
			}
		}
		r.Sites = kept
	}
	if r, ok := resp.(*nightloomv1.ListProgramsResponse); ok {
		kept := r.Programs[:0]
		for _, x := range r.GetPrograms() {
			if openTo(x, site) {
				kept = append(kept, x)
			}
		}
		r.Programs = kept
	}
}

// scopeUnary applies the scope of a site-held token to a unary call. It
// runs inside the error mapper, so that a lookup's storage error gets its
// status code.
func (s *Server) scopeUnary(ctx context.Context, req any, info *grpc.UnaryServerInfo, handler grpc.UnaryHandler) (any, error) {
	p, ok := principalFrom(ctx)
	if !ok || p.siteID == "" {
		return handler(ctx, req)
	}
	if err := s.checkScope(ctx, p.siteID, req); err != nil {
		return nil, err
	}
	resp, err := handler(ctx, req)
	if err == nil {
		scopeResponse(p.siteID, resp)
	}
	return resp, err
}

// scopeStream checks each message a site-held token's stream receives.
func (s *Server) scopeStream(srv any, ss grpc.ServerStream, info *grpc.StreamServerInfo, handler grpc.StreamHandler) error {
	p, ok := principalFrom(ss.Context())
	if !ok || p.siteID == "" {
		return handler(srv, ss)
	}
	return handler(srv, &scopedStream{ServerStream: ss, s: s, site: p.siteID})
}

type scopedStream struct {
	grpc.ServerStream
	s    *Server
	site string
}

func (x *scopedStream) RecvMsg(m any) error {
	if err := x.ServerStream.RecvMsg(m); err != nil {
		return err
	}
	return x.s.checkScope(x.Context(), x.site, m)
}
