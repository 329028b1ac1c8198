#!/usr/bin/env bash
# regen.sh rebuilds catalogue.tsv.gz (embedded by package catalogue) and the
# SEDS Messier reference table under testdata/catalogue from the npm packages
# named in README.md. Needs node and npm (the npm registry); run from anywhere.
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
root="$(cd "$here/../.." && pwd)"
tmp="$(mktemp -d)"; trap 'rm -rf "$tmp"' EXIT
cd "$tmp"
npm pack --silent d3-celestial@0.7.35 astronomy-engine@2.1.19 >/dev/null
mkdir d3c ae
tar xzf d3-celestial-0.7.35.tgz -C d3c
tar xzf astronomy-engine-2.1.19.tgz -C ae
node "$here/convert.mjs" d3c/package ae/package "$tmp/catalogue.tsv" "$root/testdata/catalogue/messier_seds.tsv"
gzip -9 -n -c "$tmp/catalogue.tsv" > "$here/catalogue.tsv.gz"
ls -l "$here/catalogue.tsv.gz"
