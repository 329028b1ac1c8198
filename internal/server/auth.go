package server

import (
	"context"
	"crypto/rand"
	"crypto/sha256"
	"encoding/base64"
	"errors"
	"fmt"
	"slices"
	"strings"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/metadata"
	"google.golang.org/grpc/status"

	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// Role is what a bearer token may do.
type Role string

// Roles (issue 5, widened for the telescope by issue 14): viewer reads;
// operator queues blocks and makes plans, and reads; telescope fetches
// plans, asks for the next assignment, watches plans and reports progress,
// and reads blocks, plans, its site (GetSite) and the targets (GetTarget,
// ListTargets) so that every client view of a plan works for it, but neither
// lists the sites nor asks the sky service; admin does everything, sites and
// targets included; issue 11 lets the telescope replan (a weather
// closure from the executor beside the devices). The README's table of client commands by role is this
// table seen from the command line (cmd/nightloom TestCommandsByRole).
const (
	RoleViewer    Role = "viewer"
	RoleOperator  Role = "operator"
	RoleTelescope Role = "telescope"
	RoleAdmin     Role = "admin"
)

// Roles lists every role.
var Roles = []Role{RoleViewer, RoleOperator, RoleTelescope, RoleAdmin}

// ParseRole returns the role with that name.
func ParseRole(s string) (Role, error) {
	for _, r := range Roles {
		if string(r) == s {
			return r, nil
		}
	}
	return "", fmt.Errorf("server: unknown role %q (want one of viewer, operator, telescope, admin)", s)
}

// Groups of roles used by the method table.
var (
	readers       = []Role{RoleViewer, RoleOperator, RoleAdmin}
	queueReaders  = []Role{RoleViewer, RoleOperator, RoleTelescope, RoleAdmin}
	planners      = []Role{RoleOperator, RoleAdmin}
	reporters     = []Role{RoleTelescope, RoleOperator, RoleAdmin}
	siteReaders   = []Role{RoleViewer, RoleOperator, RoleTelescope, RoleAdmin}
	replanners    = []Role{RoleOperator, RoleTelescope, RoleAdmin}
	administrator = []Role{RoleAdmin}
)

// methodRoles is the one table that says who may call what, by full method
// name. A method that is not in it is refused for everyone (the tests check
// that every RPC of the service descriptors has a row).
var methodRoles = map[string][]Role{
	nightloomv1.SiteService_CreateSite_FullMethodName: administrator,
	nightloomv1.SiteService_GetSite_FullMethodName:    queueReaders,
	nightloomv1.SiteService_ListSites_FullMethodName:  readers,
	nightloomv1.SiteService_UpdateSite_FullMethodName: administrator,
	nightloomv1.SiteService_DeleteSite_FullMethodName: administrator,

	nightloomv1.TargetService_CreateTarget_FullMethodName:   administrator,
	nightloomv1.TargetService_GetTarget_FullMethodName:      queueReaders,
	nightloomv1.TargetService_ListTargets_FullMethodName:    queueReaders,
	nightloomv1.TargetService_UpdateTarget_FullMethodName:   administrator,
	nightloomv1.TargetService_DeleteTarget_FullMethodName:   administrator,
	nightloomv1.TargetService_ImportElements_FullMethodName: administrator,

	nightloomv1.QueueService_QueueBlocks_FullMethodName:    planners,
	nightloomv1.QueueService_GetBlock_FullMethodName:       queueReaders,
	nightloomv1.QueueService_ListBlocks_FullMethodName:     queueReaders,
	nightloomv1.QueueService_WithdrawBlock_FullMethodName:  planners,
	nightloomv1.QueueService_ReportProgress_FullMethodName: reporters,
	nightloomv1.QueueService_UpdateBlock_FullMethodName:    planners,
	nightloomv1.QueueService_WithdrawBlocks_FullMethodName: planners,

	nightloomv1.ExportService_ExportPlan_FullMethodName: queueReaders,

	nightloomv1.NetworkService_CreateNetwork_FullMethodName:   administrator,
	nightloomv1.NetworkService_GetNetwork_FullMethodName:      queueReaders,
	nightloomv1.NetworkService_ListNetworks_FullMethodName:    queueReaders,
	nightloomv1.NetworkService_DeleteNetwork_FullMethodName:   administrator,
	nightloomv1.NetworkService_MakeNetworkPlan_FullMethodName: planners,
	nightloomv1.NetworkService_ReplanNetwork_FullMethodName:   replanners,

	nightloomv1.PlanService_MakePlan_FullMethodName:       planners,
	nightloomv1.PlanService_GetPlan_FullMethodName:        queueReaders,
	nightloomv1.PlanService_ListPlans_FullMethodName:      queueReaders,
	nightloomv1.PlanService_Replan_FullMethodName:         replanners,
	nightloomv1.PlanService_NextAssignment_FullMethodName: queueReaders,
	nightloomv1.PlanService_WatchPlans_FullMethodName:     queueReaders,

	nightloomv1.SkyService_Ephemeris_FullMethodName:  readers,
	nightloomv1.SkyService_Night_FullMethodName:      readers,
	nightloomv1.SkyService_Visibility_FullMethodName: readers,

	nightloomv1.CatalogueService_LookupName_FullMethodName:         readers,
	nightloomv1.CatalogueService_SearchCatalogue_FullMethodName:    readers,
	nightloomv1.ApparitionService_Outlook_FullMethodName:           readers,
	nightloomv1.ApparitionService_ReportMagnitudes_FullMethodName:  reporters,
	nightloomv1.ApparitionService_RefitMagnitudeLaw_FullMethodName: planners,
	nightloomv1.ApparitionService_MagnitudeHistory_FullMethodName:  readers,

	nightloomv1.ProgramService_CreateProgram_FullMethodName:   administrator,
	nightloomv1.ProgramService_GetProgram_FullMethodName:      readers,
	nightloomv1.ProgramService_ListPrograms_FullMethodName:    readers,
	nightloomv1.ProgramService_UpdateProgram_FullMethodName:   administrator,
	nightloomv1.ProgramService_DeleteProgram_FullMethodName:   administrator,
	nightloomv1.ProgramService_GetProgramUsage_FullMethodName: readers,
}

// MethodRoles returns the roles allowed to call a full method name, and
// whether the method needs a token at all (health checking and reflection
// do not).
func MethodRoles(fullMethod string) (roles []Role, needsToken bool) {
	if publicMethod(fullMethod) {
		return nil, false
	}
	return slices.Clone(methodRoles[fullMethod]), true
}

// publicMethod: the standard health-checking service and server reflection
// need no token, so that load balancers and generic clients can use them.
// Reflection reveals only the API's schema, which is public.
func publicMethod(fullMethod string) bool {
	return strings.HasPrefix(fullMethod, "/grpc.health.v1.Health/") ||
		strings.HasPrefix(fullMethod, "/grpc.reflection.v1.ServerReflection/") ||
		strings.HasPrefix(fullMethod, "/grpc.reflection.v1alpha.ServerReflection/")
}

// Token format: "nlt_" and the unpadded base64url of 32 random bytes (43
// printable characters). Only the SHA-256 of the whole string is stored.
const tokenPrefixSecret = "nlt_"

// NewTokenSecret returns a new random bearer token and its SHA-256 hash.
func NewTokenSecret() (secret string, hash []byte) {
	var b [32]byte
	_, _ = rand.Read(b[:]) // crypto/rand.Read never fails (Go 1.24+)
	secret = tokenPrefixSecret + base64.RawURLEncoding.EncodeToString(b[:])
	return secret, HashToken(secret)
}

// HashToken is the SHA-256 of a token's secret, as stored.
func HashToken(secret string) []byte {
	h := sha256.Sum256([]byte(secret))
	return h[:]
}

// CreateToken makes a token with a role and a label, stores its hash and
// returns the secret (to be shown once) with the stored record. The token
// never expires and serves every site; see CreateTokenSpec for the others.
func CreateToken(ctx context.Context, ts TokenStore, role Role, label string) (string, store.Token, error) {
	return CreateTokenSpec(ctx, ts, TokenSpec{Role: role, Label: label})
}

// TokenSpec is what a new token may do.
type TokenSpec struct {
	Role  Role
	Label string
	// TTL, when positive, makes the token expire that long after its
	// creation (the store's clock).
	TTL time.Duration
	// SiteID, when set, holds the token to that one site (scope.go).
	SiteID string
}

// CreateTokenSpec makes a token as spec says, stores its hash and returns
// the secret (to be shown once) with the stored record.
func CreateTokenSpec(ctx context.Context, ts TokenStore, spec TokenSpec) (string, store.Token, error) {
	role, label := spec.Role, spec.Label
	if _, err := ParseRole(string(role)); err != nil {
		return "", store.Token{}, err
	}
	if len(label) > MaxLabelBytes {
		return "", store.Token{}, fmt.Errorf("server: token label longer than %d bytes", MaxLabelBytes)
	}
	if spec.TTL < 0 {
		return "", store.Token{}, errors.New("server: token time to live must not be negative")
	}
	rec := store.Token{ID: newID(tokenPrefix), Role: string(role), Label: label, SiteID: spec.SiteID}
	if spec.TTL > 0 {
		exp := time.Now().Add(spec.TTL)
		rec.ExpiresAt = &exp
	}
	secret, hash := NewTokenSecret()
	rec.Hash = hash
	rec, err := ts.CreateToken(ctx, rec)
	if err != nil {
		return "", store.Token{}, err
	}
	return secret, rec, nil
}

// principal is who made a call: the token's id and role (never its secret),
// the site it is held to ("" for every site), and the hash of its secret
// (for the stream guard, tokenwatch.go).
type principal struct {
	tokenID string
	role    Role
	siteID  string
	hash    []byte
}

type principalKey struct{}

func principalFrom(ctx context.Context) (principal, bool) {
	p, ok := ctx.Value(principalKey{}).(principal)
	return p, ok
}

// bearer extracts the token from the "authorization: Bearer <token>"
// metadata.
func bearer(ctx context.Context) (string, error) {
	md, _ := metadata.FromIncomingContext(ctx)
	vals := md.Get("authorization")
	switch len(vals) {
	case 0:
		return "", status.Error(codes.Unauthenticated, "missing authorization metadata (want \"Bearer <token>\")")
	case 1:
	default:
		return "", status.Error(codes.Unauthenticated, "more than one authorization value")
	}
	scheme, tok, ok := strings.Cut(strings.TrimSpace(vals[0]), " ")
	if !ok || !strings.EqualFold(scheme, "bearer") || strings.TrimSpace(tok) == "" {
		return "", status.Error(codes.Unauthenticated, "authorization must be \"Bearer <token>\"")
	}
	return strings.TrimSpace(tok), nil
}

// authenticator checks tokens against the token store.
type authenticator struct {
	tokens TokenStore
	guard  *tokenGuard // nil: streams are checked only when they open
}

// authorize returns the context with the caller's principal, or
// UNAUTHENTICATED (no or unknown token) or PERMISSION_DENIED (a role that
// may not call the method).
func (a *authenticator) authorize(ctx context.Context, fullMethod string) (context.Context, error) {
	if publicMethod(fullMethod) {
		return ctx, nil
	}
	tok, err := bearer(ctx)
	if err != nil {
		return nil, err
	}
	if len(tok) > 512 {
		return nil, status.Error(codes.Unauthenticated, "invalid token")
	}
	rec, err := a.tokens.TokenByHash(ctx, HashToken(tok))
	switch {
	case errors.Is(err, store.ErrNotFound):
		return nil, status.Error(codes.Unauthenticated, "invalid, expired or revoked token")
	case err != nil:
		// Busy or cancelled: keep the store's code (Aborted lets the
		// client retry); the message never contains the token.
		return nil, status.Error(storeCode(err), "token check failed: "+err.Error())
	}
	p := principal{tokenID: rec.ID, role: Role(rec.Role), siteID: rec.SiteID, hash: rec.Hash}
	allowed := methodRoles[fullMethod]
	if !slices.Contains(allowed, Role(rec.Role)) {
		// The refusal's log line names the token (never its secret).
		reportPrincipal(context.WithValue(ctx, principalKey{}, p))
		if allowed == nil {
			return nil, status.Errorf(codes.PermissionDenied, "method %s is not open to any role", fullMethod)
		}
		return nil, status.Errorf(codes.PermissionDenied, "role %q may not call %s", rec.Role, fullMethod)
	}
	return context.WithValue(ctx, principalKey{}, p), nil
}

func (a *authenticator) unary(ctx context.Context, req any, info *grpc.UnaryServerInfo, handler grpc.UnaryHandler) (any, error) {
	ctx, err := a.authorize(ctx, info.FullMethod)
	if err != nil {
		return nil, err
	}
	return handler(ctx, req)
}

// stream authorizes a stream, then keeps checking its token while it is
// open: a token revoked or expired meanwhile ends the stream with
// UNAUTHENTICATED within tokenRecheckInterval (tokenwatch.go).
func (a *authenticator) stream(srv any, ss grpc.ServerStream, info *grpc.StreamServerInfo, handler grpc.StreamHandler) error {
	ctx, err := a.authorize(ss.Context(), info.FullMethod)
	if err != nil {
		return err
	}
	p, ok := principalFrom(ctx)
	if !ok || a.guard == nil {
		return handler(srv, &ctxStream{ServerStream: ss, ctx: ctx})
	}
	ctx, cancel := context.WithCancelCause(ctx)
	defer cancel(nil)
	stop := a.guard.add(p.hash, p.tokenID, cancel)
	defer stop()
	err = handler(srv, &ctxStream{ServerStream: ss, ctx: ctx})
	if cause := context.Cause(ctx); errors.Is(cause, errTokenGone) {
		return status.Error(codes.Unauthenticated, "the token was revoked or expired; the stream ends")
	}
	return err
}

// ctxStream is a server stream with a replaced context.
type ctxStream struct {
	grpc.ServerStream
	ctx context.Context
}

func (s *ctxStream) Context() context.Context { return s.ctx }
