package main

// `nightloom network ...` (networks of sites sharing one queue) and the
// network side of `nightloom plan make --network`: one table of every
// member's runs ordered by UTC with the site named in each row, and one
// chart per member site.

import (
	"context"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"google.golang.org/protobuf/types/known/durationpb"

	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

func networkCommands() []command {
	return []command{
		{name: "create", summary: "store a network of sites (--name, --sites)", run: runNetworkCreate},
		{name: "list", summary: "list the networks", run: runNetworkList},
		{name: "show", summary: "show one network and its member sites' telescopes", run: runNetworkShow},
		{name: "delete", summary: "remove a network (refused while queued blocks belong to it)", run: runNetworkDelete},
		{name: "replan", summary: "plan the rest of a network's night again from an instant, with closures per site", run: runNetworkReplan},
	}
}

// networkClient is the NetworkService over the command's connection.
func (a *api) networks() pb.NetworkServiceClient { return pb.NewNetworkServiceClient(a.cc) }

func (a *api) allNetworks() ([]*pb.Network, error) {
	return allPages(a, "ListNetworks", func(ctx context.Context, token string) ([]*pb.Network, string, error) {
		resp, err := a.networks().ListNetworks(ctx, &pb.ListNetworksRequest{PageToken: token})
		return resp.GetNetworks(), resp.GetNextPageToken(), err
	})
}

// resolveNetwork finds a network by id or name (flag names the flag).
func (a *api) resolveNetwork(flag, ref string) (*pb.Network, error) {
	ns, err := a.allNetworks()
	if err != nil {
		return nil, err
	}
	for _, n := range ns {
		if n.GetId() == ref || n.GetName() == ref {
			return n, nil
		}
	}
	return nil, flagError(flag, "no network has the id or name %q", ref)
}

// resolveSites turns site ids or names into ids.
func (a *api) resolveSites(flag string, refs []string) ([]string, error) {
	sites, err := a.allSites(0)
	if err != nil {
		return nil, err
	}
	var out []string
	for _, ref := range refs {
		var ids []string
		for _, s := range sites {
			if s.GetId() == ref || s.GetName() == ref {
				ids = append(ids, s.GetId())
			}
		}
		switch len(ids) {
		case 0:
			return nil, flagError(flag, "no site has the id or name %q", ref)
		case 1:
			out = append(out, ids[0])
		default:
			return nil, flagError(flag, "%d sites are named %q; give the id", len(ids), ref)
		}
	}
	return out, nil
}

// splitList splits a comma-separated flag value, dropping empty items.
func splitList(s string) []string {
	var out []string
	for _, p := range strings.Split(s, ",") {
		if p = strings.TrimSpace(p); p != "" {
			out = append(out, p)
		}
	}
	return out
}

func runNetworkCreate(args []string, stdout, stderr io.Writer) error {
	r := newRemote("network create", stderr)
	name := r.fs.String("name", "", "name of the network, unique; required")
	sites := r.fs.String("sites", "", "member sites, comma-separated ids or names, in the order plans list them; required")
	desc := r.fs.String("description", "", "free description")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *name == "" {
		return flagError("name", "required: the network's name")
	}
	refs := splitList(*sites)
	if len(refs) == 0 {
		return flagError("sites", "required: at least one member site")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ids, err := a.resolveSites("sites", refs)
	if err != nil {
		return err
	}
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.networks().CreateNetwork(ctx, &pb.CreateNetworkRequest{Network: &pb.Network{Name: *name, SiteIds: ids, Description: *desc}})
	if err != nil {
		return a.callErr("CreateNetwork", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	return a.printNetwork(stdout, resp.GetNetwork())
}

func runNetworkList(args []string, stdout, stderr io.Writer) error {
	r := newRemote("network list", stderr)
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ns, err := a.allNetworks()
	if err != nil {
		return err
	}
	if r.conn.json {
		return writeJSON(stdout, &pb.ListNetworksResponse{Networks: ns})
	}
	tw := newTable(stdout)
	fmt.Fprintln(tw, "id\tname\tsites\tdescription")
	for _, n := range ns {
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\n", n.GetId(), n.GetName(), strings.Join(n.GetSiteIds(), ", "), n.GetDescription())
	}
	if len(ns) == 0 {
		fmt.Fprintln(tw, "(no networks)")
	}
	return tw.Flush()
}

func runNetworkShow(args []string, stdout, stderr io.Writer) error {
	r := newRemote("network show", stderr)
	ref := r.fs.String("network", "", "id or name of the network; required")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *ref == "" {
		return flagError("network", "required: the network's id or name")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	n, err := a.resolveNetwork("network", *ref)
	if err != nil {
		return err
	}
	if r.conn.json {
		return writeJSON(stdout, &pb.GetNetworkResponse{Network: n})
	}
	return a.printNetwork(stdout, n)
}

// printNetwork shows a network with what each member's telescope can do.
func (a *api) printNetwork(w io.Writer, n *pb.Network) error {
	tw := newTable(w)
	fmt.Fprintf(tw, "network\t%s\t%s\n", n.GetId(), n.GetName())
	if n.GetDescription() != "" {
		fmt.Fprintf(tw, "description\t%s\t\n", n.GetDescription())
	}
	fmt.Fprintln(tw, "\nsite\tname\tlongitude\ttime zone\taperture\tpixel scale\tfilters")
	for _, id := range n.GetSiteIds() {
		ctx, cancel := a.ctx()
		sr, err := a.sites.GetSite(ctx, &pb.GetSiteRequest{SiteId: id})
		cancel()
		if err != nil {
			return a.callErr("GetSite", err)
		}
		s := sr.GetSite()
		ap := "not given"
		if mm := s.GetInstrument().GetApertureMm(); mm > 0 {
			ap = fmt.Sprintf("%.0f mm", mm)
		}
		fs := strings.Join(s.GetInstrument().GetFilters(), " ")
		if fs == "" {
			fs = "(any)"
		}
		fmt.Fprintf(tw, "%s\t%s\t%+.2f\t%s\t%s\t%.2f arcsec/px\t%s\n", s.GetId(), s.GetName(), s.GetLongitudeDeg(),
			s.GetTimeZone(), ap, s.GetInstrument().GetPixelScaleArcsec(), fs)
	}
	return tw.Flush()
}

func runNetworkDelete(args []string, stdout, stderr io.Writer) error {
	r := newRemote("network delete", stderr)
	ref := r.fs.String("network", "", "id or name of the network; required")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *ref == "" {
		return flagError("network", "required: the network's id or name")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	n, err := a.resolveNetwork("network", *ref)
	if err != nil {
		return err
	}
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.networks().DeleteNetwork(ctx, &pb.DeleteNetworkRequest{NetworkId: n.GetId()})
	if err != nil {
		return a.callErr("DeleteNetwork", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	fmt.Fprintf(stdout, "deleted network %s (%s)\n", n.GetId(), n.GetName())
	return nil
}

// parseSiteClosures reads SITE=START/END[/REASON] values (SITE an id or a
// name) for the network commands' --closure.
func (a *api) parseSiteClosures(flag string, vals []string) ([]*pb.SiteClosure, error) {
	var out []*pb.SiteClosure
	for _, v := range vals {
		ref, rest, ok := strings.Cut(v, "=")
		if !ok || ref == "" {
			return nil, flagError(flag, "want SITE=START/END[/REASON], got %q", v)
		}
		ids, err := a.resolveSites(flag, []string{ref})
		if err != nil {
			return nil, err
		}
		c, err := parseClosure(flag, rest)
		if err != nil {
			return nil, err
		}
		out = append(out, &pb.SiteClosure{SiteId: ids[0], Closure: c})
	}
	return out, nil
}

// runPlanMakeNetwork is `plan make --network`: plan every member's night(s)
// jointly, print one table per night ordered by UTC, and write one chart
// per member and night when --chart-dir is given.
func runPlanMakeNetwork(r remote, ref, night string, nights int, step, budget time.Duration, seed int64, closures []string,
	chartDir string, stdout, stderr io.Writer) error {
	if night == "" {
		return flagError("night", "required with --network: the first night, YYYY-MM-DD")
	}
	d, err := parseDate("night", night)
	if err != nil {
		return err
	}
	if nights < 0 || nights > 14 {
		return flagError("nights", "must be within 0..14 with --network, got %d", nights)
	}
	if step < 0 {
		return flagError("step", "must be positive, got %v", step)
	}
	if budget < 0 {
		return flagError("budget", "must be >= 0, got %v", budget)
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	n, err := a.resolveNetwork("network", ref)
	if err != nil {
		return err
	}
	req := &pb.MakeNetworkPlanRequest{NetworkId: n.GetId(), Night: d, Nights: int32(nights), Seed: seed}
	if step > 0 {
		req.GridStep = durationpb.New(step)
	}
	if budget > 0 {
		req.TimeBudget = durationpb.New(budget)
	}
	if req.Closures, err = a.parseSiteClosures("closure", closures); err != nil {
		return err
	}
	p := startProgress(stderr, fmt.Sprintf("planning network %s", n.GetName()))
	ctx, cancel := a.ctx()
	resp, err := a.networks().MakeNetworkPlan(ctx, req)
	cancel()
	p.Stop()
	if err != nil {
		return a.callErr("MakeNetworkPlan", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	for i, nn := range resp.GetNights() {
		if i > 0 {
			fmt.Fprintln(stdout)
		}
		if err := a.printNetworkNight(stdout, n, nn); err != nil {
			return err
		}
		if chartDir != "" {
			if err := a.networkCharts(stdout, chartDir, nn); err != nil {
				return err
			}
		}
	}
	return nil
}

func runNetworkReplan(args []string, stdout, stderr io.Writer) error {
	r := newRemote("network replan", stderr)
	ref := r.fs.String("network", "", "id or name of the network; required")
	from := r.fs.String("from", "", "instant to plan again from, RFC 3339 (default: the server's clock)")
	budget := r.fs.Duration("budget", 0, "solver time budget, e.g. 1s (0: server default)")
	seed := r.fs.Int64("seed", 0, "seed of the solver's random choices")
	chartDir := r.fs.String("chart-dir", "", "write one chart per member site's new version into this folder")
	var closures multiFlag
	r.fs.Var(&closures, "closure", "closure at one site, SITE=START/END[/REASON] or SITE=START/+DURATION[/REASON] (repeatable)")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *ref == "" {
		return flagError("network", "required: the network's id or name")
	}
	if *budget < 0 {
		return flagError("budget", "must be >= 0, got %v", *budget)
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	n, err := a.resolveNetwork("network", *ref)
	if err != nil {
		return err
	}
	req := &pb.ReplanNetworkRequest{NetworkId: n.GetId(), Seed: *seed}
	if *from != "" {
		if req.From, err = parseInstant("from", *from); err != nil {
			return err
		}
	}
	if *budget > 0 {
		req.TimeBudget = durationpb.New(*budget)
	}
	if req.Closures, err = a.parseSiteClosures("closure", closures); err != nil {
		return err
	}
	ctx, cancel := a.ctx()
	resp, err := a.networks().ReplanNetwork(ctx, req)
	cancel()
	if err != nil {
		return a.callErr("ReplanNetwork", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	if err := a.printNetworkNight(stdout, n, resp.GetReplan()); err != nil {
		return err
	}
	if *chartDir != "" {
		return a.networkCharts(stdout, *chartDir, resp.GetReplan())
	}
	return nil
}

// printNetworkNight prints one night of a network plan: every member's
// runs in one table ordered by UTC, the site named in each row with its
// local clock, then the blocks no member plans with each member's reason.
func (a *api) printNetworkNight(w io.Writer, n *pb.Network, nn *pb.NetworkNight) error {
	sites := map[string]*pb.Site{}
	for _, id := range n.GetSiteIds() {
		ctx, cancel := a.ctx()
		sr, err := a.sites.GetSite(ctx, &pb.GetSiteRequest{SiteId: id})
		cancel()
		if err != nil {
			return a.callErr("GetSite", err)
		}
		sites[id] = sr.GetSite()
	}
	siteName := func(id string) string {
		if s := sites[id]; s != nil {
			return s.GetName()
		}
		return id
	}
	names, err := a.targetNames()
	if err != nil {
		return err
	}
	title := "network " + n.GetName()
	if nn.GetNight() != nil {
		title += ", night of " + dateString(nn.GetNight())
	}
	fmt.Fprintln(w, title)
	tw := newTable(w)
	for _, p := range nn.GetPlans() {
		c := newClock(sites[p.GetSiteId()].GetTimeZone())
		fmt.Fprintf(tw, "  %s\tplan %s version %d\t%s\t%d runs\n", siteName(p.GetSiteId()), p.GetId(), p.GetVersion(),
			c.interval(p.GetInterval()), len(p.GetAssignments()))
	}
	fmt.Fprintf(tw, "  objective\t%.1f joint\t%.1f each block at its best site, sites planned alone\t\n", nn.GetObjective(), nn.GetSeparateObjective())
	if err := tw.Flush(); err != nil {
		return err
	}
	type row struct {
		site string
		a    *pb.Assignment
	}
	var rows []row
	for _, p := range nn.GetPlans() {
		for _, x := range p.GetAssignments() {
			rows = append(rows, row{p.GetSiteId(), x})
		}
	}
	sort.SliceStable(rows, func(i, j int) bool { return rows[i].a.GetStart().AsTime().Before(rows[j].a.GetStart().AsTime()) })
	fmt.Fprintln(w)
	tw = newTable(w)
	fmt.Fprintln(tw, "start UTC\tend UTC\tsite\tlocal\ttarget\tfilter\tframes\talt\tairmass")
	for _, x := range rows {
		c := newClock(sites[x.site].GetTimeZone())
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%d x %s\t%.0f\t%.2f\n", x.a.GetStart().AsTime().UTC().Format("01-02 15:04"),
			x.a.GetEnd().AsTime().UTC().Format("15:04"), siteName(x.site), c.hm(x.a.GetStart()), names[x.a.GetTargetId()],
			x.a.GetFilter(), x.a.GetFrames(), dur(x.a.GetExposure()), x.a.GetConditionsAtStart().GetAltitudeDeg(),
			x.a.GetConditionsAtStart().GetAirmass())
	}
	if len(rows) == 0 {
		fmt.Fprintln(tw, "(no runs)")
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	if len(nn.GetUnplaced()) > 0 {
		// What each unplaced block is (the network's and the members'
		// own blocks).
		blocks := map[string]*pb.Block{}
		for _, id := range n.GetSiteIds() {
			bs, err := a.allBlocks(&pb.ListBlocksRequest{SiteId: id})
			if err != nil {
				return err
			}
			for _, b := range bs {
				blocks[b.GetId()] = b
			}
		}
		fmt.Fprintln(w)
		tw = newTable(w)
		fmt.Fprintln(tw, "unplaced\tfilter\tframes left\twhy not, at each site that may take it")
		for _, u := range nn.GetUnplaced() {
			what := u.GetBlockId()
			b := blocks[u.GetBlockId()]
			if b != nil {
				what = names[b.GetTargetId()]
			}
			var why []string
			for _, s := range u.GetSites() {
				if s.GetReason() == pb.SiteReason_SITE_REASON_NOT_ALLOWED {
					continue // another site's own block, or not among the block's sites
				}
				reason := strings.ToLower(strings.ReplaceAll(enumName(s.GetReason().String(), "SITE_REASON_"), "_", " "))
				if s.GetConstraint() != pb.Reason_REASON_UNSPECIFIED {
					reason += " (" + strings.ToLower(strings.ReplaceAll(enumName(s.GetConstraint().String(), "REASON_"), "_", " ")) + ")"
				}
				why = append(why, siteName(s.GetSiteId())+": "+reason)
			}
			if len(why) == 0 {
				why = []string{"no member may take it"}
			}
			fmt.Fprintf(tw, "%s\t%s\t%d\t%s\n", what, b.GetFilter(), u.GetFramesLeft(), strings.Join(why, "; "))
		}
		return tw.Flush()
	}
	return nil
}

// networkCharts writes one chart per member's plan of a network night
// (internal/chart, as `plan chart`): DIR/SITE[-DATE].png.
func (a *api) networkCharts(w io.Writer, dir string, nn *pb.NetworkNight) error {
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return flagError("chart-dir", "%v", err)
	}
	for _, p := range nn.GetPlans() {
		spec, err := a.planChartSpec(p.GetId(), 2*time.Minute, 30*time.Minute)
		if err != nil {
			return err
		}
		name := p.GetSiteId()
		if p.GetNight() != nil {
			name += "-" + dateString(p.GetNight())
		}
		path := filepath.Join(dir, name+".png")
		if err := writeChart(spec, path); err != nil {
			return err
		}
		fmt.Fprintf(w, "wrote %s\n", path)
	}
	return nil
}
