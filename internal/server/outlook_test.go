package server

import (
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/protobuf/proto"

	"github.com/nightloom/nightloom/constraints"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// TestOutlook: the RPC carries constraints.ApparitionOutlook unchanged
// (the server converts, the domain computes): the same windows, first and
// last nights, reasons and best moments for the test comet over ten
// nights; bad requests name their field.
func TestOutlook(t *testing.T) {
	e := newEnv(t, "")
	f := e.seed(t, 0)
	cl := nightloomv1.NewApparitionServiceClient(e.conn)
	ctx := as(RoleViewer, e)
	comet := f.targets[4]
	cs := &nightloomv1.ConstraintSet{RequiredDarkness: nightloomv1.Darkness_DARKNESS_NAUTICAL, MinSolarElongationDeg: proto.Float64(20)}
	resp, err := cl.Outlook(ctx, &nightloomv1.OutlookRequest{SiteId: f.site.GetId(),
		Subject: &nightloomv1.OutlookRequest_TargetId{TargetId: comet.GetId()}, Constraints: cs, NonSiderealTracking: true,
		FirstNight: testNight, Nights: 10, Step: dur(10 * time.Minute)})
	if err != nil {
		t.Fatal(err)
	}
	site, _, err := e.srv.loadSite(t.Context(), f.site.GetId())
	if err != nil {
		t.Fatal(err)
	}
	_, target, err := e.srv.loadTarget(t.Context(), comet.GetId())
	if err != nil {
		t.Fatal(err)
	}
	want, err := constraints.ApparitionOutlook(site.cons, target, time.Date(2031, 3, 15, 0, 0, 0, 0, time.UTC), 10,
		constraints.Request{Set: constraintSet(cs, true), NonSidereal: true}, 10*time.Minute)
	if err != nil {
		t.Fatal(err)
	}
	if len(resp.GetNights()) != 10 {
		t.Fatalf("%d nights", len(resp.GetNights()))
	}
	for i, n := range resp.GetNights() {
		w := want.Nights[i]
		if n.GetNight().GetDay() != int32(w.Date.Day()) || len(n.GetWindows()) != len(w.Windows) || n.GetReason() != reasonProto(w.Reason) {
			t.Errorf("night %d: %v, want %+v", i, n, w)
			continue
		}
		for k, win := range n.GetWindows() {
			if !win.GetStart().AsTime().Equal(w.Windows[k].Start) || !win.GetEnd().AsTime().Equal(w.Windows[k].End) {
				t.Errorf("night %d window %d: %v, want %v", i, k, win, w.Windows[k])
			}
		}
		if w.HasBest && (n.GetBest() == nil || n.GetBest().GetAltitudeDeg() != w.Best.AltDeg) {
			t.Errorf("night %d best: %v, want %+v", i, n.GetBest(), w.Best)
		}
	}
	if (want.First >= 0) != (resp.GetFirstObservableNight() != nil) {
		t.Errorf("first observable night %v, want index %d", resp.GetFirstObservableNight(), want.First)
	}
	for _, c := range []struct {
		req   *nightloomv1.OutlookRequest
		field string
	}{
		{&nightloomv1.OutlookRequest{SiteId: f.site.GetId(), Subject: &nightloomv1.OutlookRequest_TargetId{TargetId: comet.GetId()},
			FirstNight: testNight, Nights: 400}, "nights"},
		{&nightloomv1.OutlookRequest{SiteId: f.site.GetId(), Subject: &nightloomv1.OutlookRequest_TargetId{TargetId: comet.GetId()}}, "first_night"},
		{&nightloomv1.OutlookRequest{SiteId: f.site.GetId(), FirstNight: testNight}, "subject"},
		{&nightloomv1.OutlookRequest{SiteId: f.site.GetId(), Subject: &nightloomv1.OutlookRequest_TargetId{TargetId: comet.GetId()},
			FirstNight: testNight, Step: dur(time.Second)}, "step"},
	} {
		_, err := cl.Outlook(ctx, c.req)
		wantCode(t, err, codes.InvalidArgument, c.field)
		if fs := violationFields(err); len(fs) == 0 || fs[0] != c.field {
			t.Errorf("violations %v, want %s", fs, c.field)
		}
	}
}
