#!/usr/bin/env bash
# Regenerate the README's scaling table and chart (docs/scaling.md, docs/scaling.png) from
# scheduler.BenchmarkScaling: planning time and memory for 50..5000 blocks over 1, 7 and 30 nights.
# The raw benchmark output is kept beside them (docs/scaling.txt).
#
#   bash testdata/bench/scaling.sh                   # every size (takes minutes)
#   PATTERN='blocks=(50|200)/' bash testdata/bench/scaling.sh   # a subset
set -euo pipefail
root="$(cd "$(dirname "${BASH_SOURCE[0]}")/../.." && pwd)"
cd "$root"
pattern="^BenchmarkScaling\$/${PATTERN:-}"
go test -run '^$' -bench "$pattern" -benchtime 1x -timeout 60m ./scheduler/ | tee docs/scaling.txt
go run ./testdata/bench/scaling -md docs/scaling.md -png docs/scaling.png < docs/scaling.txt
cat docs/scaling.md
