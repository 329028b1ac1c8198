package main

// End-to-end tests on real device drivers: indiserver with the simulators
// of Debian's indi-bin, a real nightloomd service on loopback, and the
// executor as a real subprocess.

import (
	"bufio"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"log/slog"
	"math"
	"net"
	"net/http"
	"os"
	"os/exec"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/ephem"
	"github.com/nightloom/nightloom/internal/indi"
	"github.com/nightloom/nightloom/internal/server"
	"github.com/nightloom/nightloom/internal/testenv"
	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// pointingTolerance is how close the mount's reported place must be to the
// assignment's pointing (the 1 arcmin).
const pointingToleranceDeg = 1.0 / 60

var simulators = []string{"indi_simulator_telescope", "indi_simulator_ccd", "indi_simulator_wheel",
	"indi_simulator_focus", "indi_simulator_dome", "indi_simulator_weather"}

type rig struct {
	t        *testing.T
	indiAddr string
	ic       *indi.Client
	srv      *server.Server
	admin    *grpc.ClientConn
	sites    pb.SiteServiceClient
	targets  pb.TargetServiceClient
	queue    pb.QueueServiceClient
	plans    pb.PlanServiceClient
	telToken string
	site     *pb.Site
	blocks   []*pb.Block
	names    map[string]string // target id -> name
	bin, out string
}

func freePort(t *testing.T) int {
	ln, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer ln.Close()
	return ln.Addr().(*net.TCPAddr).Port
}

// newRig starts indiserver with the six simulators, a daemon with a site
// where it is the middle of the night now, targets near the meridian, short
// blocks and a plan, and builds the executor.
func newRig(t *testing.T) *rig {
	indiserver := testenv.LookPath(t, "indiserver", "indi-bin")
	for _, s := range simulators {
		testenv.LookPath(t, s, "indi-bin")
	}
	r := &rig{t: t, names: map[string]string{}, out: t.TempDir()}
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()

	// The executor binary (a real subprocess, so that it can be killed).
	r.bin = filepath.Join(t.TempDir(), "nightloom-executor")
	if out, err := exec.Command("go", "build", "-o", r.bin, ".").CombinedOutput(); err != nil {
		t.Fatalf("go build: %v\n%s", err, out)
	}

	port := freePort(t)
	r.indiAddr = fmt.Sprintf("127.0.0.1:%d", port)
	// -u: a local socket of its own, so that several servers can run (the
	// default path is shared by every indiserver on the machine).
	cmd := exec.Command(indiserver, append([]string{"-p", strconv.Itoa(port), "-u", fmt.Sprintf("/tmp/nightloom-e2e-indi-%d", port)}, simulators...)...)
	cmd.Dir = t.TempDir() // the drivers write their config files under HOME
	cmd.Env = append(os.Environ(), "HOME="+cmd.Dir)
	cmd.SysProcAttr = &syscall.SysProcAttr{Setpgid: true}
	logf, _ := os.Create(filepath.Join(r.out, "indiserver.log"))
	cmd.Stdout, cmd.Stderr = logf, logf
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		syscall.Kill(-cmd.Process.Pid, syscall.SIGKILL)
		cmd.Wait()
		logf.Close()
	})
	var ic *indi.Client
	for deadline := time.Now().Add(20 * time.Second); ; time.Sleep(200 * time.Millisecond) {
		var err error
		if ic, err = indi.Dial(ctx, r.indiAddr, indi.Options{}); err == nil {
			break
		}
		if time.Now().After(deadline) {
			b, _ := os.ReadFile(filepath.Join(r.out, "indiserver.log"))
			t.Fatalf("indiserver never listened: %v\n%s", err, tail(string(b), 3000))
		}
	}
	r.ic = ic
	t.Cleanup(func() { ic.Close() })
	if err := ic.GetProperties("", ""); err != nil {
		t.Fatal(err)
	}
	// Connect the weather station and make it refresh every second, and bin
	// the camera 2x2 to keep the frames small (test set-up, not the
	// executor's business).
	for _, dev := range []string{"Weather Simulator", "CCD Simulator"} {
		if _, err := ic.Wait(ctx, dev, "CONNECTION", nil); err != nil {
			t.Fatal(err)
		}
		if _, err := ic.SetAndWait(ctx, indi.Switch, dev, "CONNECTION", on("CONNECT"), off("DISCONNECT")); err != nil {
			t.Fatal(err)
		}
	}
	if _, err := ic.Wait(ctx, "Weather Simulator", "WEATHER_UPDATE", nil); err != nil {
		t.Fatal(err)
	}
	if err := ic.Set(indi.Number, "Weather Simulator", "WEATHER_UPDATE", indi.Value{Name: "PERIOD", Number: 1}); err != nil {
		t.Fatal(err)
	}
	// The simulated dome parks where it stands (it is not slaved to the
	// mount), so that closing takes the shutter's time only.
	if _, err := ic.Wait(ctx, "Dome Simulator", "CONNECTION", nil); err != nil {
		t.Fatal(err)
	}
	if _, err := ic.SetAndWait(ctx, indi.Switch, "Dome Simulator", "CONNECTION", on("CONNECT"), off("DISCONNECT")); err != nil {
		t.Fatal(err)
	}
	if _, err := ic.Wait(ctx, "Dome Simulator", "DOME_PARK_POSITION", nil); err != nil {
		t.Fatal(err)
	}
	if err := ic.Set(indi.Number, "Dome Simulator", "DOME_PARK_POSITION", indi.Value{Name: "PARK_AZ", Number: 0}); err != nil {
		t.Fatal(err)
	}
	if _, err := ic.Wait(ctx, "CCD Simulator", "CCD_BINNING", nil); err != nil {
		t.Fatal(err)
	}
	if _, err := ic.SetAndWait(ctx, indi.Number, "CCD Simulator", "CCD_BINNING", indi.Value{Name: "HOR_BIN", Number: 2}, indi.Value{Name: "VER_BIN", Number: 2}); err != nil {
		t.Fatal(err)
	}

	// The daemon.
	srv, err := server.Start(ctx, server.Config{Listen: "127.0.0.1:0", DBPath: filepath.Join(r.out, "nightloom.db"),
		Logger: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	r.srv = srv
	t.Cleanup(func() {
		c, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		defer cancel()
		srv.Shutdown(c)
	})
	admin, _, err := srv.CreateToken(ctx, server.RoleAdmin, "e2e admin")
	if err != nil {
		t.Fatal(err)
	}
	if r.telToken, _, err = srv.CreateToken(ctx, server.RoleTelescope, "e2e executor"); err != nil {
		t.Fatal(err)
	}
	r.admin, err = grpc.NewClient(srv.Addr().String(), grpc.WithTransportCredentials(insecure.NewCredentials()),
		grpc.WithPerRPCCredentials(bearer(admin)))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { r.admin.Close() })
	r.sites, r.targets = pb.NewSiteServiceClient(r.admin), pb.NewTargetServiceClient(r.admin)
	r.queue, r.plans = pb.NewQueueServiceClient(r.admin), pb.NewPlanServiceClient(r.admin)

	// A site where the mean solar time is about 00:30 now: longitude from
	// the current UTC; at latitude 10 deg the Sun is then at least ~55 deg
	// below the horizon whatever the season.
	now := time.Now().UTC()
	utcH := float64(now.Hour()) + float64(now.Minute())/60
	lon := math.Remainder((0.5-utcH)*15, 360)
	const lat = 10.0
	site := &pb.Site{Name: "Invented test hill", LatitudeDeg: lat, LongitudeDeg: lon, ElevationM: 300, TimeZone: "Etc/UTC",
		ExtinctionV: 0.2, SolarAvoidanceDeg: ptr(20.0),
		Mount: &pb.Mount{Kind: pb.MountKind_MOUNT_KIND_FORK_EQUATORIAL,
			PrimaryAxis:   &pb.AxisSlew{RateDegPerS: 3, AccelerationDegPerS2: 1},
			SecondaryAxis: &pb.AxisSlew{RateDegPerS: 3, AccelerationDegPerS2: 1},
			Settle:        durationpb.New(2 * time.Second)},
		Instrument: &pb.Instrument{PixelScaleArcsec: 1.5, Filters: []string{"L", "R", "G"},
			FilterChange: durationpb.New(3 * time.Second), Readout: durationpb.New(time.Second),
			Focus: &pb.FocusPolicy{Interval: durationpb.New(time.Hour), Duration: durationpb.New(5 * time.Second)}}}
	cs, err := r.sites.CreateSite(ctx, &pb.CreateSiteRequest{Site: site})
	if err != nil {
		t.Fatal(err)
	}
	r.site = cs.GetSite()
	if sun := sunAlt(t, r.site, now); sun > -30 {
		t.Fatalf("chose longitude %.2f but the Sun is at %.1f deg", lon, sun)
	}

	// Targets near the meridian, just past it (so that now is their best
	// time and the plan is busy from the start): ICRS places around the local sidereal
	// time (precession since J2000 moves them by well under a degree).
	obs, _ := ephem.NewObserver(lat, lon, 300)
	snap := ephem.Prepare(ephem.NewInstant(now))
	l := snap.Local(&obs)
	lstDeg := l.LAST / deg
	type tgt struct {
		name             string
		dRA, dec         float64
		filter           string
		exposure, frames int
	}
	for i, tg := range []tgt{
		{"Invented Cluster A", -3, 25, "L", 2, 4},
		{"Invented Nebula B", -6, -5, "R", 1, 5},
		{"Invented Galaxy C", -9, 35, "G", 2, 4},
		{"Invented Cluster D", -12, 0, "L", 1, 5},
		{"Invented Pair E", -15, 20, "R", 2, 4},
	} {
		ct, err := r.targets.CreateTarget(ctx, &pb.CreateTargetRequest{Target: &pb.Target{Name: tg.name,
			Position: &pb.Target_Fixed{Fixed: &pb.FixedPosition{RaDeg: math.Mod(lstDeg+tg.dRA+360, 360), DecDeg: tg.dec}}}})
		if err != nil {
			t.Fatal(err)
		}
		r.names[ct.GetTarget().GetId()] = tg.name
		qb, err := r.queue.QueueBlocks(ctx, &pb.QueueBlocksRequest{Blocks: []*pb.Block{{SiteId: r.site.GetId(),
			TargetId: ct.GetTarget().GetId(), Label: fmt.Sprintf("e2e %d", i), Filter: tg.filter,
			Exposure: durationpb.New(time.Duration(tg.exposure) * time.Second), FramesWanted: int32(3 * tg.frames),
			MinRunFrames: int32(tg.frames), MaxRunFrames: int32(tg.frames), Priority: int32(5 + i%3)}}})
		if err != nil {
			t.Fatal(err)
		}
		r.blocks = append(r.blocks, qb.GetBlocks()...)
	}
	mp, err := r.plans.MakePlan(ctx, &pb.MakePlanRequest{SiteId: r.site.GetId(),
		Span:     &pb.MakePlanRequest_Interval{Interval: &pb.TimeInterval{Start: timestamppb.New(now.Add(20 * time.Second)), End: timestamppb.New(now.Add(40 * time.Minute))}},
		GridStep: durationpb.New(10 * time.Second), TimeBudget: durationpb.New(2 * time.Second), Seed: 1})
	if err != nil {
		t.Fatal(err)
	}
	p := mp.GetPlans()[0]
	t.Logf("site longitude %.2f deg; plan %s with %d assignments, %d unplaced", lon, p.GetId(), len(p.GetAssignments()), len(p.GetUnplaced()))
	for _, a := range p.GetAssignments() {
		t.Logf("  planned %s..%s %-20s %s x%d slew %v", a.GetStart().AsTime().Format("15:04:05"), a.GetEnd().AsTime().Format("15:04:05"),
			a.GetTargetName(), a.GetFilter(), a.GetFrames(), a.GetOverheads().GetSlew().AsDuration())
	}
	if len(p.GetAssignments()) < 4 {
		t.Fatalf("the plan has %d assignments; want a busy night", len(p.GetAssignments()))
	}
	return r
}

