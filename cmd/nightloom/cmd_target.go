package main

// `nightloom target ...`: fixed (ICRS) and orbit targets.

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"

	"google.golang.org/protobuf/types/known/fieldmaskpb"

	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

func targetCommands() []command {
	return []command{
		{name: "create", summary: "store targets from CreateTargetRequest files, or a fixed one from --name/--ra/--dec", run: runTargetCreate},
		{name: "get", summary: "show one target", run: runTargetGet},
		{name: "list", summary: "list the targets", run: runTargetList},
		{name: "update", summary: "change a target from an UpdateTargetRequest file", run: runTargetUpdate},
		{name: "delete", summary: "remove a target", run: runTargetDelete},
		{name: "import", summary: "store orbit targets from a file of one-line orbital elements, all or nothing", run: runTargetImport},
	}
}

func runTargetCreate(args []string, stdout, stderr io.Writer) error {
	r := newRemote("target create", stderr)
	var files multiFlag
	r.fs.Var(&files, "file", "CreateTargetRequest as protobuf JSON (repeatable; more files may follow the flags); with --json one CreateTargetResponse is printed per file")
	name := r.fs.String("name", "", "name of a fixed target: alone, a catalogue name (M 31, NGC 224, Vega) resolved by the daemon; with --ra/--dec, any name")
	ra := r.fs.String("ra", "", "ICRS right ascension of a fixed target, deg [0, 360)")
	dec := r.fs.String("dec", "", "ICRS declination of a fixed target, deg [-90, 90]")
	if err := parseFlagsFiles(r.fs, args, &files); err != nil {
		return err
	}
	var reqs []*pb.CreateTargetRequest
	var from []string
	byName := *name != "" && *ra == "" && *dec == "" // resolved in the catalogue below
	if (*name != "" || *ra != "" || *dec != "") && !byName {
		if len(files) > 0 {
			return flagError("file", "give either files or --name/--ra/--dec, not both")
		}
		if *name == "" {
			return flagError("name", "required with --ra/--dec")
		}
		a, err := strconv.ParseFloat(*ra, 64)
		if err != nil || !(a >= 0 && a < 360) {
			return flagError("ra", "want degrees in [0, 360), got %q", *ra)
		}
		d, err := strconv.ParseFloat(*dec, 64)
		if err != nil || !(d >= -90 && d <= 90) {
			return flagError("dec", "want degrees in [-90, 90], got %q", *dec)
		}
		reqs = append(reqs, &pb.CreateTargetRequest{Target: &pb.Target{Name: *name,
			Position: &pb.Target_Fixed{Fixed: &pb.FixedPosition{RaDeg: a, DecDeg: d}}}})
		from = append(from, "flags")
	}
	for _, f := range files {
		req := &pb.CreateTargetRequest{}
		if err := readRequest(f, req); err != nil {
			return err
		}
		reqs = append(reqs, req)
		from = append(from, f)
	}
	if byName && len(files) > 0 {
		return flagError("file", "give either files or --name, not both")
	}
	if len(reqs) == 0 && !byName {
		return flagError("file", "required: CreateTargetRequest JSON files (see testdata/demo/targets/), --name (a catalogue name) or --name/--ra/--dec")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	if byName {
		req, err := lookupForCreate(a, *name, stderr)
		if err != nil {
			return err
		}
		reqs, from = append(reqs, req), append(from, "--name")
	}
	var created []*pb.Target
	p := startProgress(stderr, "creating targets")
	for i, req := range reqs {
		p.Set("%d/%d", i, len(reqs))
		ctx, cancel := a.ctx()
		resp, err := a.targets.CreateTarget(ctx, req)
		cancel()
		if err != nil {
			p.Stop()
			if len(reqs) > 1 {
				return fmt.Errorf("%s: %w", from[i], a.callErr("CreateTarget", err))
			}
			return a.callErr("CreateTarget", err)
		}
		if r.conn.json {
			if err := writeJSON(stdout, resp); err != nil {
				p.Stop()
				return err
			}
		}
		created = append(created, resp.GetTarget())
	}
	p.Stop()
	if r.conn.json {
		return nil
	}
	return printTargets(stdout, created)
}

// parseFlagsFiles parses flags and takes the positional arguments as more
// files, so that `target create --json targets/*.json` works.
func parseFlagsFiles(fs *flag.FlagSet, args []string, files *multiFlag) error {
	rest := args
	for {
		if err := parseFlagsOnly(fs, rest); err != nil {
			return err
		}
		pos := fs.Args()
		if len(pos) == 0 {
			return nil
		}
		*files = append(*files, pos[0])
		rest = pos[1:]
	}
}

func runTargetGet(args []string, stdout, stderr io.Writer) error {
	r := newRemote("target get", stderr)
	id := r.fs.String("target", "", "id of the target; required")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *id == "" {
		return flagError("target", "required: the target's id")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.targets.GetTarget(ctx, &pb.GetTargetRequest{TargetId: *id})
	if err != nil {
		return a.callErr("GetTarget", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	return printTargets(stdout, []*pb.Target{resp.GetTarget()})
}

func runTargetList(args []string, stdout, stderr io.Writer) error {
	r := newRemote("target list", stderr)
	pageSize := r.fs.Int("page-size", 0, "targets per call (0: the server's default); every page is fetched")
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
	ts, err := a.allTargets(int32(*pageSize))
	if err != nil {
		return err
	}
	if r.conn.json {
		return writeJSON(stdout, &pb.ListTargetsResponse{Targets: ts})
	}
	return printTargets(stdout, ts)
}

func (a *api) allTargets(pageSize int32) ([]*pb.Target, error) {
	return allPages(a, "ListTargets", func(ctx context.Context, token string) ([]*pb.Target, string, error) {
		resp, err := a.targets.ListTargets(ctx, &pb.ListTargetsRequest{PageSize: pageSize, PageToken: token})
		return resp.GetTargets(), resp.GetNextPageToken(), err
	})
}

func runTargetUpdate(args []string, stdout, stderr io.Writer) error {
	r := newRemote("target update", stderr)
	file := r.fs.String("file", "", "UpdateTargetRequest as protobuf JSON (- for stdin); required")
	id := r.fs.String("target", "", "id of the target, overriding target.id in the file")
	mask := r.fs.String("mask", "", "comma-separated field paths to replace (e.g. name,orbit), overriding updateMask in the file")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *file == "" {
		return flagError("file", "required: an UpdateTargetRequest JSON file")
	}
	req := &pb.UpdateTargetRequest{}
	if err := readRequest(*file, req); err != nil {
		return err
	}
	if req.Target == nil {
		req.Target = &pb.Target{}
	}
	if *id != "" {
		req.Target.Id = *id
	}
	if req.GetTarget().GetId() == "" {
		return &fileError{*file, fmt.Errorf("field target.id: required (or give --target)")}
	}
	if *mask != "" {
		req.UpdateMask = &fieldmaskpb.FieldMask{Paths: strings.Split(*mask, ",")}
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.targets.UpdateTarget(ctx, req)
	if err != nil {
		return a.callErr("UpdateTarget", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	return printTargets(stdout, []*pb.Target{resp.GetTarget()})
}

func runTargetDelete(args []string, stdout, stderr io.Writer) error {
	r := newRemote("target delete", stderr)
	id := r.fs.String("target", "", "id of the target; required")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *id == "" {
		return flagError("target", "required: the target's id")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.targets.DeleteTarget(ctx, &pb.DeleteTargetRequest{TargetId: *id})
	if err != nil {
		return a.callErr("DeleteTarget", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	fmt.Fprintf(stdout, "deleted target %s\n", *id)
	return nil
}

// hms formats degrees of right ascension as hours, minutes and seconds.
func hms(deg float64) string {
	h := math.Mod(deg/15+24, 24)
	s := math.Round(h*36000) / 10 // tenths of a second
	hh := int(s / 3600)
	mm := int(math.Mod(s, 3600) / 60)
	ss := math.Mod(s, 60)
	return fmt.Sprintf("%02dh%02dm%04.1fs", hh%24, mm, ss)
}

// dms formats degrees of declination as signed degrees, arcminutes and
// arcseconds.
func dms(deg float64) string {
	sign := "+"
	if deg < 0 {
		sign, deg = "-", -deg
	}
	s := math.Round(deg * 3600)
	return fmt.Sprintf("%s%02d°%02d'%02d\"", sign, int(s/3600), int(math.Mod(s, 3600)/60), int(math.Mod(s, 60)))
}

// describePosition is one line about where a target is.
func describePosition(t *pb.Target) (kind, where string) {
	switch p := t.GetPosition().(type) {
	case *pb.Target_Fixed:
		f := p.Fixed
		where = fmt.Sprintf("RA %s  Dec %s  (%.4f, %+.4f deg ICRS)", hms(f.GetRaDeg()), dms(f.GetDecDeg()), f.GetRaDeg(), f.GetDecDeg())
		if pm := f.GetProperMotion(); pm != nil {
			where += fmt.Sprintf(", pm %.1f/%.1f mas/yr at %.1f", pm.GetRaCosDecMasPerYr(), pm.GetDecMasPerYr(), pm.GetEpochJulianYear())
		}
		if id := f.GetCatalogueId(); id != "" {
			where += ", catalogue " + id
		}
		return "fixed", where
	case *pb.Target_Orbit:
		o := p.Orbit
		shape := "ellipse"
		switch e := o.GetEccentricity(); {
		case e == 1:
			shape = "parabola"
		case e > 1:
			shape = "hyperbola"
		}
		sense := ""
		if o.GetInclinationDeg() > 90 {
			sense = ", retrograde"
		}
		where = fmt.Sprintf("q %.4f AU  e %.5f  i %.2f  node %.2f  peri %.2f  T %s TT (%s%s)", o.GetPerihelionDistanceAu(),
			o.GetEccentricity(), o.GetInclinationDeg(), o.GetAscendingNodeDeg(), o.GetPerihelionArgumentDeg(),
			o.GetPerihelionTimeTt().AsTime().UTC().Format("2006-01-02 15:04"), shape, sense)
		switch m := o.GetMagnitudeLaw().(type) {
		case *pb.OrbitElements_Comet:
			where += fmt.Sprintf("  M1 %.1f K1 %.1f", m.Comet.GetM1(), m.Comet.GetK1())
		case *pb.OrbitElements_Asteroid:
			where += fmt.Sprintf("  H %.2f G %.2f", m.Asteroid.GetH(), m.Asteroid.GetG())
		}
		return "orbit", where
	case *pb.Target_Body:
		return "body", p.Body.GetName()
	}
	return "-", "-"
}

func printTargets(w io.Writer, ts []*pb.Target) error {
	tw := newTable(w)
	fmt.Fprintln(tw, "id\tname\tkind\tposition")
	for _, t := range ts {
		kind, where := describePosition(t)
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\n", t.GetId(), t.GetName(), kind, where)
	}
	if len(ts) == 0 {
		fmt.Fprintln(tw, "(no targets)")
	}
	return tw.Flush()
}

// parseFlagsOnly parses flags, leaving positional arguments in fs.Args().
func parseFlagsOnly(fs *flag.FlagSet, args []string) error {
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return err
		}
		return &usageError{err.Error()}
	}
	return nil
}
