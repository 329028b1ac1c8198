#!/usr/bin/env bash
# regen.sh rebuilds the reference tables of package catalogue's tests:
#   constellations_astronomy_engine.tsv  (npm astronomy-engine 2.1.19, MIT)
#   stars_pyephem.tsv                    (Debian python3-ephem)
# messier_seds.tsv is written by catalogue/data/regen.sh with the embedded data.
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
tmp="$(mktemp -d)"; trap 'rm -rf "$tmp"' EXIT
(cd "$tmp" && npm pack --silent astronomy-engine@2.1.19 >/dev/null && tar xzf astronomy-engine-2.1.19.tgz)
node "$here/gen_constellations.mjs" "$tmp/package/astronomy.js" "$here/constellations_astronomy_engine.tsv"
/usr/bin/python3 -c "import ephem" 2>/dev/null || apt-get install -y python3-ephem  # Debian's package, not a pip one
/usr/bin/python3 "$here/gen_stars_pyephem.py" > "$here/stars_pyephem.tsv"
/usr/bin/python3 "$here/gen_constellations_pyephem.py" < "$here/constellations_astronomy_engine.tsv" > "$here/constellations_pyephem.tsv"