func ptr[T any](v T) *T { return &v }

func sunAlt(t *testing.T, s *pb.Site, at time.Time) float64 {
	sky, err := newSiteSky(s)
	if err != nil {
		t.Fatal(err)
	}
	return sky.sunAltDeg(at)
}

// executorProc is one run of the executor binary.
type executorProc struct {
	cmd    *exec.Cmd
	mu     sync.Mutex
	stdout strings.Builder
	done   chan error
}

func (r *rig) startExecutor(extra ...string) *executorProc {
	args := append([]string{"--server", r.srv.Addr().String(), "--site", r.site.GetId(), "--indi", r.indiAddr,
		"--filters", "L=8,R=1,G=2", "--out", filepath.Join(r.out, "frames"), "--poll", "2s", "--weather-ok-for", "5s",
		"--summary-json", filepath.Join(r.out, "summary.json")}, extra...)
	cmd := exec.Command(r.bin, args...)
	cmd.Env = append(os.Environ(), envToken+"="+r.telToken)
	p := &executorProc{cmd: cmd, done: make(chan error, 1)}
	logf, err := os.OpenFile(filepath.Join(r.out, "executor.log"), os.O_CREATE|os.O_APPEND|os.O_WRONLY, 0o644)
	if err != nil {
		r.t.Fatal(err)
	}
	cmd.Stderr = logf
	so, _ := cmd.StdoutPipe()
	if err := cmd.Start(); err != nil {
		r.t.Fatal(err)
	}
	go func() {
		sc := bufio.NewScanner(so)
		for sc.Scan() {
			p.mu.Lock()
			p.stdout.WriteString(sc.Text() + "\n")
			p.mu.Unlock()
		}
		p.done <- cmd.Wait()
		logf.Close()
	}()
	r.t.Cleanup(func() {
		cmd.Process.Kill()
		<-p.done
		if r.t.Failed() {
			b, _ := os.ReadFile(filepath.Join(r.out, "executor.log"))
			r.t.Logf("executor log (tail):\n%s", tail(string(b), 6000))
		}
	})
	return p
}

