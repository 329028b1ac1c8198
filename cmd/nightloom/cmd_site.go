package main

// `nightloom site ...`: create, get, list, update and delete sites.

import (
	"context"
	"flag"
	"fmt"
	"io"
	"strings"

	"google.golang.org/protobuf/types/known/fieldmaskpb"

	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

func siteCommands() []command {
	return []command{
		{name: "create", summary: "store a site from a CreateSiteRequest file", run: runSiteCreate},
		{name: "get", summary: "show one site", run: runSiteGet},
		{name: "list", summary: "list the sites", run: runSiteList},
		{name: "update", summary: "change a site from an UpdateSiteRequest file", run: runSiteUpdate},
		{name: "delete", summary: "remove a site", run: runSiteDelete},
	}
}

// remote is a command that talks to a daemon: its flag set and the
// connection flags.
type remote struct {
	fs   *flag.FlagSet
	conn *connFlags
}

func newRemote(name string, stderr io.Writer) remote {
	fs := newFlagSet(name, stderr)
	return remote{fs: fs, conn: addConnFlags(fs)}
}

func runSiteCreate(args []string, stdout, stderr io.Writer) error {
	r := newRemote("site create", stderr)
	file := r.fs.String("file", "", "CreateSiteRequest as protobuf JSON (- for stdin); required")
	capf := addCapabilityFlags(r.fs)
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *file == "" {
		return flagError("file", "required: a CreateSiteRequest JSON file (see testdata/demo/site.json)")
	}
	req := &pb.CreateSiteRequest{}
	if err := readRequest(*file, req); err != nil {
		return err
	}
	if req.Site == nil {
		req.Site = &pb.Site{}
	}
	if _, err := capf.apply(r.fs, req.Site); err != nil {
		return err
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.sites.CreateSite(ctx, req)
	if err != nil {
		return a.callErr("CreateSite", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	return printSite(stdout, resp.GetSite())
}

func runSiteGet(args []string, stdout, stderr io.Writer) error {
	r := newRemote("site get", stderr)
	id := r.fs.String("site", "", "id of the site; required")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *id == "" {
		return flagError("site", "required: the site's id")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.sites.GetSite(ctx, &pb.GetSiteRequest{SiteId: *id})
	if err != nil {
		return a.callErr("GetSite", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	return printSite(stdout, resp.GetSite())
}

func runSiteList(args []string, stdout, stderr io.Writer) error {
	r := newRemote("site list", stderr)
	pageSize := r.fs.Int("page-size", 0, "sites per call (0: the server's default); every page is fetched")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *pageSize < 0 {
		return flagError("page-size", "must be >= 0")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	sites, err := a.allSites(int32(*pageSize))
	if err != nil {
		return err
	}
	if r.conn.json {
		return writeJSON(stdout, &pb.ListSitesResponse{Sites: sites})
	}
	tw := newTable(stdout)
	fmt.Fprintln(tw, "id\tname\tlatitude\tlongitude\televation\ttime zone\tmount\thorizon points")
	for _, s := range sites {
		fmt.Fprintf(tw, "%s\t%s\t%.4f\t%.4f\t%.0f m\t%s\t%s\t%d\n", s.GetId(), s.GetName(), s.GetLatitudeDeg(),
			s.GetLongitudeDeg(), s.GetElevationM(), s.GetTimeZone(),
			enumName(s.GetMount().GetKind().String(), "MOUNT_KIND_"), len(s.GetHorizon()))
	}
	if len(sites) == 0 {
		fmt.Fprintln(tw, "(no sites)")
	}
	return tw.Flush()
}

func (a *api) allSites(pageSize int32) ([]*pb.Site, error) {
	return allPages(a, "ListSites", func(ctx context.Context, token string) ([]*pb.Site, string, error) {
		resp, err := a.sites.ListSites(ctx, &pb.ListSitesRequest{PageSize: pageSize, PageToken: token})
		return resp.GetSites(), resp.GetNextPageToken(), err
	})
}

func runSiteUpdate(args []string, stdout, stderr io.Writer) error {
	r := newRemote("site update", stderr)
	file := r.fs.String("file", "", "UpdateSiteRequest as protobuf JSON (- for stdin); required")
	id := r.fs.String("site", "", "id of the site, overriding site.id in the file")
	mask := r.fs.String("mask", "", "comma-separated field paths to replace (e.g. name,horizon), overriding updateMask in the file")
	capf := addCapabilityFlags(r.fs)
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *file == "" {
		return flagError("file", "required: an UpdateSiteRequest JSON file (see testdata/demo/update-site.json)")
	}
	req := &pb.UpdateSiteRequest{}
	if err := readRequest(*file, req); err != nil {
		return err
	}
	if req.Site == nil {
		req.Site = &pb.Site{}
	}
	if *id != "" {
		req.Site.Id = *id
	}
	if req.GetSite().GetId() == "" {
		return &fileError{*file, fmt.Errorf("field site.id: required (or give --site)")}
	}
	if *mask != "" {
		req.UpdateMask = &fieldmaskpb.FieldMask{Paths: strings.Split(*mask, ",")}
	}
	// Capability flags replace their fields only (added to the mask; with
	// no mask they are the mask, so the rest of the site stays).
	paths, err := capf.apply(r.fs, req.Site)
	if err != nil {
		return err
	}
	if len(paths) > 0 {
		if req.UpdateMask == nil {
			req.UpdateMask = &fieldmaskpb.FieldMask{}
		}
		req.UpdateMask.Paths = append(req.UpdateMask.Paths, paths...)
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.sites.UpdateSite(ctx, req)
	if err != nil {
		return a.callErr("UpdateSite", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	return printSite(stdout, resp.GetSite())
}

func runSiteDelete(args []string, stdout, stderr io.Writer) error {
	r := newRemote("site delete", stderr)
	id := r.fs.String("site", "", "id of the site; required")
	force := r.fs.Bool("force", false, "delete the site's blocks, plans and progress reports with it")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *id == "" {
		return flagError("site", "required: the site's id")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.sites.DeleteSite(ctx, &pb.DeleteSiteRequest{SiteId: *id, Force: *force})
	if err != nil {
		return a.callErr("DeleteSite", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	fmt.Fprintf(stdout, "deleted site %s\n", *id)
	return nil
}

// printSite shows a site as labelled lines.
func printSite(w io.Writer, s *pb.Site) error {
	tw := newTable(w)
	ns, ew := "N", "E"
	lat, lon := s.GetLatitudeDeg(), s.GetLongitudeDeg()
	if lat < 0 {
		ns, lat = "S", -lat
	}
	if lon < 0 {
		ew, lon = "W", -lon
	}
	fmt.Fprintf(tw, "site\t%s\t%s\n", s.GetId(), s.GetName())
	fmt.Fprintf(tw, "place\t%.4f %s, %.4f %s, %.0f m\t%s\n", lat, ns, lon, ew, s.GetElevationM(), s.GetTimeZone())
	fmt.Fprintf(tw, "air\t%.1f hPa, %.1f C\textinction %.2f mag/airmass, dark zenith %.2f mag/arcsec2\n",
		s.GetPressureHpa(), s.GetTemperatureC(), s.GetExtinctionV(), s.GetZenithSkyBrightnessVMagArcsec2())
	fmt.Fprintf(tw, "solar avoidance\t%.1f deg\t\n", s.GetSolarAvoidanceDeg())
	m := s.GetMount()
	fmt.Fprintf(tw, "mount\t%s\tprimary %.2f deg/s (%.2f deg/s2), secondary %.2f deg/s (%.2f deg/s2), settle %s\n",
		enumName(m.GetKind().String(), "MOUNT_KIND_"), m.GetPrimaryAxis().GetRateDegPerS(),
		m.GetPrimaryAxis().GetAccelerationDegPerS2(), m.GetSecondaryAxis().GetRateDegPerS(),
		m.GetSecondaryAxis().GetAccelerationDegPerS2(), dur(m.GetSettle()))
	if f := m.GetMeridianFlip(); f != nil {
		fmt.Fprintf(tw, "meridian flip\t%s\tbetween hour angles %+.1f and %+.1f deg\n", dur(f.GetDuration()),
			f.GetMinHourAngleDeg(), f.GetMaxHourAngleDeg())
	}
	in := s.GetInstrument()
	fmt.Fprintf(tw, "camera\t%.2f arcsec/px\tfilters %s\n", in.GetPixelScaleArcsec(), strings.Join(in.GetFilters(), " "))
	if in.GetApertureMm() > 0 {
		fmt.Fprintf(tw, "aperture\t%.0f mm\t\n", in.GetApertureMm())
	}
	fmt.Fprintf(tw, "overheads\t\tfilter change %s, readout %s, dither %s, acquisition %s\n", dur(in.GetFilterChange()),
		dur(in.GetReadout()), dur(in.GetDither()), dur(in.GetAcquisition()))
	if f := in.GetFocus(); f != nil {
		var when []string
		if f.GetInterval().AsDuration() > 0 {
			when = append(when, "every "+dur(f.GetInterval()))
		}
		if f.GetOnFilterChange() {
			when = append(when, "after each filter change")
		}
		if len(when) > 0 {
			fmt.Fprintf(tw, "focus\t%s per run\t%s\n", dur(f.GetDuration()), strings.Join(when, ", "))
		}
	}
	var hz []string
	for _, p := range s.GetHorizon() {
		hz = append(hz, fmt.Sprintf("%g/%g", p.GetAzimuthDeg(), p.GetAltitudeDeg()))
	}
	if len(hz) == 0 {
		hz = []string{"flat (0 deg)"}
	}
	fmt.Fprintf(tw, "horizon\t%d points\taz/alt deg: %s\n", len(s.GetHorizon()), strings.Join(hz, " "))
	c := newClock(s.GetTimeZone())
	fmt.Fprintf(tw, "created\t%s\t\n", c.full(s.GetCreateTime()))
	fmt.Fprintf(tw, "updated\t%s\t\n", c.full(s.GetUpdateTime()))
	return tw.Flush()
}

// capabilityFlags are what a site's telescope can do, for network
// planning: the filters in its wheel and its aperture.
type capabilityFlags struct {
	filters  *string
	aperture *float64
}

func addCapabilityFlags(fs *flag.FlagSet) capabilityFlags {
	return capabilityFlags{
		filters:  fs.String("filters", "", "filters in the wheel, comma-separated (replaces instrument.filters)"),
		aperture: fs.Float64("aperture-mm", 0, "clear aperture of the telescope in mm (instrument.aperture_mm; network blocks may need a minimum)"),
	}
}

// apply sets the given flags on s and returns their field paths.
func (c capabilityFlags) apply(fs *flag.FlagSet, s *pb.Site) ([]string, error) {
	set := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	var paths []string
	if set["filters"] || set["aperture-mm"] {
		if s.Instrument == nil {
			s.Instrument = &pb.Instrument{}
		}
	}
	if set["filters"] {
		s.Instrument.Filters = splitList(*c.filters)
		paths = append(paths, "instrument.filters")
	}
	if set["aperture-mm"] {
		if *c.aperture < 0 || *c.aperture > 20000 {
			return nil, flagError("aperture-mm", "must be within 0..20000 mm, got %v", *c.aperture)
		}
		s.Instrument.ApertureMm = *c.aperture
		paths = append(paths, "instrument.aperture_mm")
	}
	return paths, nil
}
