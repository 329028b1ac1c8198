package server

// Security and bad input (issue 7), beyond auth_test.go and
// validation_test.go:
//
//   - every RPC of the service descriptors, called with a request that is
//     valid and would write if allowed, is refused without a token, with a
//     wrong token and with every role the method table does not list, and
//     the refusal writes nothing; every role it lists succeeds;
//   - no status message, response metadata or log line carries a token's
//     secret, whatever shape the authorization metadata has;
//   - a listener handed in by the caller follows the loopback rule;
//   - FuzzRequestEndToEnd sends arbitrary requests through the whole stack
//     (gRPC, auth, validation, store) and checks what comes back.

import (
	"context"
	"database/sql"
	"errors"
	"fmt"
	"log/slog"
	"net"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/metadata"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/reflect/protoreflect"
	"google.golang.org/protobuf/reflect/protoregistry"
	"google.golang.org/protobuf/types/known/fieldmaskpb"

	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// writeProbe tells whether anything was committed to the database file
// since the last look: SQLite's PRAGMA data_version, read on a connection
// of its own, changes whenever another connection commits (SQLite
// documentation, "PRAGMA data_version"). It sees every table, the ones the
// snapshot helper does not list (progress reports, plans beyond the latest)
// included.
type writeProbe struct {
	mu   sync.Mutex
	db   *sql.DB
	conn *sql.Conn
	last int64
}

func newWriteProbe(t testing.TB, path string) *writeProbe {
	t.Helper()
	db, err := sql.Open("sqlite3", "file:"+filepath.ToSlash(path)+"?mode=ro")
	if err != nil {
		t.Fatal(err)
	}
	conn, err := db.Conn(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	p := &writeProbe{db: db, conn: conn}
	t.Cleanup(func() { _ = conn.Close(); _ = db.Close() })
	p.last = p.version(t)
	return p
}

func (p *writeProbe) version(t testing.TB) int64 {
	var v int64
	if err := p.conn.QueryRowContext(context.Background(), "PRAGMA data_version").Scan(&v); err != nil {
		t.Fatalf("PRAGMA data_version: %v", err)
	}
	return v
}

// wrote reports whether a commit happened since the last call (or since
// reset), and starts a new interval.
func (p *writeProbe) wrote(t testing.TB) bool {
	p.mu.Lock()
	defer p.mu.Unlock()
	v := p.version(t)
	changed := v != p.last
	p.last = v
	return changed
}

// reset starts a new interval without looking at the old one.
func (p *writeProbe) reset(t testing.TB) { p.wrote(t) }

func TestWriteProbe(t *testing.T) {
	e := newEnv(t, "")
	p := newWriteProbe(t, e.dbPath)
	if _, err := e.sites.ListSites(e.admin(), &nightloomv1.ListSitesRequest{}); err != nil {
		t.Fatal(err)
	}
	if p.wrote(t) {
		t.Error("a read counted as a write")
	}
	if _, err := e.sites.CreateSite(e.admin(), &nightloomv1.CreateSiteRequest{Site: testSite()}); err != nil {
		t.Fatal(err)
	}
	if !p.wrote(t) {
		t.Error("CreateSite was not seen as a write")
	}
	if p.wrote(t) {
		t.Error("the same write was seen twice")
	}
}

// validCall is a request of one RPC that is valid and succeeds for a role
// that may call it. prep makes what the call needs (as admin, before the
// write probe is reset) and returns the call.
type validCall func(t *testing.T) func(ctx context.Context) error

// validCalls has one entry per RPC of the API; TestEveryRPCByRole fails
// when an RPC of the descriptors has none.
func validCalls(e *env, f fixture, plan *nightloomv1.Plan) map[string]validCall {
	site, tgt, blk := f.site.GetId(), f.targets[0].GetId(), f.blocks[0].GetId()
	comet := f.targets[4].GetId() // testComet (seed order)
	adm := e.admin()
	night := &nightloomv1.MakePlanRequest_Night{Night: testNight}
	p0 := plan.GetInterval().GetStart().AsTime()
	var seq int
	next := func() int { seq++; return seq }
	now := func(c func(ctx context.Context) error) validCall {
		return func(*testing.T) func(ctx context.Context) error { return c }
	}
	newSite := func(t *testing.T) string {
		r, err := e.sites.CreateSite(adm, &nightloomv1.CreateSiteRequest{Site: testSite()})
		if err != nil {
			t.Fatal(err)
		}
		return r.GetSite().GetId()
	}
	newTarget := func(t *testing.T) string {
		r, err := e.targets.CreateTarget(adm, &nightloomv1.CreateTargetRequest{Target: testFixed(fmt.Sprintf("Pebblewick Cluster %d", next()), 140, 20)})
		if err != nil {
			t.Fatal(err)
		}
		return r.GetTarget().GetId()
	}
	programs := nightloomv1.NewProgramServiceClient(e.conn)
	newProgram := func(t *testing.T) string {
		name := fmt.Sprintf("share-%d", next())
		if _, err := programs.CreateProgram(adm, &nightloomv1.CreateProgramRequest{Program: testProgram(name, 10*time.Hour)}); err != nil {
			t.Fatal(err)
		}
		return name
	}
	nets := nightloomv1.NewNetworkServiceClient(e.conn)
	newNetwork := func(t *testing.T, sites ...string) string {
		r, err := nets.CreateNetwork(adm, &nightloomv1.CreateNetworkRequest{Network: &nightloomv1.Network{
			Name: fmt.Sprintf("Auth Network %d", next()), SiteIds: sites}})
		if err != nil {
			t.Fatal(err)
		}
		return r.GetNetwork().GetId()
	}
	return map[string]validCall{
		nightloomv1.ProgramService_CreateProgram_FullMethodName: now(func(ctx context.Context) error {
			_, err := programs.CreateProgram(ctx, &nightloomv1.CreateProgramRequest{Program: testProgram(fmt.Sprintf("club-%d", next()), time.Hour)})
			return err
		}),
		nightloomv1.ProgramService_GetProgram_FullMethodName: func(t *testing.T) func(ctx context.Context) error {
			name := newProgram(t)
			return func(ctx context.Context) error {
				_, err := programs.GetProgram(ctx, &nightloomv1.GetProgramRequest{Name: name})
				return err
			}
		},
		nightloomv1.ProgramService_ListPrograms_FullMethodName: now(func(ctx context.Context) error {
			_, err := programs.ListPrograms(ctx, &nightloomv1.ListProgramsRequest{})
			return err
		}),
		nightloomv1.ProgramService_UpdateProgram_FullMethodName: func(t *testing.T) func(ctx context.Context) error {
			name := newProgram(t)
			return func(ctx context.Context) error {
				_, err := programs.UpdateProgram(ctx, &nightloomv1.UpdateProgramRequest{
					Program:    &nightloomv1.Program{Name: name, Allocation: dur(20 * time.Hour)},
					UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"allocation"}}})
				return err
			}
		},
		nightloomv1.ProgramService_DeleteProgram_FullMethodName: func(t *testing.T) func(ctx context.Context) error {
			name := newProgram(t)
			return func(ctx context.Context) error {
				_, err := programs.DeleteProgram(ctx, &nightloomv1.DeleteProgramRequest{Name: name})
				return err
			}
		},
		nightloomv1.ProgramService_GetProgramUsage_FullMethodName: now(func(ctx context.Context) error {
			_, err := programs.GetProgramUsage(ctx, &nightloomv1.GetProgramUsageRequest{At: ts(p0)})
			return err
		}),
		nightloomv1.NetworkService_CreateNetwork_FullMethodName: now(func(ctx context.Context) error {
			_, err := nets.CreateNetwork(ctx, &nightloomv1.CreateNetworkRequest{Network: &nightloomv1.Network{
				Name: fmt.Sprintf("Auth Created Network %d", next()), SiteIds: []string{site}}})
			return err
		}),
		nightloomv1.NetworkService_GetNetwork_FullMethodName: func(t *testing.T) func(ctx context.Context) error {
			id := newNetwork(t, site)
			return func(ctx context.Context) error {
				_, err := nets.GetNetwork(ctx, &nightloomv1.GetNetworkRequest{NetworkId: id})
				return err
			}
		},
		nightloomv1.NetworkService_ListNetworks_FullMethodName: now(func(ctx context.Context) error {
			_, err := nets.ListNetworks(ctx, &nightloomv1.ListNetworksRequest{})
			return err
		}),
		nightloomv1.NetworkService_DeleteNetwork_FullMethodName: func(t *testing.T) func(ctx context.Context) error {
			id := newNetwork(t, site)
			return func(ctx context.Context) error {
				_, err := nets.DeleteNetwork(ctx, &nightloomv1.DeleteNetworkRequest{NetworkId: id})
				return err
			}
		},
		nightloomv1.NetworkService_MakeNetworkPlan_FullMethodName: func(t *testing.T) func(ctx context.Context) error {
			id := newNetwork(t, newSite(t))
			return func(ctx context.Context) error {
				_, err := nets.MakeNetworkPlan(ctx, &nightloomv1.MakeNetworkPlanRequest{NetworkId: id, Night: testNight, TimeBudget: dur(0)})
				return err
			}
		},
		nightloomv1.NetworkService_ReplanNetwork_FullMethodName: func(t *testing.T) func(ctx context.Context) error {
			id := newNetwork(t, newSite(t))
			if _, err := nets.MakeNetworkPlan(adm, &nightloomv1.MakeNetworkPlanRequest{NetworkId: id, Night: testNight, TimeBudget: dur(0)}); err != nil {
				t.Fatal(err)
			}
			return func(ctx context.Context) error {
				_, err := nets.ReplanNetwork(ctx, &nightloomv1.ReplanNetworkRequest{NetworkId: id, From: ts(p0.Add(time.Hour)), TimeBudget: dur(0)})
				return err
			}
		},
		nightloomv1.SiteService_CreateSite_FullMethodName: now(func(ctx context.Context) error {
			_, err := e.sites.CreateSite(ctx, &nightloomv1.CreateSiteRequest{Site: testSite()})
			return err
		}),
		nightloomv1.SiteService_GetSite_FullMethodName: now(func(ctx context.Context) error {
			_, err := e.sites.GetSite(ctx, &nightloomv1.GetSiteRequest{SiteId: site})
			return err
		}),
		nightloomv1.SiteService_ListSites_FullMethodName: now(func(ctx context.Context) error {
			_, err := e.sites.ListSites(ctx, &nightloomv1.ListSitesRequest{})
			return err
		}),
		nightloomv1.SiteService_UpdateSite_FullMethodName: func(t *testing.T) func(ctx context.Context) error {
			id := newSite(t)
			return func(ctx context.Context) error {
				_, err := e.sites.UpdateSite(ctx, &nightloomv1.UpdateSiteRequest{Site: &nightloomv1.Site{Id: id, Name: "Renamed Ridge"},
					UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"name"}}})
				return err
			}
		},
		nightloomv1.SiteService_DeleteSite_FullMethodName: func(t *testing.T) func(ctx context.Context) error {
			id := newSite(t)
			return func(ctx context.Context) error {
				_, err := e.sites.DeleteSite(ctx, &nightloomv1.DeleteSiteRequest{SiteId: id})
				return err
			}
		},
		nightloomv1.TargetService_CreateTarget_FullMethodName: now(func(ctx context.Context) error {
			c := testComet()
			c.Name = fmt.Sprintf("C/2031 E%d (Marrowind)", 10+next())
			_, err := e.targets.CreateTarget(ctx, &nightloomv1.CreateTargetRequest{Target: c})
			return err
		}),
		nightloomv1.TargetService_GetTarget_FullMethodName: now(func(ctx context.Context) error {
			_, err := e.targets.GetTarget(ctx, &nightloomv1.GetTargetRequest{TargetId: tgt})
			return err
		}),
		nightloomv1.TargetService_ListTargets_FullMethodName: now(func(ctx context.Context) error {
			_, err := e.targets.ListTargets(ctx, &nightloomv1.ListTargetsRequest{})
			return err
		}),
		nightloomv1.TargetService_UpdateTarget_FullMethodName: func(t *testing.T) func(ctx context.Context) error {
			id := newTarget(t)
			return func(ctx context.Context) error {
				_, err := e.targets.UpdateTarget(ctx, &nightloomv1.UpdateTargetRequest{Target: &nightloomv1.Target{Id: id, Name: "Pebblewick Pair"},
					UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"name"}}})
				return err
			}
		},
		nightloomv1.TargetService_DeleteTarget_FullMethodName: func(t *testing.T) func(ctx context.Context) error {
			id := newTarget(t)
			return func(ctx context.Context) error {
				_, err := e.targets.DeleteTarget(ctx, &nightloomv1.DeleteTargetRequest{TargetId: id})
				return err
			}
		},
		nightloomv1.TargetService_ImportElements_FullMethodName: func(t *testing.T) func(ctx context.Context) error {
			return func(ctx context.Context) error {
				_, err := e.targets.ImportElements(ctx, &nightloomv1.ImportElementsRequest{RequestId: newID("imp-"), Text: importComet})
				return err
			}
		},
		nightloomv1.QueueService_QueueBlocks_FullMethodName: now(func(ctx context.Context) error {
			_, err := e.queue.QueueBlocks(ctx, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{testBlock(site, tgt, "B", 8, 2)}})
			return err
		}),
		nightloomv1.QueueService_GetBlock_FullMethodName: now(func(ctx context.Context) error {
			_, err := e.queue.GetBlock(ctx, &nightloomv1.GetBlockRequest{BlockId: blk})
			return err
		}),
		nightloomv1.QueueService_ListBlocks_FullMethodName: now(func(ctx context.Context) error {
			_, err := e.queue.ListBlocks(ctx, &nightloomv1.ListBlocksRequest{SiteId: site})
			return err
		}),
		nightloomv1.QueueService_UpdateBlock_FullMethodName: func(t *testing.T) func(ctx context.Context) error {
			q, err := e.queue.QueueBlocks(adm, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{testBlock(site, tgt, "G", 8, 2)}})
			if err != nil {
				t.Fatal(err)
			}
			id := q.GetBlocks()[0].GetId()
			return func(ctx context.Context) error {
				_, err := e.queue.UpdateBlock(ctx, &nightloomv1.UpdateBlockRequest{Block: &nightloomv1.Block{Id: id, Priority: 3},
					UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"priority"}}})
				return err
			}
		},
		nightloomv1.QueueService_WithdrawBlocks_FullMethodName: func(t *testing.T) func(ctx context.Context) error {
			other, err := e.targets.CreateTarget(adm, &nightloomv1.CreateTargetRequest{Target: testFixed(fmt.Sprintf("Auth Withdraw %d", next()), 100, 20)})
			if err != nil {
				t.Fatal(err)
			}
			oid := other.GetTarget().GetId()
			if _, err := e.queue.QueueBlocks(adm, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{testBlock(site, oid, "G", 8, 2)}}); err != nil {
				t.Fatal(err)
			}
			return func(ctx context.Context) error {
				_, err := e.queue.WithdrawBlocks(ctx, &nightloomv1.WithdrawBlocksRequest{SiteId: site, TargetId: oid, Reason: "auth test"})
				return err
			}
		},
		nightloomv1.ExportService_ExportPlan_FullMethodName: now(func(ctx context.Context) error {
			_, err := nightloomv1.NewExportServiceClient(e.conn).ExportPlan(ctx, &nightloomv1.ExportPlanRequest{PlanId: plan.GetId(),
				Format: nightloomv1.ExportFormat_EXPORT_FORMAT_CSV})
			return err
		}),
		nightloomv1.QueueService_WithdrawBlock_FullMethodName: func(t *testing.T) func(ctx context.Context) error {
			q, err := e.queue.QueueBlocks(adm, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{testBlock(site, tgt, "G", 8, 2)}})
			if err != nil {
				t.Fatal(err)
			}
			id := q.GetBlocks()[0].GetId()
			return func(ctx context.Context) error {
				_, err := e.queue.WithdrawBlock(ctx, &nightloomv1.WithdrawBlockRequest{BlockId: id, Reason: "auth test"})
				return err
			}
		},
		nightloomv1.QueueService_ReportProgress_FullMethodName: func(*testing.T) func(ctx context.Context) error {
			id := fmt.Sprintf("auth-report-%d", next())
			return func(ctx context.Context) error {
				e.clock.Set(p0.Add(2 * time.Hour)) // a report comes after its run
				_, err := e.queue.ReportProgress(ctx, &nightloomv1.ReportProgressRequest{Report: &nightloomv1.ProgressReport{
					ReportId: id, BlockId: blk, FramesKept: 0,
					Interval: &nightloomv1.TimeInterval{Start: ts(p0), End: ts(p0.Add(time.Minute))},
					Outcome:  nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_SKIPPED}})
				return err
			}
		},
		nightloomv1.PlanService_MakePlan_FullMethodName: now(func(ctx context.Context) error {
			_, err := e.plans.MakePlan(ctx, &nightloomv1.MakePlanRequest{SiteId: site, Span: night, LookaheadNights: proto.Int32(0), TimeBudget: dur(0)})
			return err
		}),
		nightloomv1.PlanService_GetPlan_FullMethodName: now(func(ctx context.Context) error {
			_, err := e.plans.GetPlan(ctx, &nightloomv1.GetPlanRequest{PlanId: plan.GetId()})
			return err
		}),
		nightloomv1.PlanService_ListPlans_FullMethodName: now(func(ctx context.Context) error {
			_, err := e.plans.ListPlans(ctx, &nightloomv1.ListPlansRequest{SiteId: site})
			return err
		}),
		nightloomv1.PlanService_Replan_FullMethodName: now(func(ctx context.Context) error {
			_, err := e.plans.Replan(ctx, &nightloomv1.ReplanRequest{SiteId: site, From: ts(p0.Add(time.Hour)), TimeBudget: dur(0)})
			return err
		}),
		nightloomv1.PlanService_NextAssignment_FullMethodName: now(func(ctx context.Context) error {
			_, err := e.plans.NextAssignment(ctx, &nightloomv1.NextAssignmentRequest{SiteId: site, Now: ts(p0.Add(time.Hour))})
			return err
		}),
		nightloomv1.PlanService_WatchPlans_FullMethodName: now(func(ctx context.Context) error {
			ctx, cancel := context.WithCancel(ctx)
			defer cancel()
			st, err := e.plans.WatchPlans(ctx, &nightloomv1.WatchPlansRequest{SiteId: site, SendCurrent: true})
			if err != nil {
				return err
			}
			_, err = st.Recv()
			return err
		}),
		nightloomv1.SkyService_Ephemeris_FullMethodName: now(func(ctx context.Context) error {
			_, err := e.sky.Ephemeris(ctx, &nightloomv1.EphemerisRequest{SiteId: site, Subject: &nightloomv1.EphemerisRequest_TargetId{TargetId: tgt},
				Interval: &nightloomv1.TimeInterval{Start: ts(p0), End: ts(p0.Add(3 * time.Hour))}})
			return err
		}),
		nightloomv1.SkyService_Night_FullMethodName: now(func(ctx context.Context) error {
			_, err := e.sky.Night(ctx, &nightloomv1.NightRequest{SiteId: site, Date: testNight})
			return err
		}),
		nightloomv1.CatalogueService_LookupName_FullMethodName: now(func(ctx context.Context) error {
			_, err := nightloomv1.NewCatalogueServiceClient(e.conn).LookupName(ctx, &nightloomv1.LookupNameRequest{Name: "M 31"})
			return err
		}),
		nightloomv1.CatalogueService_SearchCatalogue_FullMethodName: now(func(ctx context.Context) error {
			_, err := nightloomv1.NewCatalogueServiceClient(e.conn).SearchCatalogue(ctx, &nightloomv1.SearchCatalogueRequest{Type: "galaxy", PageSize: 3})
			return err
		}),
		nightloomv1.SkyService_Visibility_FullMethodName: now(func(ctx context.Context) error {
			_, err := e.sky.Visibility(ctx, &nightloomv1.VisibilityRequest{SiteId: site, Subject: &nightloomv1.VisibilityRequest_TargetId{TargetId: tgt},
				Span: &nightloomv1.VisibilityRequest_Night{Night: testNight}})
			return err
		}),
		nightloomv1.ApparitionService_ReportMagnitudes_FullMethodName: func(t *testing.T) func(ctx context.Context) error {
			return func(ctx context.Context) error {
				_, err := nightloomv1.NewApparitionServiceClient(e.conn).ReportMagnitudes(ctx, &nightloomv1.ReportMagnitudesRequest{TargetId: comet,
					Observations: []*nightloomv1.MagnitudeObservation{{Id: newID("obs-"), Time: ts(p0), Magnitude: 9, SigmaMag: 0.2}}})
				return err
			}
		},
		nightloomv1.ApparitionService_RefitMagnitudeLaw_FullMethodName: func(t *testing.T) func(ctx context.Context) error {
			cl := nightloomv1.NewApparitionServiceClient(e.conn)
			_, err := cl.ReportMagnitudes(e.admin(), &nightloomv1.ReportMagnitudesRequest{TargetId: comet,
				Observations: []*nightloomv1.MagnitudeObservation{{Id: newID("obs-"), Time: ts(p0), Magnitude: 9, SigmaMag: 0.2},
					{Id: newID("obs-"), Time: ts(p0.Add(48 * time.Hour)), Magnitude: 8.8, SigmaMag: 0.2}}})
			if err != nil {
				t.Fatal(err)
			}
			return func(ctx context.Context) error {
				_, err := cl.RefitMagnitudeLaw(ctx, &nightloomv1.RefitMagnitudeLawRequest{TargetId: comet})
				return err
			}
		},
		nightloomv1.ApparitionService_MagnitudeHistory_FullMethodName: now(func(ctx context.Context) error {
			_, err := nightloomv1.NewApparitionServiceClient(e.conn).MagnitudeHistory(ctx, &nightloomv1.MagnitudeHistoryRequest{TargetId: comet})
			return err
		}),
		nightloomv1.ApparitionService_Outlook_FullMethodName: now(func(ctx context.Context) error {
			_, err := nightloomv1.NewApparitionServiceClient(e.conn).Outlook(ctx, &nightloomv1.OutlookRequest{SiteId: site,
				Subject: &nightloomv1.OutlookRequest_TargetId{TargetId: tgt}, FirstNight: testNight, Nights: 2, Step: dur(30 * time.Minute)})
			return err
		}),
	}
}

