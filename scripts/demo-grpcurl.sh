#!/usr/bin/env bash
# demo-grpcurl.sh sends every request file of testdata/demo to a real
# nightloomd with grpcurl, the generic gRPC client, over server reflection,
# and fails on the first call that does not succeed. It checks the README's
# claim that the demo files are plain API requests.
#
# The files are sent as they are, except for what only a running daemon
# knows: the ids ("SITE_ID", "SITE_ID_WEST", "NETWORK_ID", "TARGET_ID",
# "BLOCK_ID", "PLAN_ID", an absent
# siteId, and the client's "@NAME" target references in blocks.json) are
# filled in with jq. The daemon runs on a simulated clock that starts on the
# afternoon of the demo night and runs 3600 times faster than real time, so
# that the demo's progress report (for that evening) lies in the past when
# it is sent and after the block was queued.
#
# Field masks: the canonical JSON of google.protobuf.FieldMask is a string
# of lowerCamelCase paths ("temperatureC,horizon"), which is what the two
# update files hold and what protojson (the nightloom client, every
# generated stub) reads. grpcurl (v1.9.4, dynamic messages) does not read
# that form and wants {"paths": [...]} instead, which protojson refuses, so
# no one file suits both: the script rewrites the mask into grpcurl's form
# (tomask below) and says so.
#
# grpcurl: Debian does not package it, so it is built from the Go module
# proxy (GRPCURL_VERSION) into a temporary folder. Needs Go and jq.
set -euo pipefail
GRPCURL_VERSION=v1.9.4

root=$(cd "$(dirname "$0")/.." && pwd)
cd "$root"
tmp=$(mktemp -d)
pid=""
cleanup() {
	if [ -n "$pid" ]; then kill "$pid" 2>/dev/null || true; wait "$pid" 2>/dev/null || true; fi
	rm -rf "$tmp"
}
trap cleanup EXIT

command -v jq >/dev/null || { echo "demo-grpcurl.sh: needs jq (Debian package jq)" >&2; exit 1; }
GOBIN="$tmp/bin" go install "github.com/fullstorydev/grpcurl/cmd/grpcurl@${GRPCURL_VERSION}"
go build -o "$tmp/bin/nightloomd" ./cmd/nightloomd
grpcurl="$tmp/bin/grpcurl"

db="$tmp/demo.db"
token=$("$tmp/bin/nightloomd" token create --role admin --label grpcurl --db "$db" 2>/dev/null)
"$tmp/bin/nightloomd" --db "$db" --listen 127.0.0.1:0 --log-format json \
	--clock-start 2027-01-14T12:00:00Z --clock-rate 3600 2>"$tmp/daemon.log" &
pid=$!
addr=""
for _ in $(seq 100); do
	addr=$(jq -r 'select(.msg == "nightloomd serving") | .addr' "$tmp/daemon.log" 2>/dev/null | head -1)
	[ -n "$addr" ] && break
	sleep 0.1
done
[ -n "$addr" ] || { echo "demo-grpcurl.sh: the daemon did not start" >&2; cat "$tmp/daemon.log" >&2; exit 1; }

# call METHOD FILE: send FILE (after the jq filter in $fix, if any) and
# print the response.
call() {
	local method=$1 file=$2 body
	body=$(jq -c "${fix:-.}" "$file")
	if ! out=$("$grpcurl" -plaintext -H "authorization: Bearer $token" -d "$body" "$addr" "nightloom.v1.$method" 2>&1); then
		echo "demo-grpcurl.sh: $method < $file failed:" >&2
		echo "$out" >&2
		exit 1
	fi
	echo "$method" >>"$tmp/sent" # a file: calls inside $(...) run in subshells
	echo "$out"
}

