package server

import (
	"context"
	"crypto/sha256"
	"errors"
	"fmt"
	"strings"
	"unicode/utf8"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/types/known/timestamppb"

	"github.com/nightloom/nightloom/ephem"
	"github.com/nightloom/nightloom/ephem/elements"
	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// Limits of ImportElements (target.proto).
const (
	MaxImportTextBytes = 1 << 20
	MaxImportLines     = 10000
)

// ImportElements stores one orbit target per line of one-line orbital
// elements, all or nothing, idempotent on the request id (target.proto).
// The text is parsed by ephem/elements; each line then passes the same
// checks as CreateTarget.
func (x *targetService) ImportElements(ctx context.Context, req *nightloomv1.ImportElementsRequest) (*nightloomv1.ImportElementsResponse, error) {
	var v violations
	text(&v, "request_id", req.GetRequestId(), 1, MaxIDBytes)
	switch {
	case len(req.GetText()) > MaxImportTextBytes:
		v.add("text", "must be at most %d bytes", MaxImportTextBytes)
	case !utf8.ValidString(req.GetText()):
		v.add("text", "must be valid UTF-8")
	case strings.Count(req.GetText(), "\n") >= MaxImportLines:
		v.add("text", "must have fewer than %d lines", MaxImportLines)
	}
	if err := v.err(); err != nil {
		return nil, err
	}
	els, perr := elements.Parse(req.GetText(), true)
	bad := lineErrors(perr)
	if perr != nil && len(bad) == 0 {
		v.add("text", "%s", strings.TrimPrefix(perr.Error(), "elements: "))
		return nil, v.err()
	}
	var recs []store.Target
	for _, el := range els {
		t := importedTarget(el)
		var tv violations
		checkTarget(&tv, "target", t)
		if !tv.ok() {
			f := tv.list[0]
			// A value the parser accepts but the API's ranges refuse
			// (e.g. a node of exactly 360 deg): the whole line is named.
			bad = append(bad, &nightloomv1.ElementLineError{Line: int32(el.Line), FirstColumn: 1,
				LastColumn: int32(len(lineOf(req.GetText(), el.Line))), Description: fmt.Sprintf("%s: %s", f.GetField(), f.GetDescription())})
			continue
		}
		spec, err := storable(t)
		if err != nil {
			return nil, err
		}
		recs = append(recs, store.Target{ID: newID(targetPrefix), Name: t.GetName(), Kind: targetKind(t), Spec: spec})
	}
	if len(bad) > 0 && !req.GetSkipBadLines() {
		for _, b := range bad {
			v.add("text", "line %d, columns %d-%d: %s", b.GetLine(), b.GetFirstColumn(), b.GetLastColumn(), b.GetDescription())
		}
		return nil, v.err()
	}
	if len(recs) == 0 {
		v.add("text", "no element line to import")
		return nil, v.err()
	}
	fp := sha256.New()
	fmt.Fprintf(fp, "%t\n%s", req.GetSkipBadLines(), req.GetText())
	stored, _, err := x.s.db.ImportTargets(ctx, req.GetRequestId(), fp.Sum(nil), recs)
	if errors.Is(err, store.ErrConflict) {
		return nil, status.Errorf(codes.AlreadyExists, "request_id %q was used for a different import", req.GetRequestId())
	}
	if err != nil {
		return nil, err
	}
	resp := &nightloomv1.ImportElementsResponse{SkippedLines: bad}
	for _, r := range stored {
		t, err := targetProto(r)
		if err != nil {
			return nil, err
		}
		resp.Targets = append(resp.Targets, t)
	}
	return resp, nil
}

// lineErrors lists the *elements.LineError values joined in err.
func lineErrors(err error) []*nightloomv1.ElementLineError {
	if err == nil {
		return nil
	}
	var errs []error
	if j, ok := err.(interface{ Unwrap() []error }); ok {
		errs = j.Unwrap()
	} else {
		errs = []error{err}
	}
	var out []*nightloomv1.ElementLineError
	for _, e := range errs {
		var le *elements.LineError
		if errors.As(e, &le) {
			out = append(out, &nightloomv1.ElementLineError{Line: int32(le.Line), FirstColumn: int32(le.FirstCol),
				LastColumn: int32(le.LastCol), Description: le.Field + ": " + le.Problem})
		}
	}
	return out
}

// importedTarget is the API form of one parsed line: an orbit target named
// by the line's readable name field (which the formats fill with the
// designation and name), or by its designation when that field is blank;
// perihelion time as a TT reading (target.proto).
func importedTarget(el elements.Elements) *nightloomv1.Target {
	o := el.Orbit
	name := el.Name
	if name == "" {
		name = el.Designation
	}
	if len(name) > MaxNameBytes {
		name = name[:MaxNameBytes]
	}
	oe := &nightloomv1.OrbitElements{
		PerihelionDistanceAu: o.QAU, Eccentricity: o.E, InclinationDeg: o.IncDeg,
		AscendingNodeDeg: o.NodeDeg, PerihelionArgumentDeg: o.PeriDeg,
		PerihelionTimeTt: timestamppb.New(ephem.LabelFromJD(o.PerihelionTT)),
	}
	switch o.Law {
	case ephem.MagComet:
		oe.MagnitudeLaw = &nightloomv1.OrbitElements_Comet{Comet: &nightloomv1.CometMagnitude{M1: o.M1, K1: o.K1}}
	case ephem.MagAsteroid:
		oe.MagnitudeLaw = &nightloomv1.OrbitElements_Asteroid{Asteroid: &nightloomv1.AsteroidMagnitude{H: o.H, G: o.G}}
	}
	return &nightloomv1.Target{Name: name, Position: &nightloomv1.Target_Orbit{Orbit: oe}}
}

// lineOf returns line n (1-based) of text.
func lineOf(text string, n int) string {
	lines := strings.Split(text, "\n")
	if n < 1 || n > len(lines) {
		return ""
	}
	return strings.TrimRight(lines[n-1], "\r")
}
