package main

// The executor's loop: ask for the next run, check it, drive the devices,
// keep the frames, report, and react to the weather and the dawn.

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"os"
	"path/filepath"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/ephem"
	"github.com/nightloom/nightloom/internal/indi"
	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// errWeather: the weather turned unsafe (or its device was lost) during a
// step.
var errWeather = errors.New("weather unsafe")

type config struct {
	siteID        string
	out           string
	dryRun        bool
	poll          time.Duration // wait between questions when there is nothing to do
	weatherOKFor  time.Duration // weather Ok this long before reopening
	parkSunAltDeg float64       // park and close when the Sun is above this
	focusSteps    float64
	blobTimeout   time.Duration // beyond the exposure, for readout and download
	callTimeout   time.Duration
}

type executor struct {
	cfg    config
	plans  pb.PlanServiceClient
	queue  pb.QueueServiceClient
	site   *pb.Site
	sky    *siteSky
	dev    *devices
	j      *journal
	m      *metrics
	log    *slog.Logger
	now    func() time.Time
	secure bool // the dome is closed and the mount parked by us
	// lastFocus is when the last focus run ended (zero: unknown).
	lastFocus time.Time
	// refused holds runs refused by the safety checks, until their end.
	refused map[string]time.Time
}

// run loops until ctx ends, then parks, closes and returns.
func (e *executor) run(ctx context.Context) error {
	if err := e.recoverRuns(ctx); err != nil {
		return err
	}
	for ctx.Err() == nil {
		if ok, why := e.dev.weatherSafe(); !ok {
			e.weatherHold(ctx, why)
			continue
		}
		e.m.weatherSafe.Set(1)
		now := e.now()
		if sun := e.sky.sunAltDeg(now); sun > e.cfg.parkSunAltDeg {
			e.makeSecure(ctx, fmt.Sprintf("the Sun is at %.1f deg, above %.1f deg", sun, e.cfg.parkSunAltDeg))
			e.pause(ctx, e.cfg.poll)
			continue
		}
		resp, err := e.next(ctx)
		if err != nil {
			e.log.Warn("NextAssignment failed", "err", err)
			e.pause(ctx, e.cfg.poll)
			continue
		}
		a := resp.GetAssignment()
		if a == nil {
			e.pause(ctx, e.cfg.poll)
			continue
		}
		if err := e.execute(ctx, resp); err != nil && !errors.Is(err, errWeather) && ctx.Err() == nil {
			e.log.Warn("run failed", "block", a.GetBlockId(), "err", err)
			e.pause(ctx, 5*time.Second)
		}
	}
	sctx, cancel := context.WithTimeout(context.Background(), 3*time.Minute)
	defer cancel()
	e.makeSecure(sctx, "executor stopping")
	return nil
}

// next asks for the run to start now, telling the server where the mount
// points, which filter is in the beam and when the last focus run ended.
func (e *executor) next(ctx context.Context) (*pb.NextAssignmentResponse, error) {
	now := e.now()
	st := &pb.TelescopeState{}
	if ra, dec, ok := e.dev.mountPosition(); ok {
		alt, az := e.sky.horizontal(now, ra, dec)
		st.Position = &pb.HorizontalPosition{AltitudeDeg: max(-90, min(90, alt)), AzimuthDeg: math.Mod(az+360, 360)}
	}
	if _, name := e.dev.filterInBeam(); name != "" {
		st.Filter = name
	}
	if !e.lastFocus.IsZero() {
		st.LastFocusTime = timestamppb.New(e.lastFocus)
	}
	cctx, cancel := context.WithTimeout(ctx, e.cfg.callTimeout)
	defer cancel()
	return e.plans.NextAssignment(cctx, &pb.NextAssignmentRequest{SiteId: e.cfg.siteID, Now: timestamppb.New(now), State: st})
}

// pause waits d, or less when the weather turns (errWeather) or ctx ends.
func (e *executor) pause(ctx context.Context, d time.Duration) error {
	deadline := e.now().Add(d)
	for {
		if err := ctx.Err(); err != nil {
			return err
		}
		if ok, _ := e.dev.weatherSafe(); !ok {
			return errWeather
		}
		left := deadline.Sub(e.now())
		if left <= 0 {
			return nil
		}
		select {
		case <-ctx.Done():
		case <-time.After(min(left, 250*time.Millisecond)):
		}
	}
}

