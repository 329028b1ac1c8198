#!/usr/bin/env bash
# Extra CI checks (issue 7), run by .ci/run after `go test ./...`:
#
#  1. every fuzz target of the module for a short while (FUZZTIME, 3s by
#     default), one target per `go test -fuzz` invocation, as Go requires;
#     the targets are found by name (func FuzzXxx in *_test.go), so a new
#     one is run without editing this script;
#  2. the race detector over the server, the store and the commands, in
#     -short mode (the long end-to-end runs, executor on simulators and
#     SIGKILL rounds, run in full in the plain test run before):
#     go test -race -short -count=1 ./internal/... ./cmd/...
#
# It installs nothing and needs only Go and a C compiler (go-sqlite3 and
# the race detector use cgo). A fuzz failure leaves its input under the
# package's testdata/fuzz/ and fails the run; reproduce it with
# `go test -run 'FuzzXxx/<name>' ./pkg`.
#
# New interesting inputs are minimized for at most FUZZMINIMIZE (200x: 200
# runs) rather than Go's default 60 s, which on the end-to-end server target
# would spend the whole short run minimizing instead of fuzzing.
#
# Environment: FUZZTIME (e.g. 30s) lengthens each fuzz run, FUZZMINIMIZE
# sets -fuzzminimizetime; SKIP_FUZZ=1 or SKIP_RACE=1 leaves one part out.
set -euo pipefail
cd "$(dirname "$0")/.."

fuzztime="${FUZZTIME:-3s}"
fuzzminimize="${FUZZMINIMIZE:-200x}"
log="$(mktemp -d)"
trap 'rm -rf "$log"' EXIT
start_all=$(date +%s)

if [ "${SKIP_FUZZ:-0}" != 1 ]; then
	echo "== fuzz: each target for $fuzztime"
	# "dir name" pairs, sorted, from the test files tracked or not.
	targets=$(grep -rEo --include='*_test.go' --exclude-dir=.git --exclude-dir=node_modules --exclude-dir=testdata '^func Fuzz[A-Za-z0-9_]+\(' . \
		| sed -E 's#^\./(.*)/[^/]+_test\.go:func (Fuzz[A-Za-z0-9_]+)\($#\1 \2#; s#^\./[^/]+_test\.go:func (Fuzz[A-Za-z0-9_]+)\($#. \1#' \
		| sort -u)
	if [ -z "$targets" ]; then
		echo "no fuzz targets found"; exit 1
	fi
	summary=""
	while read -r dir name; do
		[ -n "$dir" ] || continue
		t0=$(date +%s)
		out="$log/$name.txt"
		if ! go test -run '^$' -fuzz "^${name}\$" -fuzztime "$fuzztime" -fuzzminimizetime "$fuzzminimize" "./$dir" >"$out" 2>&1; then
			cat "$out"
			echo "FAIL: fuzz target $name in ./$dir (the failing input is under ./$dir/testdata/fuzz/$name/)"
			exit 1
		fi
		# The last progress line holds the inputs tried: "execs: N (R/sec)".
		execs=$(grep -Eo 'execs: [0-9]+' "$out" | tail -1 | grep -Eo '[0-9]+' || echo 0)
		line=$(printf '%-28s %-22s %10s inputs %4ss' "$name" "./$dir" "$execs" "$(($(date +%s) - t0))")
		echo "$line"
		summary+="$line"$'\n'
	done <<<"$targets"
fi

if [ "${SKIP_GRPCURL:-0}" != 1 ]; then
	echo "== every testdata/demo request sent with grpcurl (scripts/demo-grpcurl.sh)"
	t0=$(date +%s)
	scripts/demo-grpcurl.sh
	echo "grpcurl run: $(($(date +%s) - t0))s"
fi

if [ "${SKIP_RACE:-0}" != 1 ]; then
	echo "== go test -race -short -count=1 ./internal/... ./cmd/..."
	t0=$(date +%s)
	go test -race -short -count=1 ./internal/... ./cmd/...
	echo "race run: $(($(date +%s) - t0))s"
fi

if [ -n "${summary:-}" ]; then
	echo "== fuzz inputs tried ($fuzztime per target)"
	printf '%s' "$summary"
fi
echo "ci-extra: $(($(date +%s) - start_all))s in all"