// specRoles is who may call what, written out from the roles of issue 5
// as auth.go states them (viewer reads sites, targets, the queue, plans and
// the sky; operator also queues, withdraws and plans; telescope reads the
// queue and plans, asks for the next assignment, watches and reports
// progress, (issue 11) replans, and since issue 14 reads its site and the targets; admin does
// everything), independently of methodRoles, so that
// an edit of the table that widens or narrows a right fails here.
var specRoles = func() map[string][]Role {
	v, o, tel, a := RoleViewer, RoleOperator, RoleTelescope, RoleAdmin
	read, queueRead, plan, report, admin := []Role{v, o, a}, []Role{v, o, tel, a}, []Role{o, a}, []Role{tel, o, a}, []Role{a}
	return map[string][]Role{
		nightloomv1.SiteService_CreateSite_FullMethodName:              admin,
		nightloomv1.SiteService_GetSite_FullMethodName:                 queueRead,
		nightloomv1.SiteService_ListSites_FullMethodName:               read,
		nightloomv1.SiteService_UpdateSite_FullMethodName:              admin,
		nightloomv1.SiteService_DeleteSite_FullMethodName:              admin,
		nightloomv1.TargetService_CreateTarget_FullMethodName:          admin,
		nightloomv1.TargetService_GetTarget_FullMethodName:             queueRead,
		nightloomv1.TargetService_ListTargets_FullMethodName:           queueRead,
		nightloomv1.TargetService_UpdateTarget_FullMethodName:          admin,
		nightloomv1.TargetService_DeleteTarget_FullMethodName:          admin,
		nightloomv1.TargetService_ImportElements_FullMethodName:        admin,
		nightloomv1.QueueService_QueueBlocks_FullMethodName:            plan,
		nightloomv1.QueueService_GetBlock_FullMethodName:               queueRead,
		nightloomv1.QueueService_ListBlocks_FullMethodName:             queueRead,
		nightloomv1.QueueService_WithdrawBlock_FullMethodName:          plan,
		nightloomv1.QueueService_ReportProgress_FullMethodName:         report,
		nightloomv1.PlanService_MakePlan_FullMethodName:                plan,
		nightloomv1.PlanService_GetPlan_FullMethodName:                 queueRead,
		nightloomv1.PlanService_ListPlans_FullMethodName:               queueRead,
		nightloomv1.PlanService_Replan_FullMethodName:                  report,
		nightloomv1.PlanService_NextAssignment_FullMethodName:          queueRead,
		nightloomv1.PlanService_WatchPlans_FullMethodName:              queueRead,
		nightloomv1.SkyService_Ephemeris_FullMethodName:                read,
		nightloomv1.SkyService_Night_FullMethodName:                    read,
		nightloomv1.SkyService_Visibility_FullMethodName:               read,
		nightloomv1.ApparitionService_Outlook_FullMethodName:           read,
		nightloomv1.ApparitionService_ReportMagnitudes_FullMethodName:  report,
		nightloomv1.ApparitionService_RefitMagnitudeLaw_FullMethodName: plan,
		nightloomv1.ApparitionService_MagnitudeHistory_FullMethodName:  read,
		nightloomv1.CatalogueService_LookupName_FullMethodName:         read,
		nightloomv1.CatalogueService_SearchCatalogue_FullMethodName:    read,
		nightloomv1.QueueService_UpdateBlock_FullMethodName:            plan,
		nightloomv1.QueueService_WithdrawBlocks_FullMethodName:         plan,
		nightloomv1.ExportService_ExportPlan_FullMethodName:            queueRead,
		nightloomv1.ProgramService_CreateProgram_FullMethodName:        admin,
		nightloomv1.ProgramService_GetProgram_FullMethodName:           read,
		nightloomv1.ProgramService_ListPrograms_FullMethodName:         read,
		nightloomv1.ProgramService_UpdateProgram_FullMethodName:        admin,
		nightloomv1.ProgramService_DeleteProgram_FullMethodName:        admin,
		nightloomv1.ProgramService_GetProgramUsage_FullMethodName:      read,
		nightloomv1.NetworkService_CreateNetwork_FullMethodName:        admin,
		nightloomv1.NetworkService_GetNetwork_FullMethodName:           queueRead,
		nightloomv1.NetworkService_ListNetworks_FullMethodName:         queueRead,
		nightloomv1.NetworkService_DeleteNetwork_FullMethodName:        admin,
		nightloomv1.NetworkService_MakeNetworkPlan_FullMethodName:      plan,
		nightloomv1.NetworkService_ReplanNetwork_FullMethodName:        report,
	}
}()