func tail(s string, n int) string {
	if len(s) > n {
		return s[len(s)-n:]
	}
	return s
}

// stop ends the executor with SIGTERM and returns its stdout.
func (p *executorProc) stop(t *testing.T) string {
	p.cmd.Process.Signal(syscall.SIGTERM)
	select {
	case err := <-p.done:
		if err != nil {
			t.Errorf("executor exited with %v", err)
		}
	case <-time.After(90 * time.Second):
		t.Fatal("executor did not stop")
	}
	p.done <- nil
	p.mu.Lock()
	defer p.mu.Unlock()
	return p.stdout.String()
}

// journalRecords reads the executor's journal.
func (r *rig) journalRecords() []*runRecord {
	j := &journal{dir: filepath.Join(r.out, "frames", "journal")}
	all, err := j.all()
	if err != nil {
		r.t.Fatal(err)
	}
	return all
}

// frames lists the FITS files by block id (from their headers).
func (r *rig) frames() map[string][]string {
	out := map[string][]string{}
	files, _ := filepath.Glob(filepath.Join(r.out, "frames", "*", "*.fits"))
	for _, f := range files {
		b, err := os.ReadFile(f)
		if err != nil {
			r.t.Fatal(err)
		}
		id, _ := headerValue(b, "BLOCKID")
		out[id] = append(out[id], f)
	}
	return out
}

