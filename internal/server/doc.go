// Package server is nightloom's gRPC service: the services of
// proto/nightloom/v1 over a store (Storage, implemented by internal/store),
// with request validation, bearer-token roles, error mapping, metrics, a
// fan-out hub for WatchPlans, and the daemon's start-up and shutdown
// (Start, Run, Server.Shutdown), which cmd/nightloomd and the client's demo
// command use.
//
// This room converts between the API and the domain packages (ephem,
// constraints, scheduler) and builds every gRPC status of the program; the
// domain packages know nothing of it.
//
// # Files
//
//   - server.go: Config, Start/Run/Shutdown, listeners, TLS, health and
//     reflection.
//   - auth.go: roles, the method-to-role table, tokens, the auth
//     interceptor. interceptors.go: logging, metrics, error mapping, panic
//     recovery. errors.go: field violations and storage-error codes.
//   - validate.go, sitemodel.go, targetmodel.go, blockmodel.go: request
//     checks (limits.go holds every limit) and conversion to the domain.
//   - sites.go, targets.go, queue.go, plans.go, sky.go, networks.go: the
//     services.
//   - planning.go and networkplan.go (a network of sites, planned jointly
//     by scheduler.SolveNetwork): the only files that talk to the
//     scheduler.
//   - hub.go: WatchPlans fan-out with bounded buffers. metrics.go:
//     Prometheus. observe.go: one target seen from a site at an instant.
//
// # Authentication and roles
//
// Every RPC of the API needs "authorization: Bearer <token>" metadata. The
// standard health-checking service (grpc.health.v1.Health) and server
// reflection (grpc.reflection.v1 and v1alpha) need none: load balancers and
// generic clients use them, and they reveal only the public schema and the
// serving status. Tokens are 32 random bytes (crypto/rand) in unpadded
// base64url after "nlt_"; only their SHA-256 is stored, and neither the
// token nor its hash is logged (logs name the token's id). The roles:
//
//   - viewer: Get/List of sites, targets, blocks, plans, programs and
//     networks, GetProgramUsage; SkyService; CatalogueService;
//     NextAssignment and WatchPlans (both read-only);
//   - operator: what viewer may, plus QueueBlocks, WithdrawBlock,
//     ReportProgress, MakePlan, Replan, MakeNetworkPlan and ReplanNetwork;
//   - telescope: GetBlock, ListBlocks, GetPlan, ListPlans, NextAssignment,
//     WatchPlans, ReportProgress, Replan, ReplanNetwork, GetNetwork and
//     ListNetworks;
//   - admin: everything, sites, targets, programs and networks included.
//
// methodRoles in auth.go is the one table; a method missing from it is
// refused for everyone, and a test walks the service descriptors so that a
// new RPC without a row fails.
//
// # Errors
//
// Bad input is INVALID_ARGUMENT with a google.rpc.BadRequest detail whose
// field violations name the proto field path (e.g.
// "site.horizon[3].altitude_deg"), checked before anything is written.
// Storage errors are mapped in one place: not found -> NOT_FOUND, busy ->
// ABORTED (retry), already exists -> ALREADY_EXISTS, conflict ->
// FAILED_PRECONDITION; anything unexpected is INTERNAL with a generic
// message and the cause in the log.
//
// # Plans and watchers
//
// Each stored plan is the site's next version. Storing and publishing a
// version happen under a per-site lock, so watchers see versions in order;
// a watcher that falls behind by more than its buffer (DefaultWatchBuffer)
// is ended with RESOURCE_EXHAUSTED and the others go on. Queuing an open
// block of priority >= Config.ReplanPriority while the site's latest plan
// runs replans it in the background (origin PLAN_ORIGIN_QUEUED_BLOCK).
//
// # Several daemons
//
// On storage that several daemons share (PostgreSQL), the per-site lock
// also takes the storage's cross-daemon planning lock (ABORTED after
// PlanLockTimeout), and watchers receive every version from the storage's
// announcements instead of from the daemon that stored it, so that all
// daemons' watchers see all versions in order (replicas.go).
package server