// TestEveryRPCByRole: for every RPC of the descriptors, a valid request
// that would succeed (and, for the mutating ones, write) is refused with
// UNAUTHENTICATED without a token and with a wrong one, with
// PERMISSION_DENIED for each role the method table does not list, and the
// database is unchanged after each refusal; each listed role succeeds. The
// auth interceptor runs before validation, so a refusal cannot depend on
// the request's content: auth_test.go sends empty requests, this test
// sends good ones. The roles expected are specRoles, not the table the
// server uses.
func TestEveryRPCByRole(t *testing.T) {
	e := newEnv(t, "", func(c *Config) { c.ReplanPriority = -1 })
	f := e.seed(t, 3)
	mk, err := e.plans.MakePlan(as(RoleOperator, e), &nightloomv1.MakePlanRequest{SiteId: f.site.GetId(),
		Span: &nightloomv1.MakePlanRequest_Night{Night: testNight}, LookaheadNights: proto.Int32(0), TimeBudget: dur(0)})
	if err != nil {
		t.Fatal(err)
	}
	calls := validCalls(e, f, mk.GetPlans()[0])
	probe := newWriteProbe(t, e.dbPath)
	wrong, _ := NewTokenSecret()
	refused, allowedOK := 0, 0
	for _, r := range apiRPCs(t) {
		prep, ok := calls[r.full]
		if !ok {
			t.Errorf("%s: no valid request in validCalls; add one", r.full)
			continue
		}
		delete(calls, r.full)
		allowed, ok := specRoles[r.full]
		if !ok {
			t.Errorf("%s: not in specRoles; say who may call it", r.full)
		}
		if table, _ := MethodRoles(r.full); !sameRoles(table, allowed) {
			t.Errorf("%s: methodRoles allows %v, the specification %v", r.full, table, allowed)
		}
		try := func(who string, ctx context.Context, want codes.Code) {
			call := prep(t)
			probe.reset(t)
			err := call(ctx)
			if got := status.Code(err); got != want {
				t.Errorf("%s as %s: code %v, want %v (%v)", r.full, who, got, want, err)
			}
			if want != codes.OK {
				refused++
				if probe.wrote(t) {
					t.Errorf("%s as %s: the refused call wrote to the database", r.full, who)
				}
			} else {
				allowedOK++
			}
		}
		try("no token", context.Background(), codes.Unauthenticated)
		try("a wrong token", withToken(context.Background(), wrong), codes.Unauthenticated)
		for _, role := range Roles {
			want := codes.PermissionDenied
			if slices.Contains(allowed, role) {
				want = codes.OK
			}
			try(string(role), as(role, e), want)
		}
	}
	for m := range calls {
		t.Errorf("validCalls has %s, which no descriptor defines", m)
	}
	t.Logf("%d refusals (none wrote), %d allowed calls succeeded", refused, allowedOK)
}