func (r *rig) waitFor(what string, within time.Duration, cond func() bool) {
	r.t.Helper()
	deadline := time.Now().Add(within)
	for !cond() {
		if time.Now().After(deadline) {
			r.t.Fatalf("%s: not within %v", what, within)
		}
		time.Sleep(500 * time.Millisecond)
	}
}

// framesDone returns each block's frames_done as stored.
func (r *rig) framesDone() map[string]int {
	out := map[string]int{}
	for _, b := range r.blocks {
		got, err := r.queue.GetBlock(context.Background(), &pb.GetBlockRequest{BlockId: b.GetId()})
		if err != nil {
			r.t.Fatal(err)
		}
		out[b.GetId()] = int(got.GetBlock().GetFramesDone())
	}
	return out
}

// checkCounts: every frame on disk is counted once, none twice, none lost.
func (r *rig) checkCounts() {
	r.t.Helper()
	files := r.frames()
	for id, n := range r.framesDone() {
		if n != len(files[id]) {
			r.t.Errorf("block %s: frames_done %d, FITS files %d", id, n, len(files[id]))
		}
	}
	ids := map[string]bool{}
	for _, rec := range r.journalRecords() {
		if rec.Outcome != "failed" && !rec.Reported {
			r.t.Errorf("run %s not reported", rec.RunID)
		}
		if ids[rec.ReportID] {
			r.t.Errorf("report id %s used twice", rec.ReportID)
		}
		ids[rec.ReportID] = true
	}
}

