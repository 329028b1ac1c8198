#!/usr/bin/env bash
# Regenerate the README's scaling tables and chart (docs/scaling.md, docs/scaling.png) from
# scheduler.BenchmarkScaling (planning time and memory for 50..5000 blocks over 1, 7 and 30 nights)
# and scheduler.BenchmarkScalingSites (networks of 1, 5 and 10 sites, SolveNetwork).
# The raw benchmark output is kept beside them (docs/scaling.txt).
#
#   bash testdata/bench/scaling.sh                   # every size (takes minutes)
#   PATTERN='blocks=(50|200)/' bash testdata/bench/scaling.sh   # a subset of BenchmarkScaling
#   SITES_PATTERN='sites=1/' bash testdata/bench/scaling.sh      # a subset of the networks
set -euo pipefail
root="$(cd "$(dirname "${BASH_SOURCE[0]}")/../.." && pwd)"
cd "$root"
pattern="^BenchmarkScaling\$/${PATTERN:-}"
go test -run '^$' -bench "$pattern" -benchtime 1x -timeout 60m ./scheduler/ | tee docs/scaling.txt
go test -run '^$' -bench "^BenchmarkScalingSites\$/${SITES_PATTERN:-}" -benchtime 1x -timeout 60m ./scheduler/ | tee -a docs/scaling.txt
go run ./testdata/bench/scaling -md docs/scaling.md -png docs/scaling.png < docs/scaling.txt
cat docs/scaling.md
