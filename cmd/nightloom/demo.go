package main

// `nightloom demo`: the whole job in one command. It starts the real daemon
// in-process on a free loopback port with a fresh SQLite file in a temporary
// folder, loads the invented scenario (testdata/demo, embedded here as
// demodata/) through the gRPC API exactly as the client commands do, plans
// one night, prints the plan and its unplaced blocks, draws the chart, then
// simulates a 40-minute closure in the middle of the night: progress
// reports for what ran before it and a Replan from the closure.

import (
	"embed"
	"fmt"
	"io"
	"io/fs"
	"os"
	"path"
	"path/filepath"
	"sort"
	"strings"
	"time"

	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// demoData is a copy of testdata/demo (a package cannot embed files
// outside its own directory, and the go tool ignores packages under
// testdata). TestDemoDataMatchesTestdata fails when the two differ; run
// `go test ./cmd/nightloom -run TestDemoData -update-demodata` after editing
// testdata/demo.
//
//go:embed demodata
var demoData embed.FS

// demoClosure is the length of the simulated closure.
const demoClosure = 40 * time.Minute

func runDemo(args []string, stdout, stderr io.Writer) error {
	fset := newFlagSet("demo", stderr)
	out := fset.String("out", "nightloom-demo", "folder for the charts (created if missing)")
	verbose := fset.Bool("verbose", false, "show the daemon's log on stderr")
	budget := fset.Duration("budget", time.Second, "solver time budget of the plan and of the replan")
	if err := parseFlags(fset, args); err != nil {
		return err
	}
	if *budget <= 0 || *budget > 60*time.Second {
		return flagError("budget", "must be within (0, 60s]")
	}
	return demo(stdout, stderr, *out, *verbose, *budget)
}

func demo(stdout, stderr io.Writer, outDir string, verbose bool, budget time.Duration) error {
	began := time.Now()
	if err := os.MkdirAll(outDir, 0o755); err != nil {
		return flagError("out", "%v", err)
	}
	tmp, err := os.MkdirTemp("", "nightloom-demo-")
	if err != nil {
		return err
	}
	defer os.RemoveAll(tmp)
	logw := io.Discard
	if verbose {
		logw = stderr
	}
	d, err := startDemoDaemon(filepath.Join(tmp, "nightloom.db"), logw)
	if err != nil {
		return fmt.Errorf("starting the daemon: %w", err)
	}
	defer d.stop()
	conn := &connFlags{server: d.addr, token: d.token, timeout: 2 * time.Minute}
	a, err := conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	fmt.Fprintf(stdout, "nightloom demo: daemon on %s, fresh database in %s, admin token made in-process\n\n", d.addr, tmp)

	// 1. The scenario, through the API.
	sc, err := loadDemoScenario(a, stderr)
	if err != nil {
		return err
	}
	site := sc.site
	c := newClock(site.GetTimeZone())
	fmt.Fprintf(stdout, "1. Scenario (invented; files in testdata/demo)\n")
	fmt.Fprintf(stdout, "   site %q: %.2f N %.2f E, %.0f m, %s, %s mount\n", site.GetName(), site.GetLatitudeDeg(),
		site.GetLongitudeDeg(), site.GetElevationM(), site.GetTimeZone(), enumName(site.GetMount().GetKind().String(), "MOUNT_KIND_"))
	fmt.Fprintf(stdout, "   horizon profile: trees to the east (up to 8 deg), a building to the south (16 deg)\n")
	fmt.Fprintf(stdout, "   %d targets and %d blocks queued:\n", len(sc.targets), len(sc.blocks))
	if err := printScenario(stdout, sc); err != nil {
		return err
	}
	fmt.Fprintf(stdout, "   targets created by catalogue name (testdata/demo/targets-by-name.txt, as `target create --name`):\n")
	for _, s := range sc.byName {
		fmt.Fprintf(stdout, "     %s\n", s)
	}

	// 2. The plan for one night.
	req := &pb.MakePlanRequest{}
	if err := readDemoRequest("plan.json", req); err != nil {
		return err
	}
	req.SiteId = site.GetId()
	req.TimeBudget = durationpb.New(budget)
	ctx, cancel := a.ctx()
	nr, err := a.sky.Night(ctx, &pb.NightRequest{SiteId: site.GetId(), Date: req.GetNight()})
	cancel()
	if err != nil {
		return a.callErr("Night", err)
	}
	fmt.Fprintf(stdout, "\n2. Plan for the night of %s\n", dateString(req.GetNight()))
	fmt.Fprintf(stdout, "   sunset %s, dark %s-%s, civil dawn %s, sunrise %s; Moon %.0f %% lit, sets %s\n\n",
		c.hm(nr.GetSunset()), c.hm(nr.GetAstronomicalDusk()), c.hm(nr.GetAstronomicalDawn()), c.hm(nr.GetCivilDawn()),
		c.hm(nr.GetSunrise()), 100*nr.GetMoonIllumination(), c.hm(nr.GetMoonset()))
	ctx, cancel = a.ctx()
	mr, err := a.plans.MakePlan(ctx, req)
	cancel()
	if err != nil {
		return a.callErr("MakePlan", err)
	}
	if len(mr.GetPlans()) != 1 {
		return fmt.Errorf("MakePlan returned %d plans, want 1", len(mr.GetPlans()))
	}
	plan := mr.GetPlans()[0]
	pc, err := a.loadPlanContext(site.GetId())
	if err != nil {
		return err
	}
	if err := printPlan(stdout, plan, pc, nil); err != nil {
		return err
	}
	if as := plan.GetAssignments(); len(as) > 0 && nr.GetCivilDawn() != nil {
		// The night's last run (the comet, in morning twilight) ends before
		// civil dawn to the second: constraints hold over whole runs.
		last := as[len(as)-1]
		fmt.Fprintf(stdout, "last run (%s) ends %s UTC; civil dawn %s UTC\n", last.GetTargetName(),
			last.GetEnd().AsTime().UTC().Format("15:04:05"), nr.GetCivilDawn().AsTime().UTC().Format("15:04:05"))
	}

	// 3. The chart.
	nightPNG := filepath.Join(outDir, "night.png")
	spec, err := a.planChartSpec(plan.GetId(), 2*time.Minute, 30*time.Minute)
	if err != nil {
		return err
	}
	if err := writeChart(spec, nightPNG); err != nil {
		return err
	}
	fmt.Fprintf(stdout, "\n3. Chart of the plan: %s\n", nightPNG)

	// 4. The interruption: a closure in the middle of the night, and the
	// progress reports of what ran before it.
	iv := plan.GetInterval()
	mid := iv.GetStart().AsTime().Add(iv.GetEnd().AsTime().Sub(iv.GetStart().AsTime()) / 2).Truncate(10 * time.Minute)
	closure := &pb.Closure{Interval: &pb.TimeInterval{Start: timestamppb.New(mid), End: timestamppb.New(mid.Add(demoClosure))},
		Reason: "clouds"}
	fmt.Fprintf(stdout, "\n4. Interruption: clouds close the roof %s-%s %s (%s-%s UTC)\n", mid.In(c.loc).Format("15:04"),
		mid.Add(demoClosure).In(c.loc).Format("15:04"), mid.In(c.loc).Format("MST"), mid.UTC().Format("15:04"),
		mid.Add(demoClosure).UTC().Format("15:04"))
	d.clock.Set(mid) // the simulated night: the reports come as the roof closes
	done, cut, framesDone, err := reportUntil(a, plan, mid)
	if err != nil {
		return err
	}
	fmt.Fprintf(stdout, "   progress reports: %d runs done before the closure (%d frames)", done, framesDone)
	if cut != "" {
		fmt.Fprintf(stdout, ", %s", cut)
	}
	fmt.Fprintln(stdout)

	// 5. Replan the rest of the night from the closure.
	rreq := &pb.ReplanRequest{}
	if err := readDemoRequest("replan.json", rreq); err != nil {
		return err
	}
	rreq.SiteId, rreq.PlanId = site.GetId(), plan.GetId()
	rreq.From = timestamppb.New(mid)
	rreq.Closures = []*pb.Closure{closure}
	rreq.TimeBudget = durationpb.New(budget)
	ctx, cancel = a.ctx()
	rr, err := a.plans.Replan(ctx, rreq)
	cancel()
	if err != nil {
		return a.callErr("Replan", err)
	}
	fmt.Fprintf(stdout, "\n5. Replanned from %s: of the old plan's assignments after that, %d kept unchanged and %d changed\n",
		mid.In(c.loc).Format("15:04 MST"), rr.GetAssignmentsKept(), rr.GetAssignmentsChanged())
	if pc, err = a.loadPlanContext(site.GetId()); err != nil {
		return err
	}
	if err := printRunChanges(stdout, pc.clock, rr); err != nil {
		return err
	}
	fmt.Fprintln(stdout)
	if err := printPlan(stdout, rr.GetPlan(), pc, &mid); err != nil {
		return err
	}
	replanPNG := filepath.Join(outDir, "replan.png")
	if spec, err = a.planChartSpec(rr.GetPlan().GetId(), 2*time.Minute, 30*time.Minute); err != nil {
		return err
	}
	if err := writeChart(spec, replanPNG); err != nil {
		return err
	}
	fmt.Fprintf(stdout, "\nChart of the replanned night: %s\n", replanPNG)

	// 6. A network: a partner on another continent, one queue.
	if err := demoNetwork(a, stdout, stderr, outDir, site, budget); err != nil {
		return err
	}
	fmt.Fprintf(stdout, "\nDemo finished in %.1f s.\n", time.Since(began).Seconds())
	return nil
}

// demoNetwork is the demo's last step: the invented Tecolote Mesa in
// Arizona joins the observatory in the invented network "Two Owls", a
// dense light curve of the eclipsing binary NLV 59 is queued for the
// network, and the next night is planned jointly: the star is followed
// from France in the evening and from Arizona after the French dawn.
func demoNetwork(a *api, stdout, stderr io.Writer, outDir string, home *pb.Site, budget time.Duration) error {
	sreq := &pb.CreateSiteRequest{}
	if err := readDemoRequest("site-west.json", sreq); err != nil {
		return err
	}
	ctx, cancel := a.ctx()
	sr, err := a.sites.CreateSite(ctx, sreq)
	cancel()
	if err != nil {
		return fmt.Errorf("testdata/demo/site-west.json: %w", a.callErr("CreateSite", err))
	}
	west := sr.GetSite()
	nreq := &pb.CreateNetworkRequest{}
	if err := readDemoRequest("network.json", nreq); err != nil {
		return err
	}
	nreq.Network.SiteIds = []string{home.GetId(), west.GetId()} // the file's SITE_ID, SITE_ID_WEST
	ctx, cancel = a.ctx()
	nr, err := a.networks().CreateNetwork(ctx, nreq)
	cancel()
	if err != nil {
		return fmt.Errorf("testdata/demo/network.json: %w", a.callErr("CreateNetwork", err))
	}
	network := nr.GetNetwork()
	breq := &pb.QueueBlocksRequest{}
	if err := readDemoRequest("network-blocks.json", breq); err != nil {
		return err
	}
	for _, b := range breq.GetBlocks() {
		b.NetworkId = network.GetId() // the file's NETWORK_ID
	}
	qr, err := a.queueBlocks("testdata/demo/network-blocks.json", breq, "", stderr)
	if err != nil {
		return err
	}
	// The observatory's own two-hourly light curve of the star gives way
	// to the network's.
	withdrawn := 0
	for _, b := range qr.GetBlocks() {
		ctx, cancel := a.ctx()
		wr, err := a.queue.WithdrawBlocks(ctx, &pb.WithdrawBlocksRequest{SiteId: home.GetId(), TargetId: b.GetTargetId(),
			Reason: "followed by the network from now on"})
		cancel()
		if err != nil {
			return a.callErr("WithdrawBlocks", err)
		}
		withdrawn += len(wr.GetBlocks())
	}
	fmt.Fprintf(stdout, "\n6. A network: %q joins the observatory in %q\n", west.GetName(), network.GetName())
	fmt.Fprintf(stdout, "   %s: %.2f N %.2f W, %.0f m, %s, %s mount, %.0f mm, filters %s\n", west.GetName(), west.GetLatitudeDeg(),
		-west.GetLongitudeDeg(), west.GetElevationM(), west.GetTimeZone(), enumName(west.GetMount().GetKind().String(), "MOUNT_KIND_"),
		west.GetInstrument().GetApertureMm(), strings.Join(west.GetInstrument().GetFilters(), " "))
	for _, b := range qr.GetBlocks() {
		fmt.Fprintf(stdout, "   queued for the network: %s %dx%s in runs of %d every %s (%s)\n", b.GetFilter(), b.GetFramesWanted(),
			dur(b.GetExposure()), b.GetMaxRunFrames(), dur(b.GetCadence().GetInterval()), b.GetLabel())
	}
	fmt.Fprintf(stdout, "   (the observatory's own block of the star withdrawn: %d)\n", withdrawn)
	fmt.Fprintf(stdout, "   Each block of the network runs once, at the member where it is worth most; the observatory's own\n")
	fmt.Fprintf(stdout, "   blocks stay at home. The eclipsing binary is followed across both sites: the French night ends\n")
	fmt.Fprintf(stdout, "   seven hours before the Arizona one, and the light curve hands over.\n\n")
	preq := &pb.MakeNetworkPlanRequest{}
	if err := readDemoRequest("network-plan.json", preq); err != nil {
		return err
	}
	preq.NetworkId = network.GetId()
	preq.TimeBudget = durationpb.New(budget)
	ctx, cancel = a.ctx()
	pr, err := a.networks().MakeNetworkPlan(ctx, preq)
	cancel()
	if err != nil {
		return fmt.Errorf("testdata/demo/network-plan.json: %w", a.callErr("MakeNetworkPlan", err))
	}
	for _, nn := range pr.GetNights() {
		var w strings.Builder
		if err := a.printNetworkNight(&w, network, nn); err != nil {
			return err
		}
		for _, line := range strings.Split(strings.TrimRight(w.String(), "\n"), "\n") {
			fmt.Fprintln(stdout, "   "+line)
		}
		fmt.Fprintln(stdout)
		siteNames := map[string]string{home.GetId(): home.GetName(), west.GetId(): west.GetName()}
		for _, l := range handovers(nn, qr.GetBlocks(), siteNames) {
			fmt.Fprintln(stdout, "   "+l)
		}
		for _, p := range nn.GetPlans() {
			spec, err := a.planChartSpec(p.GetId(), 2*time.Minute, 30*time.Minute)
			if err != nil {
				return err
			}
			name := "network-west.png"
			if p.GetSiteId() == home.GetId() {
				name = "network-home.png"
			}
			path := filepath.Join(outDir, name)
			if err := writeChart(spec, path); err != nil {
				return err
			}
			fmt.Fprintf(stdout, "   chart of the part of %s: %s\n", siteNames[p.GetSiteId()], path)
		}
	}
	return nil
}

// handovers says, for each network block, where its runs go in UTC order
// and when they pass from one site to the other.
func handovers(nn *pb.NetworkNight, blocks []*pb.Block, names map[string]string) []string {
	var out []string
	for _, b := range blocks {
		type run struct {
			site       string
			start, end time.Time
		}
		var runs []run
		for _, p := range nn.GetPlans() {
			for _, x := range p.GetAssignments() {
				if x.GetBlockId() == b.GetId() {
					runs = append(runs, run{p.GetSiteId(), x.GetStart().AsTime(), x.GetEnd().AsTime()})
				}
			}
		}
		sort.Slice(runs, func(i, j int) bool { return runs[i].start.Before(runs[j].start) })
		if len(runs) == 0 {
			out = append(out, fmt.Sprintf("%s: no run tonight", b.GetLabel()))
			continue
		}
		// Per site: runs, first and last; over both: the longest gap.
		type span struct {
			n           int
			first, last time.Time
		}
		per := map[string]*span{}
		var order []string
		gap := time.Duration(0)
		for i, r := range runs {
			s, ok := per[r.site]
			if !ok {
				s = &span{first: r.start}
				per[r.site] = s
				order = append(order, r.site)
			}
			s.n++
			s.last = r.end
			if i > 0 {
				gap = max(gap, r.start.Sub(runs[i-1].start))
			}
		}
		var parts []string
		for _, id := range order {
			s := per[id]
			parts = append(parts, fmt.Sprintf("%s %d runs %s-%s", names[id], s.n, s.first.UTC().Format("15:04"), s.last.UTC().Format("15:04")))
		}
		out = append(out, fmt.Sprintf("%s: %d runs from %s to %s UTC, at most %s between two run starts;", b.GetLabel(), len(runs),
			runs[0].start.UTC().Format("15:04"), runs[len(runs)-1].end.UTC().Format("15:04"), fmtDuration(gap)),
			"  "+strings.Join(parts, "; ")+" UTC")
	}
	return out
}

// demoScenario is what the demo stored.
type demoScenario struct {
	site    *pb.Site
	targets []*pb.Target
	blocks  []*pb.Block
	byName  []string // what the catalogue lookups said
}

// readDemoRequest parses one embedded scenario file.
func readDemoRequest(name string, m proto.Message) error {
	data, err := demoData.ReadFile(path.Join("demodata", name))
	if err != nil {
		return err
	}
	return parseRequest("testdata/demo/"+name, data, m)
}

// loadDemoScenario creates the site and the targets and queues the blocks,
// from the embedded files, with the same calls as `site create`, `target
// create` and `block queue`.
func loadDemoScenario(a *api, stderr io.Writer) (*demoScenario, error) {
	sc := &demoScenario{}
	sreq := &pb.CreateSiteRequest{}
	if err := readDemoRequest("site.json", sreq); err != nil {
		return nil, err
	}
	ctx, cancel := a.ctx()
	sr, err := a.sites.CreateSite(ctx, sreq)
	cancel()
	if err != nil {
		return nil, a.callErr("CreateSite", err)
	}
	sc.site = sr.GetSite()
	files, err := fs.Glob(demoData, "demodata/targets/*.json")
	if err != nil {
		return nil, err
	}
	sort.Strings(files)
	for _, f := range files {
		treq := &pb.CreateTargetRequest{}
		if err := readDemoRequest(path.Join("targets", path.Base(f)), treq); err != nil {
			return nil, err
		}
		ctx, cancel := a.ctx()
		tr, err := a.targets.CreateTarget(ctx, treq)
		cancel()
		if err != nil {
			return nil, fmt.Errorf("testdata/demo/targets/%s: %w", path.Base(f), a.callErr("CreateTarget", err))
		}
		sc.targets = append(sc.targets, tr.GetTarget())
	}
	// The comet comes from a file of one-line orbital elements, as an
	// observer would get it, with the same call as `target import`.
	text, err := demoData.ReadFile("demodata/comet-elements.txt")
	if err != nil {
		return nil, err
	}
	ctx, cancel = a.ctx()
	ir, err := a.targets.ImportElements(ctx, &pb.ImportElementsRequest{RequestId: "demo-comet-elements", Text: string(text)})
	cancel()
	if err != nil {
		return nil, fmt.Errorf("testdata/demo/comet-elements.txt: %w", a.callErr("ImportElements", err))
	}
	sc.targets = append(sc.targets, ir.GetTargets()...)
	// Real objects beside the invented ones, by catalogue name.
	names, err := demoData.ReadFile("demodata/targets-by-name.txt")
	if err != nil {
		return nil, err
	}
	for _, line := range strings.Split(string(names), "\n") {
		name := strings.TrimSpace(line)
		if name == "" || strings.HasPrefix(name, "#") {
			continue
		}
		var said strings.Builder
		treq, err := lookupForCreate(a, name, &said)
		if err != nil {
			return nil, fmt.Errorf("testdata/demo/targets-by-name.txt: %w", err)
		}
		ctx, cancel := a.ctx()
		tr, err := a.targets.CreateTarget(ctx, treq)
		cancel()
		if err != nil {
			return nil, fmt.Errorf("testdata/demo/targets-by-name.txt: %w", a.callErr("CreateTarget", err))
		}
		sc.targets = append(sc.targets, tr.GetTarget())
		sc.byName = append(sc.byName, strings.TrimSpace(said.String()))
	}
	breq := &pb.QueueBlocksRequest{}
	if err := readDemoRequest("blocks.json", breq); err != nil {
		return nil, err
	}
	qr, err := a.queueBlocks("testdata/demo/blocks.json", breq, sc.site.GetId(), stderr)
	if err != nil {
		return nil, err
	}
	sc.blocks = qr.GetBlocks()
	return sc, nil
}

// printScenario lists the targets with their blocks.
func printScenario(w io.Writer, sc *demoScenario) error {
	tw := newTable(w)
	fmt.Fprintln(tw, "   target\tkind\tblocks (filter x frames x exposure, priority)")
	for _, t := range sc.targets {
		label := ""
		var bs []string
		for _, b := range sc.blocks {
			if b.GetTargetId() != t.GetId() {
				continue
			}
			label = b.GetLabel()
			s := fmt.Sprintf("%s %dx%s p%d", b.GetFilter(), b.GetFramesWanted(), dur(b.GetExposure()), b.GetPriority())
			if cd := b.GetCadence(); cd != nil {
				s += fmt.Sprintf(" (runs of %d every %s)", b.GetMaxRunFrames(), dur(cd.GetInterval()))
			}
			bs = append(bs, s)
		}
		fmt.Fprintf(tw, "   %s\t%s\t%s\n", t.GetName(), label, strings.Join(bs, ", "))
	}
	return tw.Flush()
}

// reportUntil sends the progress reports of a plan's runs up to an
// instant, as the control software would: every run that ended before it
// done in full, the one in progress cut short with the frames that fit.
// It returns the runs done, a note on the cut run and the frames kept.
func reportUntil(a *api, plan *pb.Plan, until time.Time) (done int, cut string, frames int32, err error) {
	for i, x := range plan.GetAssignments() {
		start, end := x.GetStart().AsTime(), x.GetEnd().AsTime()
		if !start.Before(until) {
			break
		}
		rep := &pb.ProgressReport{ReportId: fmt.Sprintf("demo-%s-%03d", plan.GetId(), i+1), BlockId: x.GetBlockId(),
			PlanId: plan.GetId(), FramesKept: x.GetFrames(), Outcome: pb.ProgressOutcome_PROGRESS_OUTCOME_DONE,
			Interval: &pb.TimeInterval{Start: x.GetStart(), End: x.GetEnd()}, Note: "demo: run as planned"}
		if end.After(until) {
			// Frames finished before the roof closed, at the run's mean
			// pace (exposure, readout and dithers spread over its frames).
			per := end.Sub(start) / time.Duration(max(x.GetFrames(), 1))
			kept := int32(until.Sub(start) / per)
			kept = min(kept, x.GetFrames())
			rep.FramesKept = kept
			rep.Outcome = pb.ProgressOutcome_PROGRESS_OUTCOME_INTERRUPTED
			rep.Interval.End = timestamppb.New(until)
			rep.Note = "demo: roof closed by clouds"
			cut = fmt.Sprintf("1 run interrupted (%s %s: %d of %d frames)", x.GetTargetName(), x.GetFilter(), kept, x.GetFrames())
		} else {
			done++
		}
		frames += rep.FramesKept
		ctx, cancel := a.ctx()
		_, err := a.queue.ReportProgress(ctx, &pb.ReportProgressRequest{Report: rep})
		cancel()
		if err != nil {
			return 0, "", 0, a.callErr("ReportProgress", err)
		}
	}
	return done, cut, frames, nil
}