func sameRoles(a, b []Role) bool {
	a, b = slices.Clone(a), slices.Clone(b)
	slices.Sort(a)
	slices.Sort(b)
	return slices.Equal(a, b)
}

// secretWindows returns every substring of n bytes of the secret's random
// part: none may appear anywhere a client or an operator can read.
func secretWindows(secret string, n int) []string {
	body := strings.TrimPrefix(secret, tokenPrefixSecret)
	var out []string
	for i := 0; i+n <= len(body); i++ {
		out = append(out, body[i:i+n])
	}
	return out
}

// TestSecretsNeverEchoed calls every RPC with authorization metadata that
// carries a real secret in a wrong shape (another scheme, no scheme, an
// altered or truncated token, an overlong value, a revoked token) and with
// the good token: no status message, no status detail, no response header
// or trailer, and no log line at debug level contains the secret or any 16
// bytes of it. The logs must name every refused call, so that an empty
// capture cannot pass.
func TestSecretsNeverEchoed(t *testing.T) {
	var logs syncBuffer
	logger := slog.New(slog.NewJSONHandler(&logs, &slog.HandlerOptions{Level: slog.LevelDebug}))
	e := newEnv(t, "", func(c *Config) { c.Logger = logger })
	admin := e.tokens[RoleAdmin]
	revoked, rec, err := e.srv.CreateToken(context.Background(), RoleAdmin, "revoked for the echo test")
	if err != nil {
		t.Fatal(err)
	}
	if _, err := e.srv.Storage().RevokeToken(context.Background(), rec.ID); err != nil {
		t.Fatal(err)
	}
	// The altered token differs from the real one in its last character
	// (a fixed replacement would equal it whenever the token already ends
	// with that character, one run in 64).
	last := "Q"
	if strings.HasSuffix(admin, last) {
		last = "R"
	}
	shapes := []struct {
		name, value string
	}{
		{"basic scheme", "Basic " + admin},
		{"no scheme", admin},
		{"altered", "Bearer " + admin[:len(admin)-1] + last},
		{"truncated", "Bearer " + admin[:len(admin)-5]},
		{"extra words", "Bearer " + admin + " and more"},
		{"overlong", "Bearer " + strings.Repeat(admin, 20)},
		{"revoked", "Bearer " + revoked},
		{"good", "Bearer " + admin},
	}
	var leaks []string
	look := func(where, text string) {
		for _, secret := range []string{admin, revoked} {
			for _, w := range secretWindows(secret, 16) {
				if strings.Contains(text, w) {
					leaks = append(leaks, fmt.Sprintf("%s holds %q of a secret", where, w))
					return
				}
			}
		}
	}
	rpcs := apiRPCs(t)
	unauth := 0
	for _, r := range rpcs {
		for _, s := range shapes {
			var hdr, trl metadata.MD
			ctx := metadata.AppendToOutgoingContext(context.Background(), "authorization", s.value)
			err := invokeEmpty(ctx, e.conn, r, grpc.Header(&hdr), grpc.Trailer(&trl))
			st := status.Convert(err)
			if s.name != "good" {
				if st.Code() != codes.Unauthenticated {
					t.Errorf("%s with %s: code %v, want Unauthenticated", r.full, s.name, st.Code())
				}
				unauth++
			}
			where := r.full + " with " + s.name
			look(where+": status message", st.Message())
			for _, d := range st.Details() {
				look(where+": status detail", fmt.Sprint(d))
			}
			look(where+": header", fmt.Sprint(hdr))
			look(where+": trailer", fmt.Sprint(trl))
		}
	}
	text := logs.String()
	look("the logs", text)
	for _, l := range leaks {
		t.Error(l)
	}
	if n := strings.Count(text, `"code":"Unauthenticated"`); n < unauth {
		t.Errorf("the logs name %d refused calls, want at least %d (is the capture working?)", n, unauth)
	}
	t.Logf("%d RPCs x %d authorization shapes; %d refusals logged, no secret in %d bytes of logs", len(rpcs), len(shapes), unauth, len(text))
}