fix='.' site=$(call SiteService/CreateSite testdata/demo/site.json | jq -r .site.id)
# tomask: the canonical string form of a field mask into grpcurl's object form.
tomask='.updateMask |= {paths: (split(",") | map(gsub("(?<c>[A-Z])"; "_\(.c | ascii_downcase)")))}'
fix=".site.id = \"$site\" | $tomask" call SiteService/UpdateSite testdata/demo/update-site.json >/dev/null
names='{}'
for f in testdata/demo/targets/*.json; do
	r=$(fix='.' call TargetService/CreateTarget "$f")
	names=$(jq -c --argjson m "$names" '$m + {(.target.name): .target.id}' <<<"$r")
done
# The demo's real objects by catalogue name, and its comet from one-line
# orbital elements (ImportElements).
while read -r name; do
	case "$name" in "" | "#"*) continue ;; esac
	jq -n --arg n "$name" '{target: {name: $n, fixed: {catalogueId: $n}}}' >"$tmp/byname.json"
	r=$(fix='.' call TargetService/CreateTarget "$tmp/byname.json")
	names=$(jq -c --argjson m "$names" '$m + {(.target.name): .target.id}' <<<"$r")
done <testdata/demo/targets-by-name.txt
jq -n --rawfile t testdata/demo/comet-elements.txt '{requestId: "grpcurl-demo-comet", text: $t}' >"$tmp/elements.json"
r=$(fix='.' call TargetService/ImportElements "$tmp/elements.json")
names=$(jq -c --argjson m "$names" '$m + ([.targets[] | {(.name): .id}] | add)' <<<"$r")
body=$(jq -c --argjson m "$names" --arg s "$site" \
	'.blocks |= map(.siteId = $s | if (.targetId | startswith("@")) then .targetId = $m[.targetId[1:]] else . end)' testdata/demo/blocks.json)
echo "$body" >"$tmp/blocks.json"
fix='.' call QueueService/QueueBlocks "$tmp/blocks.json" >/dev/null
nld12=$(jq -r '.["NLD 12"]' <<<"$names")
fix=".target.id = \"$nld12\" | $tomask" call TargetService/UpdateTarget testdata/demo/update-target.json >/dev/null
plan=$(fix=".siteId = \"$site\"" call PlanService/MakePlan testdata/demo/plan.json)
plan_id=$(jq -r '.plans[0].id' <<<"$plan")
block=$(jq -r '[.plans[0].assignments[] | select(.frames >= 12)][0].blockId' <<<"$plan")
sleep 9 # the simulated clock passes the evening of the report
fix=".report.blockId = \"$block\" | .report.planId = \"$plan_id\"" call QueueService/ReportProgress testdata/demo/progress.json >/dev/null
fix=".siteId = \"$site\"" call PlanService/Replan testdata/demo/replan.json >/dev/null
fix=".siteId = \"$site\"" call SkyService/Ephemeris testdata/demo/ephemeris.json >/dev/null
fix=".siteId = \"$site\"" call SkyService/Visibility testdata/demo/visibility.json >/dev/null
# The network: the second site, the network of both ("SITE_ID",
# "SITE_ID_WEST"), its block ("NETWORK_ID", "@NLV 59") and its night.
west=$(fix='.' call SiteService/CreateSite testdata/demo/site-west.json | jq -r .site.id)
network=$(fix=".network.siteIds = [\"$site\", \"$west\"]" call NetworkService/CreateNetwork testdata/demo/network.json | jq -r .network.id)
body=$(jq -c --argjson m "$names" --arg n "$network" \
	'.blocks |= map(.networkId = $n | if (.targetId | startswith("@")) then .targetId = $m[.targetId[1:]] else . end)' testdata/demo/network-blocks.json)
echo "$body" >"$tmp/network-blocks.json"
fix='.' call QueueService/QueueBlocks "$tmp/network-blocks.json" >/dev/null
fix=".networkId = \"$network\"" call NetworkService/MakeNetworkPlan testdata/demo/network-plan.json >/dev/null
echo "demo-grpcurl.sh: $(wc -l <"$tmp/sent" | tr -d ' ') requests from testdata/demo sent with grpcurl $GRPCURL_VERSION, all succeeded"