// makeSecure closes the dome and parks the mount once.
func (e *executor) makeSecure(ctx context.Context, why string) {
	if e.secure {
		return
	}
	e.log.Info("closing and parking", "why", why)
	sctx, cancel := context.WithTimeout(ctx, 3*time.Minute)
	defer cancel()
	if err := e.dev.secure(sctx); err != nil {
		e.log.Error("closing and parking failed: check the site now", "err", err)
		return
	}
	e.secure = true
}

// execute carries out one assignment (or what is left of it).
func (e *executor) execute(ctx context.Context, resp *pb.NextAssignmentResponse) error {
	a := resp.GetAssignment()
	planID := resp.GetPlanId()
	start, end := a.GetStart().AsTime(), a.GetEnd().AsTime()
	key := planID + "|" + a.GetBlockId() + "|" + start.String()
	if until, ok := e.refused[key]; ok {
		return e.pause(ctx, max(time.Until(until), time.Second))
	}
	kept, err := e.j.framesKept(planID, a.GetBlockId(), start, end)
	if err != nil {
		return err
	}
	frames := int(a.GetFrames()) - kept
	if frames <= 0 {
		// This executor kept every frame; the server has not counted them
		// yet or the run is over: wait for its end.
		return e.pause(ctx, max(time.Until(end), time.Second))
	}
	if wait := a.GetPrepareStart().AsTime().Sub(e.now()); wait > 0 {
		e.log.Info("waiting for the next run", "block", a.GetBlockId(), "prepare_start", a.GetPrepareStart().AsTime().Format(time.RFC3339), "wait", wait.Round(time.Second))
		if err := e.pause(ctx, wait); err != nil {
			return err
		}
	}
	now := e.now()
	night := e.sky.nightOf(now)
	rec := &runRecord{
		RunID: runIDFor(planID, a.GetBlockId(), start, kept), PlanID: planID, BlockID: a.GetBlockId(),
		Target: a.GetTargetName(), Filter: a.GetFilter(), AssignmentStart: start, FirstFrame: kept, FramesWant: frames,
		PlannedStart: start, PlannedEnd: end, PrepareStart: now, Dir: filepath.Join(e.cfg.out, night),
		SlewModelS: a.GetOverheads().GetSlew().AsDuration().Seconds(),
	}
	rec.ReportID = "nlx-" + rec.RunID
	if err := e.sky.checkSlew(a, now, maxTime(now, start), end); err != nil {
		e.log.Warn("slew refused by the executor's own safety check", "block", a.GetBlockId(), "target", a.GetTargetName(), "err", err)
		e.m.refusals.Inc()
		e.refused[key] = end
		// Tell the server the run was not started and why, so that the
		// operator sees it and a replan knows.
		rec.Outcome, rec.Note = "skipped", "refused by the executor's safety check: "+err.Error()
		if err := e.j.save(rec); err != nil {
			return err
		}
		return e.report(ctx, rec)
	}
	e.log.Info("run", "block", rec.BlockID, "target", rec.Target, "filter", rec.Filter, "frames", frames,
		"planned_start", start.Format(time.RFC3339), "plan", planID, "run_id", rec.RunID)
	if e.cfg.dryRun {
		ra, dec, _ := pointingAt(a, maxTime(now, start))
		e.log.Info("dry run: would open, slew, set the filter, expose", "ra_deg", ra, "dec_deg", dec,
			"filter", a.GetFilter(), "frames", frames, "exposure_s", a.GetExposure().AsDuration().Seconds())
		e.refused[key] = end
		return e.pause(ctx, max(time.Until(end), time.Second))
	}
	if err := os.MkdirAll(rec.Dir, 0o755); err != nil {
		return err
	}
	if err := e.j.save(rec); err != nil {
		return err
	}

	// Open, unpark, slew.
	e.secure = false
	octx, cancel := context.WithTimeout(ctx, 5*time.Minute)
	defer cancel()
	if err := e.dev.openDome(octx); err != nil {
		return e.abandon(ctx, rec, fmt.Errorf("opening the dome: %w", err))
	}
	if err := e.dev.unparkMount(octx); err != nil {
		return e.abandon(ctx, rec, fmt.Errorf("unparking: %w", err))
	}
	if ok, _ := e.dev.weatherSafe(); !ok {
		return e.abandon(ctx, rec, errWeather)
	}
	slewEnd := e.now().Add(a.GetOverheads().GetSlew().AsDuration())
	ra, dec, _ := pointingAt(a, maxTime(slewEnd, start))
	if r := a.GetRate(); a.GetNonSiderealTracking() && r != nil {
		err = e.dev.setTracking(octx, true, r.GetRaCosDecArcsecPerMin(), r.GetDecArcsecPerMin(), dec)
	} else {
		err = e.dev.setTracking(octx, false, 0, 0, dec)
	}
	if err != nil {
		return e.abandon(ctx, rec, fmt.Errorf("setting the tracking rate: %w", err))
	}
	if fra, fdec, ok := e.dev.mountPosition(); ok {
		rec.SlewDegrees = ephem.Separation(ephem.SphericalToVec(fra*deg, fdec*deg), ephem.SphericalToVec(ra*deg, dec*deg)) / deg
		rec.SlewAxisDeg = e.axisMove(fra, fdec, ra, dec)
	}
	t0 := e.now()
	off, err := e.dev.slew(octx, ra, dec)
	if err != nil {
		return e.abandon(ctx, rec, fmt.Errorf("slewing: %w", err))
	}
	rec.PointingOffArcsec = off * 3600
	rec.SlewActualS = e.now().Sub(t0).Seconds()
	if rec.SlewDegrees > 0 {
		settle := e.site.GetMount().GetSettle().AsDuration()
		if err := e.pause(ctx, settle); err != nil {
			return e.abandon(ctx, rec, err)
		}
	}
	if err := e.dev.setFilter(octx, a.GetFilter()); err != nil {
		return e.abandon(ctx, rec, fmt.Errorf("filter: %w", err))
	}
	if a.GetOverheads().GetFocus().AsDuration() > 0 {
		if err := e.dev.focusRun(octx, e.cfg.focusSteps); err != nil {
			return e.abandon(ctx, rec, fmt.Errorf("focus run: %w", err))
		}
		e.lastFocus = e.now()
	}
	if wait := start.Sub(e.now()); wait > 0 {
		if err := e.pause(ctx, wait); err != nil {
			return e.abandon(ctx, rec, err)
		}
	}
	return e.expose(ctx, a, rec, frames)
}

