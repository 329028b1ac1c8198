package server

// NOT_FOUND with google.rpc.ResourceInfo (issue 14): the status names the
// kind and id of what is missing in words, and carries the same as a
// detail that programs can read.

import (
	"fmt"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
)

// notFoundResource is NOT_FOUND for a resource type ("site", "target",
// "block", "plan") and id, with a ResourceInfo detail.
func notFoundResource(kind, id string) error {
	st := status.New(codes.NotFound, fmt.Sprintf("%s %s not found", kind, id))
	if d, err := st.WithDetails(&errdetails.ResourceInfo{ResourceType: "nightloom.v1." + kindType(kind), ResourceName: id,
		Description: fmt.Sprintf("no %s with this id", kind)}); err == nil {
		st = d
	}
	return st.Err()
}

func kindType(kind string) string {
	switch kind {
	case "site":
		return "Site"
	case "target":
		return "Target"
	case "block":
		return "Block"
	case "plan":
		return "Plan"
	}
	return kind
}

func siteNotFound(id string) error  { return notFoundResource("site", id) }
func blockNotFound(id string) error { return notFoundResource("block", id) }
func planNotFound(id string) error  { return notFoundResource("plan", id) }
