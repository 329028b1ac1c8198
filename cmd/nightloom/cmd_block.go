package main

// `nightloom block ...` (the queue) and `nightloom progress report`.

import (
	"context"
	"crypto/rand"
	"encoding/hex"
	"fmt"
	"io"
	"strings"
	"time"

	"google.golang.org/protobuf/proto"

	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// maxQueueBatch is the most blocks one QueueBlocks call takes.
const maxQueueBatch = 500

func blockCommands() []command {
	return []command{
		{name: "queue", summary: "queue blocks from a QueueBlocksRequest file", run: runBlockQueue},
		{name: "get", summary: "show one block", run: runBlockGet},
		{name: "list", summary: "list blocks, optionally of one site, target or state", run: runBlockList},
		{name: "withdraw", summary: "take an open block out of the queue (--block), or every open block of a site (--site [--target])", run: runBlockWithdraw},
		{name: "update", summary: "change an open block's priority, frames, exposure, dates, constraints or cadence (field mask)", run: runBlockUpdate},
	}
}

func progressCommands() []command {
	return []command{
		{name: "report", summary: "report what the telescope did for a block (a ReportProgressRequest file or flags)", run: runProgressReport},
	}
}

// targetRef is the prefix of a target_id in a blocks file that names a
// stored target instead of giving its id: "@LN 2207" stands for the id of
// the one stored target whose name is "LN 2207". The client resolves it
// before the call, so the request the server sees is an ordinary one.
const targetRef = "@"

func runBlockQueue(args []string, stdout, stderr io.Writer) error {
	r := newRemote("block queue", stderr)
	file := r.fs.String("file", "", "QueueBlocksRequest as protobuf JSON (- for stdin); required")
	site := r.fs.String("site", "", "site id for blocks whose siteId is empty (with --network: their home member)")
	network := r.fs.String("network", "", "queue the file's blocks without a site for this network (id or name): each runs once, at the member that serves it best")
	sites := r.fs.String("sites", "", "with --network: the member sites that may take the blocks, comma-separated ids or names (default: every member)")
	minAperture := r.fs.Float64("min-aperture", 0, "with --network: smallest telescope aperture the blocks need, in mm")
	minScale := r.fs.Float64("min-pixel-scale", 0, "with --network: smallest pixel scale the blocks accept, arcsec/px")
	maxScale := r.fs.Float64("max-pixel-scale", 0, "with --network: largest pixel scale the blocks accept, arcsec/px (0: no limit)")
	program := r.fs.String("program", "", "name of the program whose time the blocks spend, for blocks whose program is empty")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *file == "" {
		return flagError("file", "required: a QueueBlocksRequest JSON file (see testdata/demo/blocks.json)")
	}
	if *network == "" {
		for name, set := range map[string]bool{"sites": *sites != "", "min-aperture": *minAperture != 0,
			"min-pixel-scale": *minScale != 0, "max-pixel-scale": *maxScale != 0} {
			if set {
				return flagError(name, "only with --network")
			}
		}
	}
	if *minAperture < 0 || *minScale < 0 || *maxScale < 0 {
		return flagError("min-aperture", "--min-aperture, --min-pixel-scale and --max-pixel-scale must be >= 0")
	}
	req := &pb.QueueBlocksRequest{}
	if err := readRequest(*file, req); err != nil {
		return err
	}
	if *program != "" {
		for _, b := range req.GetBlocks() {
			if b.GetProgram() == "" {
				b.Program = *program
			}
		}
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	if *network != "" {
		n, err := a.resolveNetwork("network", *network)
		if err != nil {
			return err
		}
		var allowed []string
		if refs := splitList(*sites); len(refs) > 0 {
			if allowed, err = a.resolveSites("sites", refs); err != nil {
				return err
			}
		}
		for _, b := range req.GetBlocks() {
			if b.GetSiteId() != "" && b.GetNetworkId() == "" {
				continue // a block of one site stays one
			}
			b.NetworkId = n.GetId()
			if b.GetSiteId() == "" {
				b.SiteId = *site // may stay empty: the server takes the first allowed member
			}
			if len(allowed) > 0 {
				b.AllowedSiteIds = allowed
			}
			if *minAperture > 0 || *minScale > 0 || *maxScale > 0 {
				b.Needs = &pb.TelescopeNeeds{MinApertureMm: *minAperture, MinPixelScaleArcsec: *minScale, MaxPixelScaleArcsec: *maxScale}
			}
		}
		*site = ""
	}
	resp, err := a.queueBlocks(*file, req, *site, stderr)
	if err != nil {
		return err
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	names, err := a.targetNames()
	if err != nil {
		return err
	}
	if resp.GetDuplicate() {
		fmt.Fprintln(stdout, "request id seen before: nothing new was stored; the blocks of the first call:")
	}
	return printBlocks(stdout, resp.GetBlocks(), names)
}

// queueBlocks fills empty site ids, resolves "@name" target references and
// queues the blocks, 500 per call. A request of more than 500 blocks is
// therefore not all-or-nothing: the batches before a refused one stay
// queued (the error says how many). Each batch gets request_id + "#k" as
// its own idempotency key, so a retried run stores nothing twice.
func (a *api) queueBlocks(path string, req *pb.QueueBlocksRequest, site string, stderr io.Writer) (*pb.QueueBlocksResponse, error) {
	if len(req.GetBlocks()) == 0 {
		return nil, &fileError{path, fmt.Errorf("field blocks: at least one block is required")}
	}
	var byName map[string][]string
	for i, b := range req.GetBlocks() {
		if b.GetSiteId() == "" && b.GetNetworkId() == "" {
			if site == "" {
				return nil, &fileError{path, fmt.Errorf("field blocks[%d].site_id: empty (give --site to fill it)", i)}
			}
			b.SiteId = site
		}
		name, ok := strings.CutPrefix(b.GetTargetId(), targetRef)
		if !ok {
			continue
		}
		if byName == nil {
			ts, err := a.allTargets(0)
			if err != nil {
				return nil, err
			}
			byName = map[string][]string{}
			for _, t := range ts {
				byName[t.GetName()] = append(byName[t.GetName()], t.GetId())
			}
		}
		switch ids := byName[name]; len(ids) {
		case 0:
			return nil, &fileError{path, fmt.Errorf("field blocks[%d].target_id: no stored target is named %q", i, name)}
		case 1:
			b.TargetId = ids[0]
		default:
			return nil, &fileError{path, fmt.Errorf("field blocks[%d].target_id: %d stored targets are named %q; give the id", i, len(ids), name)}
		}
	}
	blocks := req.GetBlocks()
	if len(blocks) <= maxQueueBatch {
		ctx, cancel := a.ctx()
		defer cancel()
		resp, err := a.queue.QueueBlocks(ctx, req)
		return resp, a.callErr("QueueBlocks", err)
	}
	out := &pb.QueueBlocksResponse{Duplicate: true}
	p := startProgress(stderr, "queuing blocks")
	defer p.Stop()
	for k, start := 0, 0; start < len(blocks); k, start = k+1, start+maxQueueBatch {
		end := min(start+maxQueueBatch, len(blocks))
		p.Set("%d/%d", start, len(blocks))
		part := &pb.QueueBlocksRequest{Blocks: blocks[start:end]}
		if req.GetRequestId() != "" {
			part.RequestId = fmt.Sprintf("%s#%d", req.GetRequestId(), k)
		}
		ctx, cancel := a.ctx()
		resp, err := a.queue.QueueBlocks(ctx, part)
		cancel()
		if err != nil {
			err = a.callErr("QueueBlocks", err)
			return nil, fmt.Errorf("blocks %d..%d (%d before them are queued): %w", start, end-1, start, err)
		}
		out.Blocks = append(out.Blocks, resp.GetBlocks()...)
		out.Duplicate = out.Duplicate && resp.GetDuplicate()
	}
	return out, nil
}

// targetNames maps target ids to names, for tables.
func (a *api) targetNames() (map[string]string, error) {
	ts, err := a.allTargets(0)
	if err != nil {
		return nil, err
	}
	m := make(map[string]string, len(ts))
	for _, t := range ts {
		m[t.GetId()] = t.GetName()
	}
	return m, nil
}

func runBlockGet(args []string, stdout, stderr io.Writer) error {
	r := newRemote("block get", stderr)
	id := r.fs.String("block", "", "id of the block; required")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	if *id == "" {
		return flagError("block", "required: the block's id")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.queue.GetBlock(ctx, &pb.GetBlockRequest{BlockId: *id})
	if err != nil {
		return a.callErr("GetBlock", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	names, err := a.targetNames()
	if err != nil {
		return err
	}
	return printBlocks(stdout, []*pb.Block{resp.GetBlock()}, names)
}

func parseStates(s string) ([]pb.BlockState, error) {
	if s == "" {
		return nil, nil
	}
	var out []pb.BlockState
	for _, p := range strings.Split(s, ",") {
		v, ok := pb.BlockState_value["BLOCK_STATE_"+strings.ToUpper(strings.TrimSpace(p))]
		if !ok || v == 0 {
			return nil, flagError("state", "unknown state %q (want open, completed, withdrawn or expired)", p)
		}
		out = append(out, pb.BlockState(v))
	}
	return out, nil
}

func runBlockList(args []string, stdout, stderr io.Writer) error {
	r := newRemote("block list", stderr)
	site := r.fs.String("site", "", "only blocks of this site")
	target := r.fs.String("target", "", "only blocks of this target")
	state := r.fs.String("state", "", "only blocks in these states, comma-separated: open,completed,withdrawn,expired")
	pageSize := r.fs.Int("page-size", 0, "blocks per call (0: the server's default); every page is fetched")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	states, err := parseStates(*state)
	if err != nil {
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
	blocks, err := a.allBlocks(&pb.ListBlocksRequest{SiteId: *site, TargetId: *target, States: states, PageSize: int32(*pageSize)})
	if err != nil {
		return err
	}
	if r.conn.json {
		return writeJSON(stdout, &pb.ListBlocksResponse{Blocks: blocks})
	}
	names, err := a.targetNames()
	if err != nil {
		return err
	}
	return printBlocks(stdout, blocks, names)
}

func (a *api) allBlocks(req *pb.ListBlocksRequest) ([]*pb.Block, error) {
	req = proto.Clone(req).(*pb.ListBlocksRequest)
	return allPages(a, "ListBlocks", func(ctx context.Context, token string) ([]*pb.Block, string, error) {
		req.PageToken = token
		resp, err := a.queue.ListBlocks(ctx, req)
		return resp.GetBlocks(), resp.GetNextPageToken(), err
	})
}

func runBlockWithdraw(args []string, stdout, stderr io.Writer) error {
	r := newRemote("block withdraw", stderr)
	id := r.fs.String("block", "", "id of the block (or --site for many)")
	site := r.fs.String("site", "", "withdraw every open block of this site in one call (instead of --block)")
	target := r.fs.String("target", "", "with --site: only the blocks of this target")
	reason := r.fs.String("reason", "", "why it is withdrawn (recorded)")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	switch {
	case *id != "" && *site != "":
		return flagError("site", "give --block or --site, not both")
	case *id == "" && *site != "":
		return withdrawMatching(r, *site, *target, *reason, stdout, stderr)
	case *id == "":
		return flagError("block", "required: the block's id (or --site for every open block of a site)")
	case *target != "":
		return flagError("target", "goes with --site")
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.queue.WithdrawBlock(ctx, &pb.WithdrawBlockRequest{BlockId: *id, Reason: *reason})
	if err != nil {
		return a.callErr("WithdrawBlock", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	names, err := a.targetNames()
	if err != nil {
		return err
	}
	return printBlocks(stdout, []*pb.Block{resp.GetBlock()}, names)
}

func printBlocks(w io.Writer, blocks []*pb.Block, names map[string]string) error {
	tw := newTable(w)
	// A program column only when some block spends a program's time.
	programs := false
	for _, b := range blocks {
		programs = programs || b.GetProgram() != ""
	}
	progHead := ""
	if programs {
		progHead = "\tprogram"
	}
	fmt.Fprintln(tw, "id\ttarget\tfilter\texposure\tframes done/wanted\trun frames\tpriority\tstate\tnights\tcadence"+progHead+"\tlabel")
	for _, b := range blocks {
		name := names[b.GetTargetId()]
		if name == "" {
			name = b.GetTargetId()
		}
		run := fmt.Sprintf("%d..", max(b.GetMinRunFrames(), 1))
		if b.GetMaxRunFrames() > 0 {
			run += fmt.Sprint(b.GetMaxRunFrames())
		}
		nights := "any"
		if b.GetEarliestDate() != nil || b.GetLatestDate() != nil {
			nights = dateOrDots(b.GetEarliestDate()) + ".." + dateOrDots(b.GetLatestDate())
		}
		cad := "-"
		if c := b.GetCadence(); c != nil {
			cad = "every " + dur(c.GetInterval()) + " ±" + dur(c.GetTolerance())
		}
		prog := ""
		if programs {
			prog = "\t" + b.GetProgram()
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%d/%d\t%s\t%d\t%s\t%s\t%s%s\t%s\n", b.GetId(), name, b.GetFilter(), dur(b.GetExposure()),
			b.GetFramesDone(), b.GetFramesWanted(), run, b.GetPriority(), enumName(b.GetState().String(), "BLOCK_STATE_"),
			nights, cad, prog, b.GetLabel())
	}
	if len(blocks) == 0 {
		fmt.Fprintln(tw, "(no blocks)")
	}
	return tw.Flush()
}

func dateOrDots(d *pb.LocalDate) string {
	if d == nil {
		return ""
	}
	return dateString(d)
}

// newReportID makes a report id for a report given by flags: random, so a
// retry of the same command line must pass --report-id to be idempotent.
func newReportID() string {
	var b [8]byte
	rand.Read(b[:])
	return "cli-" + time.Now().UTC().Format("20060102T150405Z") + "-" + hex.EncodeToString(b[:])
}

func parseOutcome(s string) (pb.ProgressOutcome, error) {
	v, ok := pb.ProgressOutcome_value["PROGRESS_OUTCOME_"+strings.ToUpper(s)]
	if !ok || v == 0 {
		return 0, flagError("outcome", "want done, interrupted, failed or skipped, got %q", s)
	}
	return pb.ProgressOutcome(v), nil
}

func runProgressReport(args []string, stdout, stderr io.Writer) error {
	r := newRemote("progress report", stderr)
	file := r.fs.String("file", "", "ReportProgressRequest as protobuf JSON (- for stdin); or give the flags below")
	block := r.fs.String("block", "", "id of the block")
	frames := r.fs.Int("frames", 0, "frames kept")
	from := r.fs.String("start", "", "start of the first exposure, RFC 3339")
	to := r.fs.String("end", "", "end of the last exposure, RFC 3339")
	outcome := r.fs.String("outcome", "done", "done, interrupted, failed or skipped")
	reportID := r.fs.String("report-id", "", "idempotency key (default: a new random id)")
	plan := r.fs.String("plan", "", "id of the plan whose assignment the run carried out")
	note := r.fs.String("note", "", "free note")
	if err := parseFlags(r.fs, args); err != nil {
		return err
	}
	req := &pb.ReportProgressRequest{}
	if *file != "" {
		if *block != "" || *from != "" || *to != "" {
			return flagError("file", "give either --file or --block/--start/--end, not both")
		}
		if err := readRequest(*file, req); err != nil {
			return err
		}
	} else {
		if *block == "" {
			return flagError("block", "required (or give --file)")
		}
		if *frames < 0 {
			return flagError("frames", "must be >= 0")
		}
		if *from == "" {
			return flagError("start", "required, an RFC 3339 instant")
		}
		if *to == "" {
			return flagError("end", "required, an RFC 3339 instant")
		}
		s, err := parseInstant("start", *from)
		if err != nil {
			return err
		}
		e, err := parseInstant("end", *to)
		if err != nil {
			return err
		}
		oc, err := parseOutcome(*outcome)
		if err != nil {
			return err
		}
		id := *reportID
		if id == "" {
			id = newReportID()
		}
		req.Report = &pb.ProgressReport{ReportId: id, BlockId: *block, FramesKept: int32(*frames),
			Interval: &pb.TimeInterval{Start: s, End: e}, Outcome: oc, PlanId: *plan, Note: *note}
	}
	a, err := r.conn.dial(stderr)
	if err != nil {
		return err
	}
	defer a.Close()
	ctx, cancel := a.ctx()
	defer cancel()
	resp, err := a.queue.ReportProgress(ctx, req)
	if err != nil {
		return a.callErr("ReportProgress", err)
	}
	if r.conn.json {
		return writeJSON(stdout, resp)
	}
	b := resp.GetBlock()
	if resp.GetDuplicate() {
		fmt.Fprintf(stdout, "report %s was accepted before; nothing counted again\n", req.GetReport().GetReportId())
	} else {
		fmt.Fprintf(stdout, "report %s: %d frames counted\n", req.GetReport().GetReportId(), resp.GetFramesCounted())
	}
	fmt.Fprintf(stdout, "block %s: %d/%d frames, %s\n", b.GetId(), b.GetFramesDone(), b.GetFramesWanted(),
		enumName(b.GetState().String(), "BLOCK_STATE_"))
	return nil
}
