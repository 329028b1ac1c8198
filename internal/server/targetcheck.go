package server

import (
	"errors"
	"strings"

	"github.com/nightloom/nightloom/constraints"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// ValidateTarget applies CreateTarget's checks (target.proto's ranges, then
// the ephemeris's own refusals) to a target outside any call, so that
// offline tools accept exactly what the API accepts (issue 14: one
// validation for `nightloom sky --orbit` and the API). It returns the
// domain target, or an error listing "field: problem" for each field at
// fault, the fields named as in the API ("target.orbit.eccentricity").
func ValidateTarget(t *nightloomv1.Target) (*constraints.Target, error) {
	var v violations
	ct := checkTarget(&v, "target", t)
	if len(v.list) > 0 {
		var parts []string
		for _, f := range v.list {
			parts = append(parts, f.GetField()+": "+strings.TrimPrefix(f.GetDescription(), "ephem: "))
		}
		return nil, errors.New(strings.Join(parts, "; "))
	}
	return ct, nil
}
