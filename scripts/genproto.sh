#!/usr/bin/env bash
# genproto.sh regenerates the Go code of the nightloom gRPC API
# (proto/nightloom/v1/*.pb.go, committed next to the .proto files).
#
# Usage:
#   scripts/genproto.sh              regenerate in place
#   scripts/genproto.sh -o DIR       write the generated tree under DIR instead
#                                    (DIR/proto/nightloom/v1/...); the
#                                    repository is not touched
#   scripts/genproto.sh -buf ARGS... run the pinned buf with ARGS (used by
#                                    scripts/check-proto.sh for lint)
#
# Tools, all pinned and fetched through the Go module proxy by `go run`, so a
# fresh machine needs only Go:
#   buf                 github.com/bufbuild/buf/cmd/buf                  (BUF_VERSION below)
#   protoc-gen-go       google.golang.org/protobuf/cmd/protoc-gen-go     (pinned in buf.gen.yaml)
#   protoc-gen-go-grpc  google.golang.org/grpc/cmd/protoc-gen-go-grpc    (pinned in buf.gen.yaml)
# The first run downloads and builds them (about 2 minutes on a 2-core
# machine with an empty module cache); later runs reuse Go's caches.
set -euo pipefail

BUF_VERSION=v1.75.0

buf() {
	go run "github.com/bufbuild/buf/cmd/buf@${BUF_VERSION}" "$@"
}

root=$(cd "$(dirname "$0")/.." && pwd)

out=""
case "${1:-}" in
-buf)
	shift
	cd "$root"
	buf "$@"
	exit
	;;
-o)
	[ $# -eq 2 ] || { echo "genproto.sh: -o needs exactly one directory" >&2; exit 2; }
	mkdir -p "$2"
	out=$(cd "$2" && pwd) # resolved against the caller's directory
	;;
"") ;;
*)
	echo "usage: scripts/genproto.sh [-o DIR | -buf ARGS...]" >&2
	exit 2
	;;
esac

cd "$root"

# Generate into a scratch directory first, so a failed run leaves the
# committed files alone and files of deleted .proto sources disappear.
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
buf generate --template buf.gen.yaml --output "$tmp"
# The API's descriptors with their comments (source info), embedded by the
# proto package for server reflection and the field reference (docs/).
buf build --exclude-imports -o "$tmp/proto/nightloom/v1/descriptors.binpb"

if [ -n "$out" ]; then
	cp -R "$tmp/." "$out/"
	exit 0
fi

find proto \( -name '*.pb.go' -o -name 'descriptors.binpb' \) -type f -delete
(cd "$tmp" && find proto \( -name '*.pb.go' -o -name 'descriptors.binpb' \) -type f) | while read -r f; do
	mkdir -p "$(dirname "$f")"
	cp "$tmp/$f" "$f"
done
echo "genproto.sh: regenerated $(cd "$tmp" && find proto -name '*.pb.go' | wc -l | tr -d ' ') files under proto/"
