package server

import (
	"context"
	"errors"
	"math"
	"strings"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"

	"github.com/nightloom/nightloom/catalogue"
	"github.com/nightloom/nightloom/ephem"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// catalogueService implements CatalogueService (catalogue.proto) on the
// embedded catalogue; it converts and never computes.
type catalogueService struct {
	nightloomv1.UnimplementedCatalogueServiceServer
	s *Server
}

// Limits of CatalogueService (catalogue.proto).
const (
	maxCatalogueName     = 100
	defaultCataloguePage = 50
	maxCataloguePage     = 500
	// catalogueMatchDeg is how far a fixed target's own place may lie from
	// the catalogue entry it names (target.proto, catalogue_id).
	catalogueMatchDeg = 1.0
)

// CatalogueEntryProto converts a catalogue entry (also used by the client).
func CatalogueEntryProto(c *catalogue.Catalogue, e *catalogue.Entry) *nightloomv1.CatalogueEntry {
	out := &nightloomv1.CatalogueEntry{
		Id: e.ID, Label: e.Label(), Name: e.Name, Messier: int32(e.Messier), Type: e.Type, TypeWords: e.TypeWords(),
		RaDeg: e.RADeg, DecDeg: e.DecDeg, MajorAxisDeg: e.MajorArcmin / 60, MinorAxisDeg: e.MinorArcmin / 60,
		Constellation: e.Constellation,
	}
	if k, ok := c.LookupConstellation(e.Constellation); ok {
		out.ConstellationName = k.Name
	}
	if e.HasMag {
		out.Magnitude = proto.Float64(e.Mag)
	}
	return out
}

// nameStatus maps a resolution failure to NOT_FOUND (unknown) or
// FAILED_PRECONDITION (ambiguous), with a BadRequest violation on field.
func nameStatus(field string, err error) error {
	code := codes.NotFound
	if errors.Is(err, catalogue.ErrAmbiguousName) {
		code = codes.FailedPrecondition
	}
	msg := strings.TrimPrefix(err.Error(), "catalogue: ")
	st := status.New(code, msg)
	if d, derr := st.WithDetails(&errdetails.BadRequest{FieldViolations: []*errdetails.BadRequest_FieldViolation{{Field: field, Description: msg}}}); derr == nil {
		st = d
	}
	return st.Err()
}

func (x *catalogueService) LookupName(ctx context.Context, req *nightloomv1.LookupNameRequest) (*nightloomv1.LookupNameResponse, error) {
	var v violations
	text(&v, "name", req.GetName(), 1, maxCatalogueName)
	if strings.TrimSpace(req.GetName()) == "" && v.ok() {
		v.add("name", "is required")
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	c := catalogue.Default()
	r, err := c.Resolve(req.GetName())
	if err != nil {
		return nil, nameStatus("name", err)
	}
	return &nightloomv1.LookupNameResponse{Entry: CatalogueEntryProto(c, r.Entry), MatchedName: r.Matched}, nil
}

func (x *catalogueService) SearchCatalogue(ctx context.Context, req *nightloomv1.SearchCatalogueRequest) (*nightloomv1.SearchCatalogueResponse, error) {
	var v violations
	text(&v, "text", req.GetText(), 0, maxCatalogueName)
	text(&v, "type", req.GetType(), 0, maxCatalogueName)
	text(&v, "constellation", req.GetConstellation(), 0, maxCatalogueName)
	intRange(&v, "page_size", int64(req.GetPageSize()), 0, maxCataloguePage)
	if req.FaintestMagnitude != nil {
		rangeCheck(&v, "faintest_magnitude", req.GetFaintestMagnitude(), -30, 30)
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	c := catalogue.Default()
	q := catalogue.Query{Text: req.GetText(), Type: req.GetType(), Constellation: req.GetConstellation(),
		MagLimit: req.GetFaintestMagnitude(), HasMagLimit: req.FaintestMagnitude != nil}
	found, err := c.Search(q)
	if err != nil {
		field := "type"
		if strings.Contains(err.Error(), "constellation") {
			field = "constellation"
		}
		return nil, fieldError(field, "%s", strings.TrimPrefix(err.Error(), "catalogue: bad query: "))
	}
	size := int(req.GetPageSize())
	if size == 0 {
		size = defaultCataloguePage
	}
	out := &nightloomv1.SearchCatalogueResponse{TotalMatches: int32(len(found))}
	for i, e := range found {
		if i == size {
			break
		}
		out.Entries = append(out.Entries, CatalogueEntryProto(c, e))
	}
	return out, nil
}

// checkCatalogueID resolves a fixed target's catalogue_id (target.proto):
// it stores the entry's primary designation, fills ra_deg and dec_deg when
// both are 0, and otherwise requires them within catalogueMatchDeg of the
// entry. It changes f, which is the request's normalized copy.
func checkCatalogueID(v *violations, path string, f *nightloomv1.FixedPosition) {
	if f.GetCatalogueId() == "" {
		return
	}
	field := path + ".catalogue_id"
	if len(f.GetCatalogueId()) > maxCatalogueName {
		v.add(field, "must be at most %d bytes", maxCatalogueName)
		return
	}
	c := catalogue.Default()
	r, err := c.Resolve(f.GetCatalogueId())
	if err != nil {
		v.add(field, "%s", strings.TrimPrefix(err.Error(), "catalogue: "))
		return
	}
	e := r.Entry
	if f.GetRaDeg() == 0 && f.GetDecDeg() == 0 {
		f.RaDeg, f.DecDeg = e.RADeg, e.DecDeg
	} else {
		a := ephem.SphericalToVec(f.GetRaDeg()*ephem.Deg2Rad, f.GetDecDeg()*ephem.Deg2Rad)
		b := ephem.SphericalToVec(e.RADeg*ephem.Deg2Rad, e.DecDeg*ephem.Deg2Rad)
		if sep := ephem.Separation(a, b) * ephem.Rad2Deg; !(sep <= catalogueMatchDeg) || math.IsNaN(f.GetRaDeg()) {
			v.add(field, "names %s at RA %.4f Dec %.4f deg, %.2f deg from the target's ra_deg/dec_deg (at most %g deg; send 0, 0 to take the catalogue's place)",
				e.Label(), e.RADeg, e.DecDeg, sep, catalogueMatchDeg)
			return
		}
	}
	f.CatalogueId = e.ID
}

// pointingConstellation is the IAU constellation of a pointing's
// astrometric (ICRS) place, "" without one.
func pointingConstellation(p *nightloomv1.Pointing) string {
	if p == nil {
		return ""
	}
	return catalogue.Default().ConstellationOf(p.GetRaIcrsDeg(), p.GetDecIcrsDeg()).Abbr
}