// invokeEmpty is callRPC (auth_test.go) with call options: an empty
// request, or the first message of a server stream.
func invokeEmpty(ctx context.Context, conn *grpc.ClientConn, r rpc, opts ...grpc.CallOption) error {
	inT, err := protoregistry.GlobalTypes.FindMessageByName(r.md.Input().FullName())
	if err != nil {
		return err
	}
	outT, err := protoregistry.GlobalTypes.FindMessageByName(r.md.Output().FullName())
	if err != nil {
		return err
	}
	ctx, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	in, out := inT.New().Interface(), outT.New().Interface()
	if r.md.IsStreamingServer() {
		st, err := conn.NewStream(ctx, &grpc.StreamDesc{ServerStreams: true}, r.full, opts...)
		if err != nil {
			return err
		}
		if err := st.SendMsg(in); err != nil {
			return err
		}
		if err := st.CloseSend(); err != nil {
			return err
		}
		return st.RecvMsg(out)
	}
	return conn.Invoke(ctx, r.full, in, out, opts...)
}

// fakeListener is a listener with any address that accepts nothing, for
// the loopback rule of Config.Listener without binding a non-loopback
// address.
type fakeListener struct {
	addr   net.Addr
	once   sync.Once
	closed chan struct{}
}

func newFakeListener(addr net.Addr) *fakeListener {
	return &fakeListener{addr: addr, closed: make(chan struct{})}
}

func (l *fakeListener) Accept() (net.Conn, error) { <-l.closed; return nil, net.ErrClosed }
func (l *fakeListener) Close() error              { l.once.Do(func() { close(l.closed) }); return nil }
func (l *fakeListener) Addr() net.Addr            { return l.addr }

