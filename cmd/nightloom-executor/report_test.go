package main

import (
	"context"
	"io"
	"log/slog"
	"path/filepath"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/protobuf/types/known/durationpb"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/ephem"
	"github.com/nightloom/nightloom/internal/server"
	"github.com/nightloom/nightloom/internal/store"
	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// A run the executor's own safety check refuses is reported to a real
// daemon on loopback as skipped, with no frame, so that the operator and
// the next replan know it did not happen (before, the server never heard
// of it). No device is touched: the refusal comes before the dome opens.
func TestRefusedSlewIsReported(t *testing.T) {
	ctx, cancel := context.WithTimeout(t.Context(), time.Minute)
	defer cancel()
	dbPath := filepath.Join(t.TempDir(), "nightloom.db")
	srv, err := server.Start(ctx, server.Config{Listen: "127.0.0.1:0", DBPath: dbPath,
		Logger: slog.New(slog.NewTextHandler(io.Discard, nil))})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		c, cancel := context.WithTimeout(context.Background(), 5*time.Second)
		defer cancel()
		srv.Shutdown(c)
	})
	dial := func(role server.Role) *grpc.ClientConn {
		tok, _, err := srv.CreateToken(ctx, role, "report test")
		if err != nil {
			t.Fatal(err)
		}
		cc, err := grpc.NewClient(srv.Addr().String(), grpc.WithTransportCredentials(insecure.NewCredentials()),
			grpc.WithPerRPCCredentials(bearer(tok)))
		if err != nil {
			t.Fatal(err)
		}
		t.Cleanup(func() { cc.Close() })
		return cc
	}
	admin, tel := dial(server.RoleAdmin), dial(server.RoleTelescope)
	site := testSite()
	site.Name = "Invented refusal hill"
	site.Mount = &pb.Mount{Kind: pb.MountKind_MOUNT_KIND_FORK_EQUATORIAL,
		PrimaryAxis:   &pb.AxisSlew{RateDegPerS: 3, AccelerationDegPerS2: 1},
		SecondaryAxis: &pb.AxisSlew{RateDegPerS: 3, AccelerationDegPerS2: 1}}
	site.Instrument = &pb.Instrument{PixelScaleArcsec: 1.5, Filters: []string{"L"}, Readout: durationpb.New(time.Second)}
	cs, err := pb.NewSiteServiceClient(admin).CreateSite(ctx, &pb.CreateSiteRequest{Site: site})
	if err != nil {
		t.Fatal(err)
	}
	ct, err := pb.NewTargetServiceClient(admin).CreateTarget(ctx, &pb.CreateTargetRequest{Target: &pb.Target{Name: "Invented field",
		Position: &pb.Target_Fixed{Fixed: &pb.FixedPosition{RaDeg: 10, DecDeg: 10}}}})
	if err != nil {
		t.Fatal(err)
	}
	qb, err := pb.NewQueueServiceClient(admin).QueueBlocks(ctx, &pb.QueueBlocksRequest{Blocks: []*pb.Block{{
		SiteId: cs.GetSite().GetId(), TargetId: ct.GetTarget().GetId(), Filter: "L",
		Exposure: durationpb.New(10 * time.Second), FramesWanted: 4, Priority: 5}}})
	if err != nil {
		t.Fatal(err)
	}
	block := qb.GetBlocks()[0]

	sky, err := newSiteSky(cs.GetSite())
	if err != nil {
		t.Fatal(err)
	}
	j, err := openJournal(t.TempDir())
	if err != nil {
		t.Fatal(err)
	}
	e := &executor{cfg: config{out: t.TempDir(), callTimeout: 5 * time.Second}, queue: pb.NewQueueServiceClient(tel),
		site: cs.GetSite(), sky: sky, j: j, m: newMetrics(), log: slog.New(slog.NewTextHandler(io.Discard, nil)),
		now: func() time.Time { return time.Now().UTC() }, refused: map[string]time.Time{}}
	// An assignment pointed at the Sun now: refused by the solar floor, or
	// by the horizon when the Sun is down at the site.
	now := time.Now().UTC()
	snap := ephem.Prepare(ephem.NewInstant(now))
	l := snap.Local(&sky.obs)
	sun := l.SunPlace()
	a := assignmentAt(now, sun.RA/deg, sun.Dec/deg)
	a.BlockId, a.Frames, a.Exposure = block.GetId(), 4, durationpb.New(10*time.Second)
	a.PrepareStart = timestamppb.New(now)
	if err := e.execute(ctx, &pb.NextAssignmentResponse{Assignment: a}); err != nil {
		t.Fatalf("execute: %v", err)
	}
	recs, err := j.all()
	if err != nil || len(recs) != 1 {
		t.Fatalf("journal: %d records, %v; want the refused run", len(recs), err)
	}
	rec := recs[0]
	if rec.Outcome != "skipped" || !rec.Reported || len(rec.Files) != 0 {
		t.Fatalf("journal record: outcome %q reported %v files %d; want skipped, reported, none", rec.Outcome, rec.Reported, len(rec.Files))
	}
	db, err := store.Open(dbPath, store.Options{})
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	got, err := db.GetProgressReport(ctx, rec.ReportID)
	if err != nil {
		t.Fatalf("the server has no report %s: %v", rec.ReportID, err)
	}
	if got.BlockID != block.GetId() || got.FramesKept != 0 || got.Outcome == "" || got.Outcome == "done" {
		t.Errorf("stored report %+v; want block %s, 0 frames, outcome skipped", got, block.GetId())
	}
	t.Logf("stored: %s %s frames %d (%s)", got.ReportID, got.Outcome, got.FramesKept, rec.Note)
	// The refused run is not tried again before its end.
	if _, ok := e.refused[rec.PlanID+"|"+rec.BlockID+"|"+a.GetStart().AsTime().String()]; !ok {
		t.Errorf("the refusal is not remembered")
	}
}
