package main

// `nightloom program ...`: the programs of a shared telescope (whose time a
// block spends), their allocations, and the time used and planned.

import (
	"context"
	"flag"
	"fmt"
	"io"
	"strings"
	"time"

	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/fieldmaskpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

func programCommands() []command {
	return []command{
		{name: "create", summary: "store a program: --name, --allocation per period, --period month|fixed", run: runProgramCreate},
		{name: "show", summary: "show one program with its use in the current period", run: runProgramShow},
		{name: "list", summary: "list the programs with allocation, used and planned time", run: runProgramList},
		{name: "update", summary: "change a program's allocation, period, site or description", run: runProgramUpdate},
		{name: "delete", summary: "remove a program (refused while a queued block spends it)", run: runProgramDelete},
		{name: "usage", summary: "allocation, used and planned time per program for the period of an instant", run: runProgramUsage},
	}
}

// programFlags are the fields of a program that create and update take.
type programFlags struct {
	name, period, from, to, site, description *string
	allocation                                *time.Duration
}

func addProgramFlags(fs *flag.FlagSet) programFlags {
	return programFlags{
		name:        fs.String("name", "", "the program's name: letters, digits, '.', '_', '-'; required"),
		allocation:  fs.Duration("allocation", 0, "time the program may spend per period (exposure plus overheads), e.g. 12h"),
		period:      fs.String("period", "", "how the allocation renews: month (each UTC calendar month) or fixed (--from..--to once)"),
		from:        fs.String("from", "", "start of a fixed period: YYYY-MM-DD (00:00 UTC) or RFC 3339"),
		to:          fs.String("to", "", "end of a fixed period (excluded): YYYY-MM-DD (00:00 UTC) or RFC 3339"),
		site:        fs.String("site", "", "hold the program to one site's blocks (id); empty: every site"),
		description: fs.String("description", "", "free text for people (owner, purpose)"),
	}
}

// parseInstant reads a date (midnight UTC) or an RFC 3339 instant.
func parseDayOrInstant(flagName, s string) (time.Time, error) {
	if t, err := time.Parse("2006-01-02", s); err == nil {
		return t, nil
	}
	t, err := time.Parse(time.RFC3339, s)
	if err != nil {
		return time.Time{}, flagError(flagName, "%q is neither YYYY-MM-DD nor RFC 3339", s)
	}
	return t, nil
}

// fill sets the fields of p given on the command line (set names the flags
// given) and returns their field-mask paths.
func (f programFlags) fill(p *pb.Program, set map[string]bool) ([]string, error) {
	var paths []string
	if set["allocation"] {
		if *f.allocation <= 0 {
			return nil, flagError("allocation", "must be above 0, e.g. 12h")
		}
		p.Allocation = durationpb.New(*f.allocation)
		paths = append(paths, "allocation")
	}
	if set["period"] {
		switch *f.period {
		case "month":
			p.Period = pb.PeriodKind_PERIOD_KIND_CALENDAR_MONTH
		case "fixed":
			p.Period = pb.PeriodKind_PERIOD_KIND_FIXED
		default:
			return nil, flagError("period", "%q: want month or fixed", *f.period)
		}
		paths = append(paths, "period")
	}
	if set["from"] != set["to"] {
		return nil, flagError("from", "give --from and --to together")
	}
	if set["from"] {
		a, err := parseDayOrInstant("from", *f.from)
		if err != nil {
			return nil, err
		}
		b, err := parseDayOrInstant("to", *f.to)
		if err != nil {
			return nil, err
		}
		if !b.After(a) {
			return nil, flagError("to", "must be after --from")
		}
		p.FixedPeriod = &pb.TimeInterval{Start: timestamppb.New(a), End: timestamppb.New(b)}
		paths = append(paths, "fixed_period")
	}
	if set["site"] {
		p.SiteId = *f.site
		paths = append(paths, "site_id")
	}
	if set["description"] {
		p.Description = *f.description
		paths = append(paths, "description")
	}
	return paths, nil
}

func flagsSet(fs *flag.FlagSet) map[string]bool {
	set := map[string]bool{}
	fs.Visit(func(f *flag.Flag) { set[f.Name] = true })
	return set
}

func runProgramCreate(args []string, stdout, stderr io.Writer) error {
	r := newRemote("program create", stderr)
	f := addProgramFlags(r.fs)
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	set := flagsSet(r.fs)
	switch {
	case *f.name == "":
		return flagError("name", "required: the program's name")
	case !set["allocation"]:
		return flagError("allocation", "required: time per period, e.g. 12h")
	case !set["period"]:
		return flagError("period", "required: month or fixed")
	}
	p := &pb.Program{Name: *f.name}
	if _, err := f.fill(p, set); err != nil {
		return err
	}
	if p.GetPeriod() == pb.PeriodKind_PERIOD_KIND_FIXED && p.GetFixedPeriod() == nil {
		return flagError("from", "a fixed period needs --from and --to")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.programs.CreateProgram(ctx, &pb.CreateProgramRequest{Program: p})
	if err != nil {
		return a.callErr("CreateProgram", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	return printPrograms(stdout, []*pb.Program{resp.GetProgram()}, nil)
}

func runProgramShow(args []string, stdout, stderr io.Writer) error {
	r := newRemote("program show", stderr)
	name := r.fs.String("name", "", "the program's name; required")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *name == "" {
		return flagError("name", "required: the program's name")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.programs.GetProgram(ctx, &pb.GetProgramRequest{Name: *name})
	if err != nil {
		return a.callErr("GetProgram", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	usage, err := a.programs.GetProgramUsage(ctx, &pb.GetProgramUsageRequest{})
	if err != nil {
		return a.callErr("GetProgramUsage", err)
	}
	return printPrograms(stdout, []*pb.Program{resp.GetProgram()}, usage.GetUsage())
}

func runProgramList(args []string, stdout, stderr io.Writer) error {
	r := newRemote("program list", stderr)
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	programs, err := allPages(a, "ListPrograms", func(ctx context.Context, token string) ([]*pb.Program, string, error) {
		resp, err := a.programs.ListPrograms(ctx, &pb.ListProgramsRequest{PageToken: token})
		return resp.GetPrograms(), resp.GetNextPageToken(), err
	})
	if err != nil {
		return err
	}
	if r.conn.json {
		return writeJSON(stdout, &pb.ListProgramsResponse{Programs: programs})
	}
	ctx, cancel := a.ctx()
	defer cancel()
	usage, err := a.programs.GetProgramUsage(ctx, &pb.GetProgramUsageRequest{})
	if err != nil {
		return a.callErr("GetProgramUsage", err)
	}
	return printPrograms(stdout, programs, usage.GetUsage())
}

func runProgramUpdate(args []string, stdout, stderr io.Writer) error {
	r := newRemote("program update", stderr)
	f := addProgramFlags(r.fs)
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *f.name == "" {
		return flagError("name", "required: the program's name")
	}
	p := &pb.Program{Name: *f.name}
	paths, err := f.fill(p, flagsSet(r.fs))
	if err != nil {
		return err
	}
	if len(paths) == 0 {
		return flagError("allocation", "nothing to change: give --allocation, --period, --from/--to, --site or --description")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.programs.UpdateProgram(ctx, &pb.UpdateProgramRequest{Program: p, UpdateMask: &fieldmaskpb.FieldMask{Paths: paths}})
	if err != nil {
		return a.callErr("UpdateProgram", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	return printPrograms(stdout, []*pb.Program{resp.GetProgram()}, nil)
}

func runProgramDelete(args []string, stdout, stderr io.Writer) error {
	r := newRemote("program delete", stderr)
	name := r.fs.String("name", "", "the program's name; required")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *name == "" {
		return flagError("name", "required: the program's name")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.programs.DeleteProgram(ctx, &pb.DeleteProgramRequest{Name: *name})
	if err != nil {
		return a.callErr("DeleteProgram", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	fmt.Fprintf(stdout, "deleted program %s\n", *name)
	return nil
}

func runProgramUsage(args []string, stdout, stderr io.Writer) error {
	r := newRemote("program usage", stderr)
	at := r.fs.String("at", "", "the instant whose period is shown: YYYY-MM-DD or RFC 3339 (default now)")
	site := r.fs.String("site", "", "only programs open to this site, and only its plans in planned")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	req := &pb.GetProgramUsageRequest{SiteId: *site}
	if *at != "" {
		t, err := parseDayOrInstant("at", *at)
		if err != nil {
			return err
		}
		req.At = timestamppb.New(t)
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.programs.GetProgramUsage(ctx, req)
	if err != nil {
		return a.callErr("GetProgramUsage", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	var programs []*pb.Program
	for _, u := range resp.GetUsage() {
		programs = append(programs, u.GetProgram())
	}
	return printPrograms(stdout, programs, resp.GetUsage())
}

// periodText describes how a program's allocation renews.
func periodText(p *pb.Program) string {
	switch p.GetPeriod() {
	case pb.PeriodKind_PERIOD_KIND_CALENDAR_MONTH:
		return "month"
	case pb.PeriodKind_PERIOD_KIND_FIXED:
		iv := p.GetFixedPeriod()
		return iv.GetStart().AsTime().Format("2006-01-02") + ".." + iv.GetEnd().AsTime().Format("2006-01-02")
	}
	return "-"
}

// printPrograms prints programs as a table; with usage (one entry per
// program, matched by name) it adds the period's used and planned time and
// what is left.
func printPrograms(w io.Writer, programs []*pb.Program, usage []*pb.ProgramUsage) error {
	byName := map[string]*pb.ProgramUsage{}
	for _, u := range usage {
		byName[u.GetProgram().GetName()] = u
	}
	tw := newTable(w)
	head := "name\tallocation\tperiod\tsite"
	if usage != nil {
		head += "\tcurrent period\tused\tplanned\tleft"
	}
	fmt.Fprintln(tw, head+"\tdescription")
	for _, p := range programs {
		site := p.GetSiteId()
		if site == "" {
			site = "any"
		}
		line := fmt.Sprintf("%s\t%s\t%s\t%s", p.GetName(), dur(p.GetAllocation()), periodText(p), site)
		if usage != nil {
			u := byName[p.GetName()]
			cur := "none"
			if iv := u.GetPeriod(); iv != nil {
				cur = iv.GetStart().AsTime().Format("2006-01-02") + ".." + iv.GetEnd().AsTime().Format("2006-01-02")
			}
			left := u.GetAllocation().AsDuration() - u.GetUsed().AsDuration() - u.GetPlanned().AsDuration()
			leftText := fmtDuration(max(left, 0))
			if left < 0 {
				leftText = "over by " + fmtDuration(-left)
			}
			line += fmt.Sprintf("\t%s\t%s\t%s\t%s", cur, dur(u.GetUsed()), dur(u.GetPlanned()), leftText)
		}
		fmt.Fprintln(tw, line+"\t"+strings.ReplaceAll(p.GetDescription(), "\t", " "))
	}
	if len(programs) == 0 {
		fmt.Fprintln(tw, "(no programs)")
	}
	return tw.Flush()
}

// printCharges lists the time a plan charges per program (nothing when no
// block of the plan has a program).
func printCharges(w io.Writer, cs []*pb.ProgramCharge) error {
	named := false
	for _, c := range cs {
		named = named || c.GetProgram() != ""
	}
	if !named {
		return nil
	}
	fmt.Fprintf(w, "\ncharged per program (%d):\n", len(cs))
	tw := newTable(w)
	fmt.Fprintln(tw, "program\tallocation\tused before\tfair share\texposure\toverheads\tcharged")
	for _, c := range cs {
		name := c.GetProgram()
		if name == "" {
			name = "(none)"
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%.2f\t%s\t%s\t%s\n", name, dur(c.GetAllocation()), dur(c.GetUsed()), c.GetFairShare(),
			dur(c.GetExposure()), dur(c.GetOverheads()), fmtDuration(c.GetExposure().AsDuration()+c.GetOverheads().AsDuration()))
	}
	return tw.Flush()
}