// abandon ends a run before its first frame: nothing to report.
func (e *executor) abandon(ctx context.Context, rec *runRecord, err error) error {
	rec.Outcome, rec.Note = "failed", err.Error()
	if err2 := e.j.save(rec); err2 != nil {
		e.log.Error("journal", "err", err2)
	}
	if err2 := e.report(ctx, rec); err2 != nil {
		e.log.Error("report", "run_id", rec.RunID, "err", err2)
	}
	return err
}

// expose takes the frames, writes each file and reports the run.
func (e *executor) expose(ctx context.Context, a *pb.Assignment, rec *runRecord, frames int) error {
	events, stop := e.dev.c.Subscribe(256)
	defer stop()
	exp := a.GetExposure().AsDuration()
	var stopErr error
	for i := 0; i < frames && stopErr == nil; i++ {
		if err := ctx.Err(); err != nil {
			stopErr = err
			break
		}
		if ok, _ := e.dev.weatherSafe(); !ok {
			stopErr = errWeather
			break
		}
		frameStart := e.now()
		mra, mdec, _ := e.dev.mountPosition()
		if err := e.dev.startExposure(exp); err != nil {
			stopErr = fmt.Errorf("starting the exposure: %w", err)
			break
		}
		data, err := e.waitFrame(ctx, events, exp)
		if err != nil {
			if abortErr := e.dev.abortExposure(); abortErr != nil {
				e.log.Warn("aborting the exposure", "err", abortErr)
			}
			stopErr = err
			break
		}
		frameEnd := e.now().Truncate(time.Millisecond)
		lk := e.sky.lookAt(frameStart, mra, mdec)
		n := rec.FirstFrame + i + 1
		cards := []card{
			{"OBJECT", a.GetTargetName(), "target name"},
			{"FILTER", a.GetFilter(), "filter name"},
			{"EXPTIME", exp.Seconds(), "[s] exposure time"},
			{"DATE-OBS", frameStart.UTC().Format("2006-01-02T15:04:05.000"), "UTC start of the exposure"},
			{"TIMESYS", "UTC", "time scale of DATE-OBS"},
			{"RA", mra, "[deg] mount's apparent RA of date at start"},
			{"DEC", mdec, "[deg] mount's apparent Dec of date at start"},
			{"AIRMASS", roundTo(lk.airmass, 4), "Kasten & Young at the mount's place"},
			{"SITELAT", e.site.GetLatitudeDeg(), "[deg] site latitude"},
			{"SITELONG", e.site.GetLongitudeDeg(), "[deg] site longitude, east positive"},
			{"PLANID", rec.PlanID, "nightloom plan id"},
			{"BLOCKID", rec.BlockID, "nightloom block id"},
			{"RUNID", rec.RunID, "nightloom executor run id"},
			{"FRAMENO", n, "frame number in the assignment"},
		}
		if math.IsInf(lk.airmass, 0) || math.IsNaN(lk.airmass) {
			cards[7] = card{"AIRMASS", 0.0, "below the horizon"}
		}
		out, err := editHeader(data, cards)
		if err != nil {
			stopErr = fmt.Errorf("frame %d: %w", n, err)
			break
		}
		name := frameName(rec, n)
		if err := writeFileAtomic(filepath.Join(rec.Dir, name), out); err != nil {
			stopErr = fmt.Errorf("writing %s: %w", name, err)
			break
		}
		if rec.Start.IsZero() {
			rec.Start = frameStart.Truncate(time.Millisecond)
		}
		rec.End = frameEnd
		rec.Files = append(rec.Files, name)
		if err := e.j.save(rec); err != nil {
			stopErr = err
			break
		}
		e.m.frames.Inc()
		e.log.Info("frame", "file", name, "ra_deg", mra, "dec_deg", mdec)
	}
	switch {
	case stopErr == nil:
		rec.Outcome = "done"
	case errors.Is(stopErr, errWeather):
		rec.Outcome, rec.Note = "interrupted", "weather: "+e.weatherWhy()
	case ctx.Err() != nil:
		rec.Outcome, rec.Note = "interrupted", "executor stopped"
	default:
		rec.Outcome, rec.Note = "failed", stopErr.Error()
	}
	if err := e.j.save(rec); err != nil {
		return err
	}
	rctx, cancel := context.WithTimeout(context.Background(), 2*e.cfg.callTimeout)
	defer cancel()
	if err := e.report(rctx, rec); err != nil {
		e.log.Error("report failed; it is retried at the next start", "run_id", rec.RunID, "err", err)
	}
	return stopErr
}

