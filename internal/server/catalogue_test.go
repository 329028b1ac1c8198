package server

import (
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/protobuf/proto"

	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// TestCatalogueService covers LookupName, SearchCatalogue and a fixed
// target created from a catalogue_id, over the gRPC connection. Identities
// (M 31 = NGC 224 in Andromeda, at 00h42m44s +41d16') are the standard
// cross-index, from memory.
func TestCatalogueService(t *testing.T) {
	e := newEnv(t, "")
	cat := nightloomv1.NewCatalogueServiceClient(e.conn)
	ctx := as(RoleViewer, e)

	r, err := cat.LookupName(ctx, &nightloomv1.LookupNameRequest{Name: "ngc0224"})
	if err != nil {
		t.Fatal(err)
	}
	if got := r.GetEntry(); got.GetId() != "NGC 224" || got.GetMessier() != 31 || got.GetConstellation() != "And" || r.GetMatchedName() != "NGC 224" {
		t.Errorf("LookupName(ngc0224) = %v", r)
	}
	_, err = cat.LookupName(ctx, &nightloomv1.LookupNameRequest{Name: "Betelguese"})
	wantCode(t, err, codes.NotFound, "unknown name")
	if !strings.Contains(err.Error(), "Betelgeuse") || strings.Join(violationFields(err), ",") != "name" {
		t.Errorf("unknown name: %v (fields %v), want the nearest name and field name", err, violationFields(err))
	}
	_, err = cat.LookupName(ctx, &nightloomv1.LookupNameRequest{Name: "Rosette Nebula"})
	wantCode(t, err, codes.FailedPrecondition, "ambiguous name")
	_, err = cat.LookupName(ctx, &nightloomv1.LookupNameRequest{Name: " "})
	wantCode(t, err, codes.InvalidArgument, "blank name")

	s, err := cat.SearchCatalogue(ctx, &nightloomv1.SearchCatalogueRequest{Type: "globular cluster", Constellation: "Her", FaintestMagnitude: proto.Float64(8), PageSize: 5})
	if err != nil {
		t.Fatal(err)
	}
	if len(s.GetEntries()) == 0 || s.GetEntries()[0].GetMessier() != 13 {
		t.Errorf("globulars in Hercules brighter than 8: %v, want M 13 first", s.GetEntries())
	}
	_, err = cat.SearchCatalogue(ctx, &nightloomv1.SearchCatalogueRequest{Constellation: "Atlantis"})
	wantCode(t, err, codes.InvalidArgument, "unknown constellation")
	if strings.Join(violationFields(err), ",") != "constellation" {
		t.Errorf("unknown constellation: fields %v", violationFields(err))
	}

	// A fixed target by catalogue_id: the place is filled in and the id
	// stored in its primary form.
	before := e.snapshot(t)
	tg := &nightloomv1.Target{Name: "Andromeda", Position: &nightloomv1.Target_Fixed{Fixed: &nightloomv1.FixedPosition{CatalogueId: "M 31"}}}
	ct, err := e.targets.CreateTarget(e.admin(), &nightloomv1.CreateTargetRequest{Target: tg})
	if err != nil {
		t.Fatal(err)
	}
	f := ct.GetTarget().GetFixed()
	if f.GetCatalogueId() != "NGC 224" || f.GetRaDeg() < 10.6 || f.GetRaDeg() > 10.7 || f.GetDecDeg() < 41.2 || f.GetDecDeg() > 41.3 {
		t.Errorf("target from M 31: %v", f)
	}
	// A catalogue_id that disagrees with the place sent, or names nothing,
	// is refused and nothing is stored.
	before = e.snapshot(t)
	for _, fx := range []*nightloomv1.FixedPosition{{CatalogueId: "M 31", RaDeg: 200, DecDeg: 10}, {CatalogueId: "NGC 99999"}} {
		_, err = e.targets.CreateTarget(e.admin(), &nightloomv1.CreateTargetRequest{Target: &nightloomv1.Target{Name: "x", Position: &nightloomv1.Target_Fixed{Fixed: fx}}})
		wantCode(t, err, codes.InvalidArgument, "bad catalogue_id")
		if strings.Join(violationFields(err), ",") != "target.fixed.catalogue_id" {
			t.Errorf("bad catalogue_id: fields %v", violationFields(err))
		}
	}
	if after := e.snapshot(t); after != before {
		t.Errorf("refused creates changed the store")
	}

	// Ephemeris rows name the constellation: M 31 is in Andromeda.
	cs, err := e.sites.CreateSite(e.admin(), &nightloomv1.CreateSiteRequest{Site: testSite()})
	if err != nil {
		t.Fatal(err)
	}
	start := time.Date(2031, 3, 15, 18, 0, 0, 0, time.UTC)
	eph, err := e.sky.Ephemeris(ctx, &nightloomv1.EphemerisRequest{SiteId: cs.GetSite().GetId(),
		Subject:  &nightloomv1.EphemerisRequest_TargetId{TargetId: ct.GetTarget().GetId()},
		Interval: &nightloomv1.TimeInterval{Start: ts(start), End: ts(start.Add(time.Hour))}, Step: dur(30 * time.Minute)})
	if err != nil {
		t.Fatal(err)
	}
	for _, row := range eph.GetRows() {
		if row.GetConstellation() != "And" {
			t.Errorf("ephemeris row constellation %q, want And", row.GetConstellation())
		}
	}
}