// TestListenerLoopbackRule: a listener given in Config.Listener follows the
// same rule as Config.Listen (daemon_test.go covers addresses): plaintext
// only on a loopback address unless InsecureListen or TLS; the refusal
// comes before the database is opened.
func TestListenerLoopbackRule(t *testing.T) {
	p := newPKI(t)
	cases := []struct {
		ip            string
		tls, insecure bool
		refused       bool
	}{
		{"127.0.0.1", false, false, false},
		{"127.8.9.10", false, false, false},
		{"::1", false, false, false},
		{"192.0.2.10", false, false, true},  // TEST-NET-1 (RFC 5737)
		{"2001:db8::7", false, false, true}, // documentation prefix (RFC 3849)
		{"0.0.0.0", false, false, true},
		{"::", false, false, true},
		{"192.0.2.10", true, false, false},
		{"192.0.2.10", false, true, false},
	}
	for _, c := range cases {
		name := fmt.Sprintf("%s tls=%v insecure=%v", c.ip, c.tls, c.insecure)
		db := filepath.Join(t.TempDir(), "l.db")
		cfg := Config{Listener: newFakeListener(&net.TCPAddr{IP: net.ParseIP(c.ip), Port: 7878}), DBPath: db,
			InsecureListen: c.insecure, Logger: quietLogger(t)}
		if c.tls {
			cfg.TLSCertFile, cfg.TLSKeyFile = p.certFile, p.keyFile
		}
		srv, err := Start(context.Background(), cfg)
		if c.refused {
			if !errors.Is(err, ErrInsecureListen) {
				t.Errorf("%s: Start = %v, want ErrInsecureListen", name, err)
			}
			if srv != nil {
				_ = srv.Shutdown(context.Background())
			}
			if _, statErr := os.Stat(db); statErr == nil {
				t.Errorf("%s: the refused start created the database", name)
			}
			continue
		}
		if err != nil {
			t.Errorf("%s: Start = %v, want it to serve", name, err)
			continue
		}
		if err := srv.Shutdown(context.Background()); err != nil {
			t.Errorf("%s: Shutdown: %v", name, err)
		}
	}
}

// FuzzRequestEndToEnd decodes arbitrary bytes as the request of one of the
// unary RPCs that carry user data (chosen by the first byte, in the order
// of the descriptors) and sends it as admin through gRPC to a server on a
// real SQLite file. Ids "SITE", "TGT0".."TGT4", "BLK0".."BLK2" and "PLAN"
// in any string field stand for the fixture's records, so that mutations
// reach the checks behind the lookups. Whatever the input:
//
//   - the call ends in time with OK, INVALID_ARGUMENT, NOT_FOUND,
//     FAILED_PRECONDITION, ALREADY_EXISTS or RESOURCE_EXHAUSTED: never
//     INTERNAL, UNKNOWN (a panic or an unmapped error) or a deadline;
//   - INVALID_ARGUMENT carries a BadRequest whose every violation names a
//     field path of the request message (field names, [i] indices, oneof
//     names) with a description;
//   - every call that is not OK writes nothing (writeProbe);
//   - an OK response (which for the writing calls is decoded from the
//     stored bytes) holds no NaN or infinity.
//
// DeleteSite and DeleteTarget are left out (they only take an id and
// would delete the fixture), as are WatchPlans (a stream; see
// TestSlowWatcherIsCutOff) and the plain Get calls. Solver budgets above
// 20 ms, more than 3 nights and lookaheads above 2 nights are lowered to
// keep each input fast; values out of range are left for validation to
// refuse.
func FuzzRequestEndToEnd(f *testing.F) {
	kinds := fuzzKinds(f)
	e := newEnv(f, "", func(c *Config) { c.ReplanPriority = -1 })
	fx := e.seed(f, 3)
	mk, err := e.plans.MakePlan(as(RoleOperator, e), &nightloomv1.MakePlanRequest{SiteId: fx.site.GetId(),
		Span: &nightloomv1.MakePlanRequest_Night{Night: testNight}, LookaheadNights: proto.Int32(0), TimeBudget: dur(0)})
	if err != nil {
		f.Fatal(err)
	}
	ids := map[string]string{"SITE": fx.site.GetId(), "PLAN": mk.GetPlans()[0].GetId()}
	for i, tg := range fx.targets {
		ids[fmt.Sprintf("TGT%d", i)] = tg.GetId()
	}
	for i, b := range fx.blocks {
		ids[fmt.Sprintf("BLK%d", i)] = b.GetId()
	}
	probe := newWriteProbe(f, e.dbPath)
	for _, s := range fuzzSeeds(mk.GetPlans()[0]) {
		k := slices.IndexFunc(kinds, func(r rpc) bool { return r.full == s.method })
		if k < 0 {
			f.Fatalf("seed for %s, which is not a fuzzed RPC", s.method)
		}
		b, err := proto.Marshal(s.req)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(append([]byte{byte(k)}, b...))
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		if len(data) == 0 {
			return
		}
		r := kinds[int(data[0])%len(kinds)]
		inT, _ := protoregistry.GlobalTypes.FindMessageByName(r.md.Input().FullName())
		outT, _ := protoregistry.GlobalTypes.FindMessageByName(r.md.Output().FullName())
		req, resp := inT.New().Interface(), outT.New().Interface()
		if proto.Unmarshal(data[1:], req) != nil {
			return
		}
		resolveIDs(req.ProtoReflect(), ids)
		tame(req)
		probe.reset(t)
		ctx, cancel := context.WithTimeout(e.admin(), 20*time.Second)
		defer cancel()
		err := e.conn.Invoke(ctx, r.full, req, resp)
		st := status.Convert(err)
		t.Logf("%s: %v %s", r.full, st.Code(), st.Message())
		switch st.Code() {
		case codes.OK:
			if p := nonFinite(resp); p != "" {
				t.Fatalf("%s: OK response with non-finite %s", r.full, p)
			}
			return
		case codes.InvalidArgument:
			var n int
			for _, d := range st.Details() {
				br, ok := d.(*errdetails.BadRequest)
				if !ok {
					continue
				}
				for _, fv := range br.GetFieldViolations() {
					n++
					if fv.GetDescription() == "" || !fieldPathOf(req.ProtoReflect().Descriptor(), fv.GetField()) {
						t.Fatalf("%s: violation %q (%q) names no field of %s", r.full, fv.GetField(), fv.GetDescription(), r.md.Input().FullName())
					}
				}
			}
			if n == 0 {
				t.Fatalf("%s: INVALID_ARGUMENT without field violations: %v", r.full, err)
			}
		case codes.NotFound, codes.FailedPrecondition, codes.AlreadyExists, codes.ResourceExhausted:
		default:
			t.Fatalf("%s: %v (request %v)", r.full, err, req)
		}
		if probe.wrote(t) {
			t.Fatalf("%s refused with %v wrote to the database (request %v)", r.full, st.Code(), req)
		}
	})
}

