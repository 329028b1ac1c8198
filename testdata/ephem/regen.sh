#!/usr/bin/env bash
# Regenerate the ephem reference tables (sky_cases.csv, orbit_cases.csv, night_cases.csv,
# planet_cases.csv) and
# their cross-check summaries (crosscheck_*.txt) from Debian's packages.
#
#   bash testdata/ephem/regen.sh            # installs the packages (needs root or sudo), then generates
#   SKIP_APT=1 bash testdata/ephem/regen.sh # packages already installed
#
# The tables are committed; CI does not run this.  The subfolders earth/ and planets/ (the
# VSOP87 generators of ephem's series) are not run.
# Takes about 3-6 minutes on two cores (most of it is night_cases.csv).
set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"

if [ "${SKIP_APT:-0}" != "1" ]; then
	pkgs="python3-ephem python3-astropy python3-erfa python3-numpy python3-mpmath python3-skyfield nodejs npm"
	if [ "$(id -u)" = "0" ]; then
		apt-get update
		DEBIAN_FRONTEND=noninteractive apt-get install -y $pkgs
	else
		sudo apt-get update
		sudo DEBIAN_FRONTEND=noninteractive apt-get install -y $pkgs
	fi
fi

# Debian's interpreter, not whatever python3 comes first on PATH.
py=/usr/bin/python3
export PYTHONDONTWRITEBYTECODE=1

cd "$here"
"$py" -c 'import ref_common as rc; print("libraries:", rc.versions_line())'
"$py" gen_sky.py
"$py" gen_orbit.py
"$py" gen_night.py
# planet_cases.csv needs the npm package astronomia 4.2.0 (full VSOP87B) for its second
# distance source; installed into a temporary folder.
npmdir="$(mktemp -d)"
(cd "$npmdir" && npm install --silent astronomia@4.2.0)
NODE_PATH="$npmdir/node_modules" "$py" gen_planets.py
rm -rf "$npmdir"
wc -l sky_cases.csv orbit_cases.csv night_cases.csv planet_cases.csv