func (e *executor) weatherWhy() string {
	_, why := e.dev.weatherSafe()
	return why
}

// waitFrame waits for the camera's next FITS BLOB.
func (e *executor) waitFrame(ctx context.Context, events <-chan indi.Event, exp time.Duration) ([]byte, error) {
	timeout := time.NewTimer(exp + e.cfg.blobTimeout)
	defer timeout.Stop()
	tick := time.NewTicker(250 * time.Millisecond)
	defer tick.Stop()
	for {
		select {
		case ev, ok := <-events:
			if !ok {
				return nil, indi.ErrClosed
			}
			if ev.Kind == indi.EventSet && ev.Device == e.dev.names.ccd && ev.Property.Kind == indi.BLOB {
				for _, el := range ev.Property.Elements {
					if len(el.Data) > 0 && (el.BLOBFormat == ".fits" || el.BLOBFormat == ".fit") {
						return el.Data, nil
					}
				}
			}
			if ev.Kind == indi.EventSet && ev.Device == e.dev.names.ccd && ev.Name == "CCD_EXPOSURE" && ev.Property.State == indi.Alert {
				return nil, fmt.Errorf("camera: exposure failed: %s", ev.Message)
			}
		case <-tick.C:
			if ok, _ := e.dev.weatherSafe(); !ok {
				return nil, errWeather
			}
		case <-timeout.C:
			return nil, fmt.Errorf("camera: no frame within %v", exp+e.cfg.blobTimeout)
		case <-ctx.Done():
			return nil, ctx.Err()
		}
	}
}

var outcomes = map[string]pb.ProgressOutcome{
	"done":        pb.ProgressOutcome_PROGRESS_OUTCOME_DONE,
	"interrupted": pb.ProgressOutcome_PROGRESS_OUTCOME_INTERRUPTED,
	"failed":      pb.ProgressOutcome_PROGRESS_OUTCOME_FAILED,
	"skipped":     pb.ProgressOutcome_PROGRESS_OUTCOME_SKIPPED,
}

