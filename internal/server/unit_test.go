package server

import (
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/fieldmaskpb"

	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

func TestApplyMask(t *testing.T) {
	cur := testSite()
	cur.Id = "site-1"
	src := &nightloomv1.Site{Name: "new", Horizon: []*nightloomv1.HorizonPoint{{AzimuthDeg: 10, AltitudeDeg: 1}},
		Mount: &nightloomv1.Mount{Settle: dur(3 * time.Second)}, Id: "site-other"}
	var v violations
	dst := proto.Clone(cur).(*nightloomv1.Site)
	applyMask(&v, dst, src, &fieldmaskpb.FieldMask{Paths: []string{"name", "horizon", "mount.settle", "instrument.focus"}}, siteOutputOnly)
	if !v.ok() {
		t.Fatal(v.err())
	}
	if dst.GetName() != "new" || len(dst.GetHorizon()) != 1 || dst.GetMount().GetSettle().AsDuration() != 3*time.Second ||
		dst.GetMount().GetKind() != cur.GetMount().GetKind() || dst.GetInstrument().GetFocus() != nil || dst.GetId() != "site-1" {
		t.Errorf("masked update gave %v", dst)
	}
	// src's horizon is copied, not shared.
	src.Horizon[0].AltitudeDeg = 50
	if dst.GetHorizon()[0].GetAltitudeDeg() != 1 {
		t.Error("the update shares its horizon with the request")
	}
	// An empty mask replaces all but the output-only fields.
	dst = proto.Clone(cur).(*nightloomv1.Site)
	applyMask(&v, dst, src, nil, siteOutputOnly)
	if dst.GetId() != "site-1" || dst.GetName() != "new" || dst.GetInstrument() != nil {
		t.Errorf("full update gave %v", dst)
	}
	for _, bad := range [][]string{{"id"}, {"nope"}, {"name.first"}, {"horizon.azimuth_deg"}} {
		var v violations
		dst := proto.Clone(cur).(*nightloomv1.Site)
		applyMask(&v, dst, src, &fieldmaskpb.FieldMask{Paths: bad}, siteOutputOnly)
		if v.ok() || !proto.Equal(dst, cur) {
			t.Errorf("mask %v: accepted or changed the site", bad)
		}
	}
}

func TestHubCutsOffTheSlowWatcher(t *testing.T) {
	h := newHub(3, 10, 100)
	slow, err := h.subscribe("s")
	if err != nil {
		t.Fatal(err)
	}
	fast, _ := h.subscribe("s")
	other, _ := h.subscribe("t")
	for v := int64(1); v <= 10; v++ {
		h.publish(&nightloomv1.Plan{SiteId: "s", Version: v})
		if p := <-fast.ch; p.GetVersion() != v {
			t.Fatalf("fast got %d, want %d", p.GetVersion(), v)
		}
	}
	select {
	case <-slow.end:
	default:
		t.Fatal("slow watcher not ended")
	}
	if status.Code(h.ended(slow)) != codes.ResourceExhausted {
		t.Errorf("slow ended with %v", h.ended(slow))
	}
	if len(other.ch) != 0 {
		t.Error("a watcher of another site got plans")
	}
	if h.count() != 2 {
		t.Errorf("%d watchers left, want 2", h.count())
	}
	for i := 0; i < 9; i++ { // with fast: 10, the limit
		if _, err := h.subscribe("s"); err != nil {
			t.Fatal(err)
		}
	}
	if _, err := h.subscribe("s"); status.Code(err) != codes.ResourceExhausted {
		t.Errorf("11th watcher of a site: %v", err)
	}
	h.close()
	<-fast.end
	if status.Code(h.ended(fast)) != codes.Unavailable {
		t.Errorf("at close: %v", h.ended(fast))
	}
	if _, err := h.subscribe("s"); status.Code(err) != codes.Unavailable {
		t.Errorf("subscribe after close: %v", err)
	}
}

func TestMergeClosures(t *testing.T) {
	t0 := time.Date(2031, 3, 15, 22, 0, 0, 0, time.UTC)
	c := func(a, b int, why string) *nightloomv1.Closure {
		return &nightloomv1.Closure{Interval: &nightloomv1.TimeInterval{Start: ts(t0.Add(time.Duration(a) * time.Minute)), End: ts(t0.Add(time.Duration(b) * time.Minute))}, Reason: why}
	}
	got := mergeClosures([]*nightloomv1.Closure{c(30, 40, "wind"), c(0, 10, "cloud"), c(5, 20, "cloud"), c(20, 25, "dew")})
	if len(got) != 2 || got[0].GetInterval().GetEnd().AsTime() != t0.Add(25*time.Minute) || got[0].GetReason() != "cloud; dew" ||
		got[1].GetReason() != "wind" {
		t.Errorf("merged: %v", got)
	}
	if d := closedTime(got, t0.Add(-time.Hour), t0.Add(35*time.Minute)); d != 30*time.Minute {
		t.Errorf("closed time %v, want 30m", d)
	}
}