// fuzzKinds lists the fuzzed RPCs in descriptor order.
func fuzzKinds(t testing.TB) []rpc {
	skip := map[string]bool{
		nightloomv1.SiteService_DeleteSite_FullMethodName:     true,
		nightloomv1.TargetService_DeleteTarget_FullMethodName: true,
		nightloomv1.SiteService_GetSite_FullMethodName:        true,
		nightloomv1.TargetService_GetTarget_FullMethodName:    true,
		nightloomv1.QueueService_GetBlock_FullMethodName:      true,
		nightloomv1.PlanService_GetPlan_FullMethodName:        true,
	}
	var out []rpc
	for _, r := range apiRPCs(t) {
		if !skip[r.full] && !r.md.IsStreamingServer() && !r.md.IsStreamingClient() {
			out = append(out, r)
		}
	}
	return out
}

type fuzzSeed struct {
	method string
	req    proto.Message
}

// fuzzSeeds are a good and a bad request of each fuzzed RPC, with
// placeholder ids (see FuzzRequestEndToEnd).
func fuzzSeeds(plan *nightloomv1.Plan) []fuzzSeed {
	p0 := plan.GetInterval().GetStart().AsTime()
	iv := func(a, b time.Duration) *nightloomv1.TimeInterval {
		return &nightloomv1.TimeInterval{Start: ts(p0.Add(a)), End: ts(p0.Add(b))}
	}
	site := testSite()
	badSite := testSite()
	badSite.Horizon[1].AzimuthDeg = 400
	blk := testBlock("SITE", "TGT0", "L", 10, 5)
	blk.Constraints.LocalTimeWindow = &nightloomv1.LocalTimeWindow{Start: &nightloomv1.LocalTimeOfDay{Hour: 22}, End: &nightloomv1.LocalTimeOfDay{Hour: 2}}
	blk.Cadence = &nightloomv1.Cadence{Interval: dur(time.Hour), Tolerance: dur(10 * time.Minute)}
	blk.EarliestDate, blk.LatestDate = &nightloomv1.LocalDate{Year: 2031, Month: 3, Day: 1}, &nightloomv1.LocalDate{Year: 2031, Month: 4, Day: 30}
	comet := testBlock("SITE", "TGT4", "Ha", 4, 9)
	comet.NonSiderealTracking = true
	comet.Constraints.MinSolarElongationDeg = proto.Float64(20)
	comet.Constraints.FaintestMagnitude = proto.Float64(12)
	night := &nightloomv1.MakePlanRequest_Night{Night: testNight}
	closure := []*nightloomv1.Closure{{Interval: iv(time.Hour, 2*time.Hour), Reason: "cloud"}}
	report := &nightloomv1.ProgressReport{ReportId: "fz-1", BlockId: "BLK0", FramesKept: 2, Interval: iv(time.Hour, time.Hour+5*time.Minute),
		Outcome: nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE, PlanId: "PLAN"}
	return []fuzzSeed{
		{nightloomv1.SiteService_CreateSite_FullMethodName, &nightloomv1.CreateSiteRequest{Site: site}},
		{nightloomv1.SiteService_CreateSite_FullMethodName, &nightloomv1.CreateSiteRequest{Site: badSite}},
		{nightloomv1.SiteService_ListSites_FullMethodName, &nightloomv1.ListSitesRequest{PageSize: 5, PageToken: "x"}},
		{nightloomv1.SiteService_UpdateSite_FullMethodName, &nightloomv1.UpdateSiteRequest{Site: &nightloomv1.Site{Id: "SITE", LatitudeDeg: 41.7,
			Horizon: []*nightloomv1.HorizonPoint{{AzimuthDeg: 10, AltitudeDeg: 4}, {AzimuthDeg: 200, AltitudeDeg: 9}}},
			UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"latitude_deg", "horizon"}}}},
		{nightloomv1.SiteService_UpdateSite_FullMethodName, &nightloomv1.UpdateSiteRequest{Site: &nightloomv1.Site{Id: "SITE"},
			UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"mount.primary_axis.rate_deg_per_s", "id"}}}},
		{nightloomv1.TargetService_CreateTarget_FullMethodName, &nightloomv1.CreateTargetRequest{Target: testComet()}},
		{nightloomv1.TargetService_CreateTarget_FullMethodName, &nightloomv1.CreateTargetRequest{Target: testFixed("Quillfen Galaxy", 152, 31)}},
		{nightloomv1.TargetService_ListTargets_FullMethodName, &nightloomv1.ListTargetsRequest{PageSize: 2}},
		{nightloomv1.TargetService_UpdateTarget_FullMethodName, &nightloomv1.UpdateTargetRequest{Target: &nightloomv1.Target{Id: "TGT4",
			Position: &nightloomv1.Target_Orbit{Orbit: &nightloomv1.OrbitElements{PerihelionDistanceAu: 0.3, Eccentricity: 1.2, InclinationDeg: 40,
				PerihelionTimeTt: ts(p0)}}}, UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"orbit"}}}},
		{nightloomv1.QueueService_QueueBlocks_FullMethodName, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{blk, comet}, RequestId: "fz-q"}},
		{nightloomv1.QueueService_ListBlocks_FullMethodName, &nightloomv1.ListBlocksRequest{SiteId: "SITE", TargetId: "TGT0",
			States: []nightloomv1.BlockState{nightloomv1.BlockState_BLOCK_STATE_OPEN, nightloomv1.BlockState_BLOCK_STATE_COMPLETED}, PageSize: 3}},
		{nightloomv1.QueueService_WithdrawBlock_FullMethodName, &nightloomv1.WithdrawBlockRequest{BlockId: "BLK2", Reason: "fuzz"}},
		{nightloomv1.QueueService_ReportProgress_FullMethodName, &nightloomv1.ReportProgressRequest{Report: report}},
		{nightloomv1.PlanService_MakePlan_FullMethodName, &nightloomv1.MakePlanRequest{SiteId: "SITE", Span: night, Nights: 2, GridStep: dur(2 * time.Minute),
			LookaheadNights: proto.Int32(1), TimeBudget: dur(5 * time.Millisecond), Closures: closure, Seed: 7}},
		{nightloomv1.PlanService_MakePlan_FullMethodName, &nightloomv1.MakePlanRequest{SiteId: "SITE",
			Span: &nightloomv1.MakePlanRequest_Interval{Interval: iv(30*time.Minute, 3*time.Hour)}, LookaheadNights: proto.Int32(0)}},
		{nightloomv1.PlanService_ListPlans_FullMethodName, &nightloomv1.ListPlansRequest{SiteId: "SITE", Night: testNight, PageSize: 1}},
		{nightloomv1.PlanService_Replan_FullMethodName, &nightloomv1.ReplanRequest{SiteId: "SITE", PlanId: "PLAN", From: ts(p0.Add(2 * time.Hour)),
			Closures: closure, TimeBudget: dur(5 * time.Millisecond)}},
		{nightloomv1.PlanService_Replan_FullMethodName, &nightloomv1.ReplanRequest{SiteId: "SITE", From: ts(p0.Add(2 * time.Hour))}},
		{nightloomv1.PlanService_NextAssignment_FullMethodName, &nightloomv1.NextAssignmentRequest{SiteId: "SITE", Now: ts(p0.Add(3 * time.Hour)),
			State: &nightloomv1.TelescopeState{Position: &nightloomv1.HorizontalPosition{AltitudeDeg: 40, AzimuthDeg: 120}, Filter: "R",
				LastFocusTime: ts(p0.Add(time.Hour))}}},
		{nightloomv1.SkyService_Ephemeris_FullMethodName, &nightloomv1.EphemerisRequest{SiteId: "SITE",
			Subject: &nightloomv1.EphemerisRequest_TargetId{TargetId: "TGT4"}, Interval: iv(0, 12*time.Hour), Step: dur(30 * time.Minute)}},
		{nightloomv1.SkyService_Ephemeris_FullMethodName, &nightloomv1.EphemerisRequest{SiteId: "SITE",
			Subject: &nightloomv1.EphemerisRequest_Target{Target: testComet()}, Interval: iv(0, 2*time.Hour)}},
		{nightloomv1.SkyService_Night_FullMethodName, &nightloomv1.NightRequest{SiteId: "SITE", Date: testNight}},
		{nightloomv1.SkyService_Visibility_FullMethodName, &nightloomv1.VisibilityRequest{Subject: &nightloomv1.VisibilityRequest_BlockId{BlockId: "BLK1"},
			Span: &nightloomv1.VisibilityRequest_Night{Night: testNight}}},
		{nightloomv1.SkyService_Visibility_FullMethodName, &nightloomv1.VisibilityRequest{SiteId: "SITE",
			Subject:     &nightloomv1.VisibilityRequest_Target{Target: testComet()},
			Constraints: comet.GetConstraints(), Exposure: dur(time.Minute), NonSiderealTracking: true,
			Span: &nightloomv1.VisibilityRequest_Interval{Interval: iv(0, 6*time.Hour)}, Step: dur(5 * time.Minute)}},
		{nightloomv1.ApparitionService_Outlook_FullMethodName, &nightloomv1.OutlookRequest{SiteId: "SITE",
			Subject: &nightloomv1.OutlookRequest_Target{Target: testComet()}, FirstNight: testNight, Nights: 2, Step: dur(30 * time.Minute)}},
		{nightloomv1.TargetService_ImportElements_FullMethodName, &nightloomv1.ImportElementsRequest{RequestId: "imp-seed", Text: importComet}},
		{nightloomv1.ApparitionService_ReportMagnitudes_FullMethodName, &nightloomv1.ReportMagnitudesRequest{TargetId: "TGT4",
			Observations: []*nightloomv1.MagnitudeObservation{{Id: "obs-seed", Time: ts(p0), Magnitude: 9, SigmaMag: 0.2}}}},
		{nightloomv1.ApparitionService_RefitMagnitudeLaw_FullMethodName, &nightloomv1.RefitMagnitudeLawRequest{TargetId: "TGT4"}},
		{nightloomv1.ApparitionService_MagnitudeHistory_FullMethodName, &nightloomv1.MagnitudeHistoryRequest{TargetId: "TGT4"}},
	}
}