// report sends a finished run's ReportProgress (once: the report id makes a
// retry harmless) and records it.
func (e *executor) report(ctx context.Context, rec *runRecord) error {
	if rec.Reported {
		return nil
	}
	start, end := rec.Start, rec.End
	switch {
	case len(rec.Files) > 0 && end.After(start):
	case len(rec.Files) == 0 && (rec.Outcome == "failed" || rec.Outcome == "skipped"):
		// No frame, but the server should know the run did not happen
		// and why: from the preparation to now (at least a millisecond,
		// as the interval must not be empty).
		start, end = rec.PrepareStart, e.now()
		if !end.After(start) {
			end = start.Add(time.Millisecond)
		}
	default:
		rec.Reported = true // no frame: nothing to count
		return e.j.save(rec)
	}
	req := &pb.ReportProgressRequest{Report: &pb.ProgressReport{
		ReportId: rec.ReportID, BlockId: rec.BlockID, FramesKept: int32(len(rec.Files)),
		Interval: &pb.TimeInterval{Start: timestamppb.New(start), End: timestamppb.New(end)},
		Outcome:  outcomes[rec.Outcome], PlanId: rec.PlanID, Note: truncate(rec.Note, 500),
	}}
	var err error
	for attempt := 0; attempt < 5; attempt++ {
		var resp *pb.ReportProgressResponse
		cctx, cancel := context.WithTimeout(ctx, e.cfg.callTimeout)
		resp, err = e.queue.ReportProgress(cctx, req)
		cancel()
		if err == nil {
			e.log.Info("reported", "run_id", rec.RunID, "block", rec.BlockID, "frames", len(rec.Files), "outcome", rec.Outcome,
				"counted", resp.GetFramesCounted(), "duplicate", resp.GetDuplicate())
			break
		}
		if c := status.Code(err); c == codes.InvalidArgument || c == codes.NotFound || c == codes.AlreadyExists || c == codes.PermissionDenied {
			e.log.Error("report refused", "run_id", rec.RunID, "err", err)
			break
		}
		select {
		case <-ctx.Done():
			return err
		case <-time.After(time.Duration(1<<attempt) * time.Second):
		}
	}
	if err != nil && status.Code(err) != codes.AlreadyExists && status.Code(err) != codes.NotFound {
		return err
	}
	rec.Reported = true
	e.m.observe(rec)
	return e.j.save(rec)
}

// recoverRuns reports the runs a previous process left unreported: a run
// that was in progress counts the frames found on disk and ends as
// interrupted.
func (e *executor) recoverRuns(ctx context.Context) error {
	all, err := e.j.all()
	if err != nil {
		return err
	}
	for _, r := range all {
		if r.Reported {
			continue
		}
		if r.Outcome == "" {
			found, _ := filepath.Glob(filepath.Join(r.Dir, "*_"+r.RunID+"_*.fits"))
			if len(found) > len(r.Files) {
				// A frame written after the journal's last save.
				r.Files = r.Files[:0]
				for _, f := range found {
					r.Files = append(r.Files, filepath.Base(f))
				}
				if fi, err := os.Stat(found[len(found)-1]); err == nil {
					r.End = fi.ModTime().UTC().Truncate(time.Millisecond)
				}
			}
			r.Outcome, r.Note = "interrupted", "executor restarted"
			if err := e.j.save(r); err != nil {
				return err
			}
		}
		e.log.Info("reporting a run left by the previous process", "run_id", r.RunID, "frames", len(r.Files), "outcome", r.Outcome)
		if err := e.report(ctx, r); err != nil {
			return fmt.Errorf("reporting run %s: %w", r.RunID, err)
		}
	}
	return nil
}