// checkFrames checks every FITS file's header against its assignment.
func (r *rig) checkFrames() int {
	r.t.Helper()
	plans := map[string]*pb.Plan{}
	n := 0
	for _, list := range r.frames() {
		for _, f := range list {
			b, _ := os.ReadFile(f)
			if len(b)%fitsBlock != 0 {
				r.t.Errorf("%s: %d bytes, not whole FITS blocks", f, len(b))
			}
			h := func(k string) string { v, _ := headerValue(b, k); return v }
			num := func(k string) float64 {
				v, err := strconv.ParseFloat(h(k), 64)
				if err != nil {
					r.t.Errorf("%s: %s = %q", f, k, h(k))
				}
				return v
			}
			planID, blockID := h("PLANID"), h("BLOCKID")
			p, ok := plans[planID]
			if !ok {
				gp, err := r.plans.GetPlan(context.Background(), &pb.GetPlanRequest{PlanId: planID})
				if err != nil {
					r.t.Fatalf("%s: plan %q: %v", f, planID, err)
				}
				p, plans[planID] = gp.GetPlan(), gp.GetPlan()
			}
			dateObs, err := time.Parse("2006-01-02T15:04:05.000", h("DATE-OBS"))
			if err != nil {
				r.t.Errorf("%s: DATE-OBS %q", f, h("DATE-OBS"))
			}
			var a *pb.Assignment
			for _, x := range p.GetAssignments() {
				if x.GetBlockId() == blockID && !dateObs.Before(x.GetPrepareStart().AsTime().Add(-time.Minute)) &&
					(a == nil || x.GetStart().AsTime().After(a.GetStart().AsTime())) {
					a = x
				}
			}
			if a == nil {
				r.t.Errorf("%s: no assignment of block %s in plan %s before %v", f, blockID, planID, dateObs)
				continue
			}
			if h("OBJECT") != a.GetTargetName() || h("FILTER") != a.GetFilter() ||
				num("EXPTIME") != a.GetExposure().AsDuration().Seconds() || h("TIMESYS") != "UTC" {
				r.t.Errorf("%s: OBJECT %q FILTER %q EXPTIME %q, want %q %q %v", f, h("OBJECT"), h("FILTER"), h("EXPTIME"),
					a.GetTargetName(), a.GetFilter(), a.GetExposure().AsDuration().Seconds())
			}
			if num("SITELAT") != r.site.GetLatitudeDeg() || num("SITELONG") != r.site.GetLongitudeDeg() {
				r.t.Errorf("%s: SITELAT %s SITELONG %s", f, h("SITELAT"), h("SITELONG"))
			}
			if am := num("AIRMASS"); !(am >= 1 && am < 3) {
				r.t.Errorf("%s: AIRMASS %v", f, am)
			}
			sep := ephem.Separation(ephem.SphericalToVec(num("RA")*deg, num("DEC")*deg),
				ephem.SphericalToVec(a.GetPointing().GetRaApparentDeg()*deg, a.GetPointing().GetDecApparentDeg()*deg)) / deg
			if sep > pointingToleranceDeg {
				r.t.Errorf("%s: mount at RA %s DEC %s, %.2f arcmin from the assignment's pointing (%.4f, %.4f); tolerance 1 arcmin",
					f, h("RA"), h("DEC"), sep*60, a.GetPointing().GetRaApparentDeg(), a.GetPointing().GetDecApparentDeg())
			}
			n++
		}
	}
	return n
}

func (r *rig) latestPlan() *pb.Plan {
	lp, err := r.plans.ListPlans(context.Background(), &pb.ListPlansRequest{SiteId: r.site.GetId(), PageSize: 1})
	if err != nil || len(lp.GetPlans()) == 0 {
		r.t.Fatalf("ListPlans: %v", err)
	}
	return lp.GetPlans()[0]
}

// runInProgress returns the journal's unfinished run with frames kept and
// frames still to take.
func (r *rig) runInProgress() *runRecord {
	for _, rec := range r.journalRecords() {
		if rec.Outcome == "" && len(rec.Files) >= 1 && len(rec.Files) < rec.FramesWant-1 {
			return rec
		}
	}
	return nil
}

