package main

// `nightloom block update`, `nightloom block withdraw --site` (bulk) and
// `nightloom plan export` (issue 14).

import (
	"flag"
	"fmt"
	"io"
	"os"
	"strings"
	"time"

	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/fieldmaskpb"

	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// blockUpdateFlags maps the flags of `block update` to the Block field each
// sets (the field mask is the set flags, plus the file's mask).
var blockUpdateFlags = map[string]string{
	"priority": "priority", "frames": "frames_wanted", "exposure": "exposure", "label": "label",
	"earliest": "earliest_date", "latest": "latest_date", "min-run": "min_run_frames", "max-run": "max_run_frames",
}

func runBlockUpdate(args []string, stdout, stderr io.Writer) error {
	r := newRemote("block update", stderr)
	id := r.fs.String("block", "", "id of the block; required (overrides block.id in the file)")
	file := r.fs.String("file", "", "UpdateBlockRequest as protobuf JSON (- for stdin), e.g. for constraints or cadence; flags override it")
	priority := r.fs.Int("priority", 0, "new priority, 1..10")
	frames := r.fs.Int("frames", 0, "new frames wanted (not below the frames done)")
	exposure := r.fs.Duration("exposure", 0, "new exposure length, e.g. 180s")
	label := r.fs.String("label", "", "new label")
	earliest := r.fs.String("earliest", "", "new first night, YYYY-MM-DD")
	latest := r.fs.String("latest", "", "new last night, YYYY-MM-DD")
	minRun := r.fs.Int("min-run", 0, "new shortest useful run, frames")
	maxRun := r.fs.Int("max-run", 0, "new longest useful run, frames (0: no limit)")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	req := &pb.UpdateBlockRequest{}
	if *file != "" {
		if err := readRequest(*file, req); err != nil {
			return err
		}
	}
	if req.Block == nil {
		req.Block = &pb.Block{}
	}
	if *id != "" {
		req.Block.Id = *id
	}
	if req.GetBlock().GetId() == "" {
		return flagError("block", "required: the block's id")
	}
	if req.UpdateMask == nil {
		req.UpdateMask = &fieldmaskpb.FieldMask{}
	}
	var bad error
	r.fs.Visit(func(f *flag.Flag) {
		path, ok := blockUpdateFlags[f.Name]
		if !ok || bad != nil {
			return
		}
		req.UpdateMask.Paths = append(req.UpdateMask.Paths, path)
		b := req.Block
		switch f.Name {
		case "priority":
			b.Priority = int32(*priority)
		case "frames":
			b.FramesWanted = int32(*frames)
		case "exposure":
			b.Exposure = durationpb.New(*exposure)
		case "label":
			b.Label = *label
		case "min-run":
			b.MinRunFrames = int32(*minRun)
		case "max-run":
			b.MaxRunFrames = int32(*maxRun)
		case "earliest":
			b.EarliestDate, bad = parseDate("earliest", *earliest)
		case "latest":
			b.LatestDate, bad = parseDate("latest", *latest)
		}
	})
	if bad != nil {
		return bad
	}
	if len(req.GetUpdateMask().GetPaths()) == 0 {
		return flagError("priority", "nothing to change: give --priority, --frames, --exposure, --label, --earliest, --latest, --min-run, --max-run or a --file with updateMask")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.queue.UpdateBlock(ctx, req)
	if err != nil {
		return a.callErr("UpdateBlock", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	names, err := a.targetNames()
	if err != nil {
		return err
	}
	fmt.Fprintf(stdout, "updated %s\n", strings.Join(req.GetUpdateMask().GetPaths(), ", "))
	return printBlocks(stdout, []*pb.Block{resp.GetBlock()}, names)
}

// withdrawMatching is `block withdraw --site SITE [--target TARGET]`: every
// open block of the site (and target) in one WithdrawBlocks call.
func withdrawMatching(r remote, site, target, reason string, stdout, stderr io.Writer) error {
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.queue.WithdrawBlocks(ctx, &pb.WithdrawBlocksRequest{SiteId: site, TargetId: target, Reason: reason})
	if err != nil {
		return a.callErr("WithdrawBlocks", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	fmt.Fprintf(stdout, "withdrew %d open block(s)\n", len(resp.GetBlocks()))
	if len(resp.GetBlocks()) == 0 {
		return nil
	}
	names, err := a.targetNames()
	if err != nil {
		return err
	}
	return printBlocks(stdout, resp.GetBlocks(), names)
}

func runPlanExport(args []string, stdout, stderr io.Writer) error {
	r := newRemote("plan export", stderr)
	id := r.fs.String("plan", "", "id of the plan version; required")
	format := r.fs.String("format", "", "csv (one row per run, local and UTC times) or ics (iCalendar, one event per run); default from --out's extension")
	out := r.fs.String("out", "", "file to write (default: stdout)")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *id == "" {
		return flagError("plan", "required: the plan's id")
	}
	f := strings.ToLower(*format)
	if f == "" {
		switch {
		case strings.HasSuffix(strings.ToLower(*out), ".csv"):
			f = "csv"
		case strings.HasSuffix(strings.ToLower(*out), ".ics"):
			f = "ics"
		}
	}
	var ef pb.ExportFormat
	switch f {
	case "csv":
		ef = pb.ExportFormat_EXPORT_FORMAT_CSV
	case "ics", "ical", "icalendar":
		ef = pb.ExportFormat_EXPORT_FORMAT_ICALENDAR
	default:
		return flagError("format", "want csv or ics, got %q", *format)
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := pb.NewExportServiceClient(a.cc).ExportPlan(ctx, &pb.ExportPlanRequest{PlanId: *id, Format: ef})
	if err != nil {
		return a.callErr("ExportPlan", err)
	}
	if *out == "" {
		_, err := stdout.Write(resp.GetContent())
		return err
	}
	if err := os.WriteFile(*out, resp.GetContent(), 0o644); err != nil {
		return err
	}
	fmt.Fprintf(stderr, "wrote %s (%s, %d bytes) at %s\n", *out, resp.GetContentType(), len(resp.GetContent()), time.Now().Format(time.RFC3339))
	return nil
}
