#!/usr/bin/env bash
# check-proto.sh checks the gRPC API: buf lint (STANDARD and COMMENTS, see
# buf.yaml), buf format, and that the committed generated Go code
# (proto/**/*.pb.go, and proto/nightloom/v1/descriptors.binpb, the
# descriptors with comments) is exactly what scripts/genproto.sh produces from the
# .proto files. It writes nothing in the repository. Exit status 0 when all
# pass; non-zero, with the lint findings or a diff, when not.
#
# Optional: PROTO_BREAKING_AGAINST=<buf input> also runs buf breaking (FILE
# rules) against that input, e.g. PROTO_BREAKING_AGAINST='.git#ref=HEAD~1'
# (the baseline must itself hold buf.yaml and the API).
#
# Needs only Go and the Go module proxy (the tools are pinned in
# scripts/genproto.sh and buf.gen.yaml).
set -euo pipefail

root=$(cd "$(dirname "$0")/.." && pwd)
cd "$root"
gen=scripts/genproto.sh

status=0

echo "check-proto.sh: buf lint"
if ! "$gen" -buf lint; then
	echo "check-proto.sh: buf lint failed" >&2
	status=1
fi

echo "check-proto.sh: buf format"
if ! "$gen" -buf format --diff --exit-code; then
	echo "check-proto.sh: .proto files are not formatted; run: scripts/genproto.sh -buf format -w" >&2
	status=1
fi

if [ -n "${PROTO_BREAKING_AGAINST:-}" ]; then
	echo "check-proto.sh: buf breaking against $PROTO_BREAKING_AGAINST"
	if ! "$gen" -buf breaking --against "$PROTO_BREAKING_AGAINST"; then
		echo "check-proto.sh: buf breaking failed (breaking changes, or the baseline has no buf.yaml and API)" >&2
		status=1
	fi
fi

echo "check-proto.sh: generated code"
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
mkdir -p "$tmp/committed" "$tmp/generated"
find proto \( -name '*.pb.go' -o -name 'descriptors.binpb' \) -type f | while read -r f; do
	mkdir -p "$tmp/committed/$(dirname "$f")"
	cp "$f" "$tmp/committed/$f"
done
"$gen" -o "$tmp/generated"
if ! (cd "$tmp" && diff -ruN committed generated); then
	echo "check-proto.sh: generated code is stale (diff above: committed -> generated); run scripts/genproto.sh" >&2
	status=1
fi

if [ "$status" -eq 0 ]; then
	echo "check-proto.sh: ok"
fi
exit "$status"
