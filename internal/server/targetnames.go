package server

// Target names are unique (issue 14). Blocks files name targets as
// "@NAME", and the client resolves such a name to the one stored target
// that bears it; two targets with one name made that reference ambiguous.
// CreateTarget and UpdateTarget therefore refuse a name that another target
// already has, with ALREADY_EXISTS and a google.rpc.ResourceInfo naming
// the target that holds it. Names compare exactly (case and spaces count),
// as the client's "@NAME" does. Targets are shared by every site, so the
// name is unique over the whole service. A database made before this rule
// may hold duplicates; they keep working and the client reports the
// ambiguity when "@NAME" is used.

import (
	"context"
	"fmt"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
)

// checkTargetName refuses a name held by a target other than self ("" for
// a new target). The caller holds s.targetNames, so that two calls cannot
// both pass the check with the same name.
func (s *Server) checkTargetName(ctx context.Context, name, self string) error {
	ids, err := s.db.TargetIDsByName(ctx, name)
	if err != nil {
		return err
	}
	for _, id := range ids {
		if id != self {
			st := status.New(codes.AlreadyExists, fmt.Sprintf("target.name: target %s is already called %q; target names are unique (blocks refer to targets by name)", id, name))
			if d, err := st.WithDetails(
				&errdetails.ResourceInfo{ResourceType: "nightloom.v1.Target", ResourceName: id, Description: "holds the name " + fmt.Sprintf("%q", name)},
				&errdetails.BadRequest{FieldViolations: []*errdetails.BadRequest_FieldViolation{{Field: "target.name", Description: "already used by target " + id}}},
			); err == nil {
				st = d
			}
			return st.Err()
		}
	}
	return nil
}