// weatherHold closes, parks, replans with a closure and waits until the
// weather has been safe for the configured time, then replans from now.
func (e *executor) weatherHold(ctx context.Context, why string) {
	e.m.weatherSafe.Set(0)
	e.log.Warn("weather unsafe: closing", "why", why)
	if e.cfg.dryRun {
		e.log.Info("dry run: would close, park and replan with a closure")
	} else {
		e.secure = false
		e.makeSecure(ctx, why)
	}
	now := e.now()
	closureEnd := now.Add(e.cfg.weatherOKFor)
	e.replan(ctx, now, &pb.Closure{Interval: &pb.TimeInterval{Start: timestamppb.New(now), End: timestamppb.New(closureEnd)}, Reason: "weather"})
	var okSince time.Time
	for ctx.Err() == nil {
		now := e.now()
		if ok, _ := e.dev.weatherSafe(); ok {
			if okSince.IsZero() {
				okSince = now
				e.log.Info("weather safe again; waiting before reopening", "wait", e.cfg.weatherOKFor)
			}
			if now.Sub(okSince) >= e.cfg.weatherOKFor {
				break
			}
		} else {
			okSince = time.Time{}
			if now.After(closureEnd) {
				closureEnd = now.Add(e.cfg.weatherOKFor)
				e.replan(ctx, now, &pb.Closure{Interval: &pb.TimeInterval{Start: timestamppb.New(now), End: timestamppb.New(closureEnd)}, Reason: "weather"})
			}
		}
		select {
		case <-ctx.Done():
		case <-time.After(500 * time.Millisecond):
		}
	}
	if ctx.Err() != nil {
		return
	}
	e.m.weatherSafe.Set(1)
	e.log.Info("weather safe: replanning from now and resuming")
	e.replan(ctx, e.now(), nil)
}

// replan asks for a Replan of the site's current plan from an instant,
// with an optional closure; a plan replaced meanwhile is looked up again.
func (e *executor) replan(ctx context.Context, from time.Time, cl *pb.Closure) {
	if e.cfg.dryRun {
		e.log.Info("dry run: would replan", "from", from.Format(time.RFC3339), "closure", cl != nil)
		return
	}
	for attempt := 0; attempt < 3; attempt++ {
		cctx, cancel := context.WithTimeout(ctx, e.cfg.callTimeout)
		nresp, err := e.plans.NextAssignment(cctx, &pb.NextAssignmentRequest{SiteId: e.cfg.siteID, Now: timestamppb.New(from)})
		cancel()
		if err != nil {
			e.log.Warn("replan: finding the current plan", "err", err)
			return
		}
		if nresp.GetPlanId() == "" {
			e.log.Info("replan: no plan covers now")
			return
		}
		req := &pb.ReplanRequest{SiteId: e.cfg.siteID, PlanId: nresp.GetPlanId(), From: timestamppb.New(from)}
		if cl != nil {
			req.Closures = []*pb.Closure{cl}
		}
		cctx, cancel = context.WithTimeout(ctx, e.cfg.callTimeout)
		resp, err := e.plans.Replan(cctx, req)
		cancel()
		if status.Code(err) == codes.FailedPrecondition {
			continue // someone replanned first
		}
		if err != nil {
			e.log.Warn("replan failed", "err", err)
			return
		}
		e.m.replans.Inc()
		e.log.Info("replanned", "plan", resp.GetPlan().GetId(), "version", resp.GetPlan().GetVersion(),
			"assignments", len(resp.GetPlan().GetAssignments()), "closure", cl != nil)
		return
	}
}

// axisMove is the larger of the two axis moves of a slew between apparent
// places, in degrees: hour angle and declination for equatorial mounts
// (the hour angle changes as the right ascension, the sidereal time
// advancing by well under a degree during a slew), azimuth and altitude
// for alt-azimuth ones. The overhead model counts the slower axis the same
// way.
func (e *executor) axisMove(fromRA, fromDec, toRA, toDec float64) float64 {
	if e.site.GetMount().GetKind() == pb.MountKind_MOUNT_KIND_ALT_AZIMUTH {
		now := e.now()
		alt1, az1 := e.sky.horizontal(now, fromRA, fromDec)
		alt2, az2 := e.sky.horizontal(now, toRA, toDec)
		return max(math.Abs(math.Remainder(az2-az1, 360)), math.Abs(alt2-alt1))
	}
	return max(math.Abs(math.Remainder(toRA-fromRA, 360)), math.Abs(toDec-fromDec))
}

func maxTime(a, b time.Time) time.Time {
	if a.After(b) {
		return a
	}
	return b
}

func roundTo(x float64, digits int) float64 {
	p := math.Pow(10, float64(digits))
	return math.Round(x*p) / p
}

func truncate(s string, n int) string {
	if len(s) <= n {
		return s
	}
	return s[:n]
}