func TestExecutorNightOnSimulators(t *testing.T) {
	if testing.Short() {
		t.Skip("end-to-end: about 3 minutes")
	}
	t.Parallel()
	r := newRig(t)
	metricsAddr := fmt.Sprintf("127.0.0.1:%d", freePort(t))
	ex := r.startExecutor("--metrics-listen", metricsAddr)

	// Observe: runs done, frames with the right headers, each counted once.
	r.waitFor("two runs reported", 120*time.Second, func() bool {
		n := 0
		for _, rec := range r.journalRecords() {
			if rec.Reported && rec.Outcome == "done" {
				n++
			}
		}
		return n >= 2
	})
	r.checkCounts()
	if n := r.checkFrames(); n < 6 {
		t.Errorf("%d frames checked, want at least 6", n)
	}
	for _, list := range r.frames() {
		astropyVerify(t, list[0]) // one real frame from the camera simulator, as edited
		break
	}

	// Weather: Alert in the middle of a run.
	r.waitFor("a run in progress", 90*time.Second, func() bool { return r.runInProgress() != nil })
	inProgress := r.runInProgress()
	alertAt := time.Now()
	setWeather(t, r.ic, 1)
	r.waitFor("the run interrupted and reported", 30*time.Second, func() bool {
		for _, rec := range r.journalRecords() {
			if rec.RunID == inProgress.RunID {
				return rec.Reported && rec.Outcome == "interrupted"
			}
		}
		return false
	})
	r.waitFor("the roof closed and the mount parked", 60*time.Second, func() bool {
		d, _ := r.ic.Property("Dome Simulator", "DOME_SHUTTER")
		m, _ := r.ic.Property("Telescope Simulator", "TELESCOPE_PARK")
		return d.IsOn("SHUTTER_CLOSE") && d.State == indi.Ok && m.IsOn("PARK") && m.State == indi.Ok
	})
	r.waitFor("a replan with a weather closure", 30*time.Second, func() bool {
		p := r.latestPlan()
		for _, c := range p.GetClosures() {
			if strings.Contains(c.GetReason(), "weather") && !c.GetInterval().GetStart().AsTime().Before(alertAt.Add(-2*time.Second)) {
				return p.GetOrigin() == pb.PlanOrigin_PLAN_ORIGIN_REPLAN
			}
		}
		return false
	})
	closedVersion := r.latestPlan().GetVersion()
	r.checkCounts()

	// Weather Ok again: after --weather-ok-for the executor replans from
	// now, reopens and takes frames again.
	okAt := time.Now()
	setWeather(t, r.ic, 0)
	r.waitFor("a replan after the weather cleared", 40*time.Second, func() bool { return r.latestPlan().GetVersion() > closedVersion })
	r.waitFor("a frame after the weather cleared", 90*time.Second, func() bool {
		for _, rec := range r.journalRecords() {
			if rec.Start.After(okAt) && len(rec.Files) > 0 {
				return true
			}
		}
		return false
	})
	if d, _ := r.ic.Property("Dome Simulator", "DOME_SHUTTER"); !d.IsOn("SHUTTER_OPEN") {
		t.Error("observing again with the shutter not open")
	}
	// The same figures as Prometheus metrics.
	resp, err := http.Get("http://" + metricsAddr + "/metrics")
	if err != nil {
		t.Fatal(err)
	}
	body, _ := io.ReadAll(resp.Body)
	resp.Body.Close()
	for _, want := range []string{"nightloom_executor_frames_total ", "nightloom_executor_slew_model_error_seconds_count ",
		"nightloom_executor_run_start_delay_seconds_count ", `nightloom_executor_runs_total{outcome="interrupted"} `, "nightloom_executor_replans_total "} {
		if !strings.Contains(string(body), want) {
			t.Errorf("metrics lack %q", want)
		}
	}
	stdout := ex.stop(t)
	r.checkCounts()
	r.checkFrames()
	t.Logf("executor's night summary:\n%s", stdout)
	logFigures(t, filepath.Join(r.out, "summary.json"))
}

