package server

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"regexp"
	"strings"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"

	"github.com/nightloom/nightloom/internal/store"
)

// violations collects the field violations of one request. Paths follow the
// proto field names, with [i] for repeated elements, e.g.
// "site.horizon[3].altitude_deg".
type violations struct {
	list []*errdetails.BadRequest_FieldViolation
}

// add records that the field at path is bad.
func (v *violations) add(path, format string, args ...any) {
	v.list = append(v.list, &errdetails.BadRequest_FieldViolation{Field: path, Description: fmt.Sprintf(format, args...)})
}

// ok reports whether nothing was recorded.
func (v *violations) ok() bool { return len(v.list) == 0 }

// err returns nil, or an INVALID_ARGUMENT status carrying a
// google.rpc.BadRequest detail with every violation.
func (v *violations) err() error {
	if len(v.list) == 0 {
		return nil
	}
	return invalidArgument(v.list...)
}

// invalidArgument builds INVALID_ARGUMENT with the violations as details;
// the message names the first few fields.
func invalidArgument(list ...*errdetails.BadRequest_FieldViolation) error {
	msg := "invalid request: "
	for i, f := range list {
		if i == 3 {
			msg += fmt.Sprintf("; and %d more", len(list)-3)
			break
		}
		if i > 0 {
			msg += "; "
		}
		msg += f.Field + ": " + f.Description
	}
	st := status.New(codes.InvalidArgument, msg)
	if d, err := st.WithDetails(&errdetails.BadRequest{FieldViolations: list}); err == nil {
		st = d
	}
	return st.Err()
}

// fieldError is a single-violation INVALID_ARGUMENT.
func fieldError(path, format string, args ...any) error {
	var v violations
	v.add(path, format, args...)
	return v.err()
}

// notFound, failedPrecondition, ... are shorthand for status errors.
func notFound(format string, args ...any) error {
	return status.Errorf(codes.NotFound, format, args...)
}

func failedPrecondition(format string, args ...any) error {
	return status.Errorf(codes.FailedPrecondition, format, args...)
}

// storeCode gives a storage error its gRPC code (STYLE.md: one place maps
// storage errors; no rows -> NotFound, busy -> Aborted so that clients
// retry).
func storeCode(err error) codes.Code {
	switch {
	case errors.Is(err, store.ErrNotFound):
		return codes.NotFound
	case errors.Is(err, store.ErrBusy):
		return codes.Aborted
	case errors.Is(err, store.ErrAlreadyExists):
		return codes.AlreadyExists
	case errors.Is(err, store.ErrConflict):
		return codes.FailedPrecondition
	case errors.Is(err, store.ErrInvalid):
		return codes.InvalidArgument
	case errors.Is(err, context.Canceled):
		return codes.Canceled
	case errors.Is(err, context.DeadlineExceeded):
		return codes.DeadlineExceeded
	}
	return codes.Internal
}

// toStatus turns any error a handler returned into a status error. Status
// errors pass unchanged; storage and context errors get their code and the
// storage message (which names the operation and ids, never secrets);
// anything else becomes INTERNAL with a generic message, and the cause is
// logged.
func toStatus(log *slog.Logger, method string, err error) error {
	if err == nil {
		return nil
	}
	if _, ok := status.FromError(err); ok {
		return err
	}
	code := storeCode(err)
	if code == codes.Internal {
		log.Error("internal error", "method", method, "err", err.Error())
		return status.Error(codes.Internal, "internal error")
	}
	if code == codes.Aborted {
		return status.Errorf(codes.Aborted, "storage busy, retry")
	}
	if code == codes.NotFound {
		if m := missingRE.FindStringSubmatch(err.Error()); m != nil {
			return notFoundResource(m[1], m[2])
		}
	}
	return status.Error(code, publicMessage(err))
}

// missingRE reads the kind and id of a missing thing from the store's
// operation names ("get block \"blk-1\": store: not found").
var missingRE = regexp.MustCompile(`^(?:get|load|latest plan of) (site|target|block|plan) "([^"]*)"`)

// publicMessage is a storage error's message without the store's own
// words: "store: not found" becomes "not found", "malformed page token:
// store: invalid" loses its prefix (issue 14).
func publicMessage(err error) string {
	m := err.Error()
	for _, w := range []string{"store: ", "server: "} {
		m = strings.ReplaceAll(m, w, "")
	}
	return m
}
