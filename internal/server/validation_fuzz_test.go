package server

import (
	"testing"
	"time"

	"google.golang.org/protobuf/proto"

	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// FuzzValidateRequest feeds arbitrary bytes, decoded as the requests that
// carry user data (sites with horizons, targets with orbital elements,
// blocks with constraint sets, closures, reports), to the validators. They
// must not panic, and whatever they accept must hold only finite numbers
// and be accepted by the domain packages too (the ephemeris builds the
// target, the constraint evaluator takes the site and the converted
// constraint set).
func FuzzValidateRequest(f *testing.F) {
	add := func(kind byte, m proto.Message) {
		b, err := proto.Marshal(m)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(append([]byte{kind}, b...))
	}
	add(0, &nightloomv1.CreateSiteRequest{Site: testSite()})
	add(1, &nightloomv1.CreateTargetRequest{Target: testComet()})
	add(1, &nightloomv1.CreateTargetRequest{Target: testFixed("Quillfen Galaxy", 152, 31)})
	blk := testBlock("site-1", "tgt-1", "L", 10, 5)
	blk.Constraints.LocalTimeWindow = &nightloomv1.LocalTimeWindow{Start: &nightloomv1.LocalTimeOfDay{Hour: 22}, End: &nightloomv1.LocalTimeOfDay{Hour: 2, Minute: 30}}
	blk.Cadence = &nightloomv1.Cadence{Interval: dur(time.Hour), Tolerance: dur(10 * time.Minute)}
	add(2, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{blk}})
	nb := testBlock("", "tgt-1", "V", 40, 9)
	nb.NetworkId, nb.AllowedSiteIds = "net-1", []string{"site-1", "site-2"}
	nb.Needs = &nightloomv1.TelescopeNeeds{MinApertureMm: 300, MinPixelScaleArcsec: 0.5, MaxPixelScaleArcsec: 2}
	add(2, &nightloomv1.QueueBlocksRequest{Blocks: []*nightloomv1.Block{nb}})
	t0 := time.Date(2031, 3, 15, 21, 0, 0, 0, time.UTC)
	add(3, &nightloomv1.MakePlanRequest{SiteId: "site-1", Closures: []*nightloomv1.Closure{{Interval: &nightloomv1.TimeInterval{Start: ts(t0), End: ts(t0.Add(time.Hour))}}}})
	add(4, &nightloomv1.ReportProgressRequest{Report: &nightloomv1.ProgressReport{ReportId: "r", BlockId: "b", FramesKept: 1,
		Interval: &nightloomv1.TimeInterval{Start: ts(t0), End: ts(t0.Add(time.Minute))}, Outcome: nightloomv1.ProgressOutcome_PROGRESS_OUTCOME_DONE}})
	f.Fuzz(func(t *testing.T, data []byte) {
		if len(data) == 0 {
			return
		}
		kind, raw := data[0]%5, data[1:]
		var v violations
		switch kind {
		case 0:
			var req nightloomv1.CreateSiteRequest
			if proto.Unmarshal(raw, &req) != nil {
				return
			}
			s := validSite(&v, "site", req.GetSite())
			if v.ok() {
				if p := nonFinite(s); p != "" {
					t.Fatalf("accepted site with non-finite %s", p)
				}
				if _, err := newSiteModel(s); err != nil {
					t.Fatalf("accepted site the domain refuses: %v", err)
				}
			}
		case 1:
			var req nightloomv1.CreateTargetRequest
			if proto.Unmarshal(raw, &req) != nil || req.GetTarget() == nil {
				return
			}
			tg := normalizeTarget(req.GetTarget())
			if ct := checkTarget(&v, "target", tg); v.ok() {
				if ct == nil {
					t.Fatal("accepted target without a model")
				}
				if p := nonFinite(tg); p != "" {
					t.Fatalf("accepted target with non-finite %s", p)
				}
			}
		case 2:
			var req nightloomv1.QueueBlocksRequest
			if proto.Unmarshal(raw, &req) != nil {
				return
			}
			for i, b := range req.GetBlocks() {
				checkBlockStatic(&v, idx("blocks", i), b)
			}
			if v.ok() {
				for _, b := range req.GetBlocks() {
					if p := nonFinite(b); p != "" {
						t.Fatalf("accepted block with non-finite %s", p)
					}
					for _, law := range []bool{false, true} {
						set := constraintSet(b.GetConstraints(), law)
						dateLimits(set, b)
						if err := set.Validate(); err != nil {
							t.Fatalf("accepted constraints %v the evaluator refuses: %v", b.GetConstraints(), err)
						}
					}
				}
			}
		case 3:
			var req nightloomv1.MakePlanRequest
			if proto.Unmarshal(raw, &req) != nil {
				return
			}
			closures(&v, "closures", req.GetClosures(), MaxClosuresPerCall)
			if v.ok() {
				for _, c := range mergeClosures(req.GetClosures()) {
					if !c.GetInterval().GetEnd().AsTime().After(c.GetInterval().GetStart().AsTime()) {
						t.Fatalf("merged closure %v is empty", c)
					}
				}
			}
		case 4:
			var req nightloomv1.ReportProgressRequest
			if proto.Unmarshal(raw, &req) != nil {
				return
			}
			checkReport(&v, "report", req.GetReport())
		}
		for _, fv := range v.list {
			if fv.GetField() == "" || fv.GetDescription() == "" {
				t.Fatalf("violation without field or description: %v", fv)
			}
		}
	})
}