func TestExecutorKilledMidRun(t *testing.T) {
	if testing.Short() {
		t.Skip("end-to-end: about a minute")
	}
	t.Parallel()
	r := newRig(t)
	ex := r.startExecutor()
	r.waitFor("a run in progress", 120*time.Second, func() bool { return r.runInProgress() != nil })
	killed := r.runInProgress()
	if err := ex.cmd.Process.Signal(syscall.SIGKILL); err != nil {
		t.Fatal(err)
	}
	<-ex.done
	ex.done <- nil
	t.Logf("killed the executor during run %s of block %s after %d of %d frames", killed.RunID, killed.BlockID, len(killed.Files), killed.FramesWant)

	ex2 := r.startExecutor()
	// The restarted executor reports the killed run with the frames on disk,
	// then takes the rest of that assignment in a new run.
	r.waitFor("the killed run reported and its assignment resumed", 90*time.Second, func() bool {
		reported, resumed := false, false
		for _, rec := range r.journalRecords() {
			if rec.RunID == killed.RunID && rec.Reported {
				reported = true
			}
			if rec.RunID != killed.RunID && rec.BlockID == killed.BlockID && rec.Reported && rec.Start.After(killed.PrepareStart) {
				resumed = true
			}
		}
		return reported && resumed
	})
	ex2.stop(t)
	r.checkCounts()
	r.checkFrames()
	var killedRec *runRecord
	for _, rec := range r.journalRecords() {
		if rec.RunID == killed.RunID {
			killedRec = rec
		}
	}
	if killedRec.Outcome != "interrupted" || len(killedRec.Files) < len(killed.Files) {
		t.Errorf("killed run: outcome %q, %d frames; want interrupted with at least %d", killedRec.Outcome, len(killedRec.Files), len(killed.Files))
	}
}

// setWeather drives the weather simulator: its WEATHER_CONTROL "Weather"
// value above the forecast's Ok range (0) turns WEATHER_STATUS to Alert.
func setWeather(t *testing.T, ic *indi.Client, forecast float64) {
	t.Helper()
	if err := ic.Set(indi.Number, "Weather Simulator", "WEATHER_CONTROL", indi.Value{Name: "Weather", Number: forecast},
		indi.Value{Name: "Temperature", Number: 15}, indi.Value{Name: "Wind", Number: 0}, indi.Value{Name: "Gust", Number: 0},
		indi.Value{Name: "Precip", Number: 0}); err != nil {
		t.Fatal(err)
	}
	want := indi.Ok
	if forecast > 0 {
		want = indi.Alert
	}
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	if _, err := ic.Wait(ctx, "Weather Simulator", "WEATHER_STATUS", func(p *indi.Property) bool { return p.State == want }); err != nil {
		t.Fatalf("weather never went %v: %v", want, err)
	}
}

// logFigures prints the executed-versus-planned figures for calibration.
func logFigures(t *testing.T, path string) {
	b, err := os.ReadFile(path)
	if err != nil {
		t.Errorf("summary: %v", err)
		return
	}
	var figs []runFigures
	if err := json.Unmarshal(b, &figs); err != nil {
		t.Errorf("summary: %v", err)
		return
	}
	var starts, errs []float64
	for _, f := range figs {
		if !f.ActualStart.IsZero() {
			starts = append(starts, f.StartDelayS)
		}
		if f.SlewActualS > 0 {
			errs = append(errs, f.SlewErrorS)
		}
	}
	sort.Float64s(starts)
	t.Logf("figures: %d runs; start delays %v s; slew errors (actual - model) %v s", len(figs), starts, errs)
}

// astropyVerify opens a written frame with astropy.io.fits and verifies it
// (output_verify "exception"): an outside reader of the camera's file as
// the executor edited it. Without python3-astropy it is logged locally and
// fails under CI.
func astropyVerify(t *testing.T, path string) {
	t.Helper()
	py, err := "/usr/bin/python3", error(nil) // Debian's, which python3-astropy serves
	if _, serr := os.Stat(py); serr != nil {
		py, err = exec.LookPath("python3")
	}
	if err == nil {
		err = exec.Command(py, "-c", "import astropy.io.fits").Run()
	}
	if err != nil {
		if testenv.InCI() {
			t.Errorf("python3-astropy missing: %v", err)
		} else {
			t.Logf("python3-astropy missing, frame not checked by astropy: %v", err)
		}
		return
	}
	script := "import sys\nfrom astropy.io import fits\nwith fits.open(sys.argv[1]) as h:\n    h.verify('exception')\n    print(h[0].header['OBJECT'], h[0].header['NAXIS1'])\n"
	out, err := exec.Command(py, "-c", script, path).CombinedOutput()
	if err != nil {
		t.Errorf("astropy rejects %s: %v\n%s", path, err, out)
		return
	}
	t.Logf("astropy reads %s: %s", filepath.Base(path), strings.TrimSpace(string(out)))
}
