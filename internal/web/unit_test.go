package web

import (
	"context"
	"testing"
	"time"

	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/internal/store"
	pb "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// TestNightOf: the night containing an instant starts on the local date
// of its evening; before local noon it is still the previous date's night
// (the convention of SkyService.Night: local noon to noon).
func TestNightOf(t *testing.T) {
	paris, err := time.LoadLocation("Europe/Paris")
	if err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		utc  string
		want string
	}{
		{"2027-01-14T20:30:00Z", "2027-01-14"}, // 21:30 CET
		{"2027-01-14T23:30:00Z", "2027-01-14"}, // 00:30 CET on the 15th
		{"2027-01-15T10:59:00Z", "2027-01-14"}, // 11:59 CET
		{"2027-01-15T11:00:00Z", "2027-01-15"}, // 12:00 CET
		{"2027-03-28T01:30:00Z", "2027-03-27"}, // 03:30 CEST, the night the clocks change
	} {
		at, _ := time.Parse(time.RFC3339, tc.utc)
		if got := dateString(nightOf(at, paris)); got != tc.want {
			t.Errorf("nightOf(%s) = %s, want %s", tc.utc, got, tc.want)
		}
	}
}

// TestHistory: a replan's changes count the runs from its instant on that
// were kept exactly, dropped and new, against the version it replaced.
// (Worked by hand from the two plans below.)
func TestHistory(t *testing.T) {
	t0 := time.Date(2027, 1, 14, 18, 0, 0, 0, time.UTC)
	run := func(block string, startMin, endMin int, frames int32) *pb.Assignment {
		return &pb.Assignment{BlockId: block, Start: timestamppb.New(t0.Add(time.Duration(startMin) * time.Minute)),
			End: timestamppb.New(t0.Add(time.Duration(endMin) * time.Minute)), Frames: frames}
	}
	v1 := &pb.Plan{Id: "plan-1", Version: 1, Origin: pb.PlanOrigin_PLAN_ORIGIN_MAKE_PLAN, CreateTime: timestamppb.New(t0),
		Assignments: []*pb.Assignment{run("a", 0, 60, 12), run("b", 60, 120, 12), run("c", 120, 180, 12), run("d", 180, 240, 12)}}
	v2 := &pb.Plan{Id: "plan-2", Version: 2, Origin: pb.PlanOrigin_PLAN_ORIGIN_REPLAN, PreviousPlanId: "plan-1",
		ReplanFrom: timestamppb.New(t0.Add(90 * time.Minute)), CreateTime: timestamppb.New(t0.Add(time.Hour)),
		Closures: []*pb.Closure{{Interval: &pb.TimeInterval{Start: timestamppb.New(t0.Add(90 * time.Minute)),
			End: timestamppb.New(t0.Add(110 * time.Minute))}, Reason: "clouds"}},
		// a kept (before the instant, not counted); b moved (before the
		// instant, not counted); c and d from the instant on: d kept
		// exactly, c shortened (dropped + new), e new.
		Assignments: []*pb.Assignment{run("a", 0, 60, 12), run("b", 60, 90, 6), run("c", 120, 170, 10), run("d", 180, 240, 12),
			run("e", 240, 260, 4)}}
	h := history([]*pb.Plan{v1, v2}, time.UTC)
	if len(h) != 2 || h[0].Version != 2 || !h[0].Current || h[1].Current {
		t.Fatalf("history: %+v", h)
	}
	if want := "replanned from 19:30: 1 run kept, 1 dropped, 2 new; closures 19:30–19:50 clouds"; h[0].Changes != want {
		t.Errorf("v2 changes %q, want %q", h[0].Changes, want)
	}
	if want := "made: 4 runs, 0 blocks unplaced"; h[1].Changes != want {
		t.Errorf("v1 changes %q, want %q", h[1].Changes, want)
	}
}

// TestProgressNotifies: a counted progress report notifies the block's
// site once; a retried one (same report id) notifies nothing; another
// site hears nothing.
func TestProgressNotifies(t *testing.T) {
	e := newEnv(t)
	e.loadDemo(nil)
	n := NewNotifier()
	st := NotifyProgress(e.db, n)
	mine, stop := n.Subscribe(e.site.GetId())
	defer stop()
	other, stop2 := n.Subscribe("site-other")
	defer stop2()
	a := e.plan.GetAssignments()[0]
	rep := store.ProgressReport{ReportID: "notify-1", BlockID: a.GetBlockId(), FramesKept: 2, Start: a.GetStart().AsTime(),
		End: a.GetEnd().AsTime(), Outcome: pb.ProgressOutcome_PROGRESS_OUTCOME_DONE.String()}
	if _, dup, err := st.ReportProgress(context.Background(), rep); err != nil || dup {
		t.Fatalf("first report: dup %v, %v", dup, err)
	}
	select {
	case <-mine:
	default:
		t.Fatalf("a counted report did not notify its site")
	}
	if _, dup, err := st.ReportProgress(context.Background(), rep); err != nil || !dup {
		t.Fatalf("retried report: dup %v, %v", dup, err)
	}
	select {
	case <-mine:
		t.Errorf("a retried report notified again")
	case <-other:
		t.Errorf("another site was notified")
	default:
	}
}
