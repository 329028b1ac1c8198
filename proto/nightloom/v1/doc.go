// Package nightloomv1 is the gRPC API of nightloom, generated from the .proto
// files in this directory (package nightloom.v1).
//
// # Services
//
//   - SiteService (site.proto): telescopes at places, with horizon profile,
//     atmosphere, mount and imaging train.
//   - TargetService (target.proto): fixed ICRS places and two-body orbits.
//   - QueueService (queue.proto): imaging blocks and progress reports.
//   - PlanService (plan.proto): plan versions, replanning, dispatch and a
//     stream of new versions.
//   - SkyService (sky.proto): ephemeris tables, night events, visibility.
//   - ExportService (export.proto): a plan as CSV or iCalendar.
//   - ProgramService (program.proto): programs of a shared telescope, their
//     allocations per period, and the time used and planned.
//
// Shared messages and enums (intervals, dates, the constraint set, pointing,
// reasons) are in common.proto, whose leading comment states the
// conventions: degrees for angles, units in field names, Duration and
// Timestamp for times (a `_tt` Timestamp reads Terrestrial Time), how bad
// input and paging work.
//
// # Regenerating
//
// The *.pb.go files are generated and committed; do not edit them. After
// changing a .proto file run scripts/genproto.sh, and scripts/check-proto.sh
// to lint the API and check that the committed code is fresh. The tools
// (buf, protoc-gen-go, protoc-gen-go-grpc) are pinned in those scripts and in
// buf.gen.yaml and fetched with `go run module@version`.
package nightloomv1
