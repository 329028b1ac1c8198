#!/usr/bin/env bash
# Regenerate testdata/plancheck/pyephem_runs.csv from plans.json with Debian's PyEphem.
#
#   go test ./scheduler -run TestPlanCheckPyEphem -update-plancheck   # plans.json from today's plans
#   bash testdata/plancheck/gen.sh                                    # installs python3-ephem if missing
#
# The table is committed; CI does not run this.
set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
py=/usr/bin/python3 # Debian's interpreter, not whatever python3 comes first on PATH

if ! "$py" -c 'import ephem' 2>/dev/null; then
	if [ "$(id -u)" = "0" ]; then
		apt-get update
		DEBIAN_FRONTEND=noninteractive apt-get install -y python3-ephem
	else
		sudo apt-get update
		sudo DEBIAN_FRONTEND=noninteractive apt-get install -y python3-ephem
	fi
fi
export PYTHONDONTWRITEBYTECODE=1
"$py" "$here/gen.py"