// resolveIDs replaces placeholder ids in every singular string field.
func resolveIDs(m protoreflect.Message, ids map[string]string) {
	m.Range(func(fd protoreflect.FieldDescriptor, v protoreflect.Value) bool {
		switch {
		case fd.IsList() && fd.Kind() == protoreflect.MessageKind:
			for i := 0; i < v.List().Len(); i++ {
				resolveIDs(v.List().Get(i).Message(), ids)
			}
		case fd.IsList() || fd.IsMap():
		case fd.Kind() == protoreflect.MessageKind:
			resolveIDs(v.Message(), ids)
		case fd.Kind() == protoreflect.StringKind:
			if id, ok := ids[v.String()]; ok {
				m.Set(fd, protoreflect.ValueOfString(id))
			}
		}
		return true
	})
}

// tame lowers the costly knobs that are within their valid ranges (see
// FuzzRequestEndToEnd).
func tame(m proto.Message) {
	switch r := m.(type) {
	case *nightloomv1.MakePlanRequest:
		if tb := r.GetTimeBudget(); tb == nil || (tb.CheckValid() == nil && tb.AsDuration() > 20*time.Millisecond && tb.AsDuration() <= MaxTimeBudget) {
			r.TimeBudget = dur(20 * time.Millisecond)
		}
		if r.Nights > 3 && r.Nights <= MaxPlanNights {
			r.Nights = 3
		}
		if r.LookaheadNights == nil || (r.GetLookaheadNights() > 2 && r.GetLookaheadNights() <= MaxLookaheadNights) {
			r.LookaheadNights = proto.Int32(min(2, max(0, r.GetLookaheadNights())))
		}
	case *nightloomv1.ReplanRequest:
		if tb := r.GetTimeBudget(); tb == nil || (tb.CheckValid() == nil && tb.AsDuration() > 20*time.Millisecond && tb.AsDuration() <= MaxTimeBudget) {
			r.TimeBudget = dur(20 * time.Millisecond)
		}
	}
}

// fieldPathOf reports whether path ("site.horizon[3].altitude_deg",
// "span", "update_mask.paths[0]") names a field, or a oneof, of md.
func fieldPathOf(md protoreflect.MessageDescriptor, path string) bool {
	segs := strings.Split(path, ".")
	for i, seg := range segs {
		name, rest, indexed := strings.Cut(seg, "[")
		if indexed && (!strings.HasSuffix(rest, "]") || strings.ContainsAny(strings.TrimSuffix(rest, "]"), "[]")) {
			return false
		}
		fd := md.Fields().ByName(protoreflect.Name(name))
		if fd == nil {
			// A oneof is named by its name, as the last segment.
			return !indexed && i == len(segs)-1 && md.Oneofs().ByName(protoreflect.Name(name)) != nil
		}
		if indexed && !fd.IsList() {
			return false
		}
		if i < len(segs)-1 {
			if fd.Kind() != protoreflect.MessageKind || fd.IsMap() {
				return false
			}
			md = fd.Message()
		}
	}
	return true
}

func TestFieldPathOf(t *testing.T) {
	md := (&nightloomv1.UpdateSiteRequest{}).ProtoReflect().Descriptor()
	for path, want := range map[string]bool{
		"site":                                   true,
		"site.horizon[3].altitude_deg":           true,
		"site.mount.primary_axis.rate_deg_per_s": true,
		"update_mask.paths[0]":                   true,
		"site.horizon.altitude_deg":              true, // a list's element fields, without an index
		"site.latitude_deg[1]":                   false,
		"site.nonesuch":                          false,
		"site.name.first":                        false,
		"site.horizon[3":                         false,
		"":                                       false,
		"site.mount.primary_axis.rate_deg_per_s.x": false,
	} {
		if got := fieldPathOf(md, path); got != want {
			t.Errorf("fieldPathOf(UpdateSiteRequest, %q) = %v, want %v", path, got, want)
		}
	}
	mp := (&nightloomv1.MakePlanRequest{}).ProtoReflect().Descriptor()
	if !fieldPathOf(mp, "span") || !fieldPathOf(mp, "night.year") || fieldPathOf(mp, "span.night") {
		t.Error("oneof names: want span alone to resolve, and night.year")
	}
}
