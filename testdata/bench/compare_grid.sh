#!/usr/bin/env bash
# Run constraints.BenchmarkNightGrid and testdata/bench/astropy_grid.py in one job and print the
# ratios (astropy time / nightloom time), CPU time and wall time, for each mode.
#
#   bash testdata/bench/compare_grid.sh            # installs Debian's python3-astropy and python3-ephem if missing
#   REPEAT=5 bash testdata/bench/compare_grid.sh
#
# The astropy reference is the vectorised alt/az + airmass grid ("no-sky"), the same one the
# issue measures against; "astropy sky" (Sun, Moon, separations, Krisciunas & Schaefer sky
# brightness) is printed too.  nightloom is measured with -cpu 1 (one core) and with every
# core (the grid splits targets across goroutines).  cpu-ms counts the process's CPU time, which
# on a shared machine is steadier than wall time.
set -euo pipefail
here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
root="$(cd "$here/../.." && pwd)"
py=/usr/bin/python3
# astropy_grid.py shares testdata/ephem/ref_common.py, which imports PyEphem too.
if ! "$py" -c 'import astropy, ephem' 2>/dev/null; then
	if [ "$(id -u)" = "0" ]; then
		DEBIAN_FRONTEND=noninteractive apt-get install -y python3-astropy python3-ephem
	else
		sudo DEBIAN_FRONTEND=noninteractive apt-get install -y python3-astropy python3-ephem
	fi
fi
out="$(mktemp)"
trap 'rm -f "$out"' EXIT
cd "$root"
ncpu="$(nproc)"
# One go test per core count: with -cpu 1,N the sub-benchmarks (b.Loop) all ran with the first
# list entry's GOMAXPROCS whatever their label said (seen with Go 1.26: "-cpu 1,2" gave both rows
# two cores, "-cpu 2,1" gave both one).
for c in 1 "$ncpu"; do
	go test -run '^$' -bench 'NightGrid' -benchtime "${REPEAT:-5}x" -cpu "$c" ./constraints/ | tee -a "$out"
done
PYTHONDONTWRITEBYTECODE=1 "$py" "$here/astropy_grid.py" --repeat "${REPEAT:-5}" | tee -a "$out"
awk -v ncpu="$ncpu" '
/^BenchmarkNightGrid\// {
	split($1, a, "/"); mode = a[2]; cpus = 1
	if (mode ~ /-[0-9]+$/) { cpus = mode; sub(/.*-/, "", cpus); sub(/-[0-9]+$/, "", mode) }
	for (i = 2; i <= NF; i++) { if ($i == "ns/op") wall = $(i-1) / 1e6; if ($i == "cpu-ms/op") cpu = $(i-1) }
	gw[mode "," cpus] = wall; gc[mode "," cpus] = cpu
}
/^astropy / { aw[$2] = $4; ac[$2] = $6 }
END {
	printf "\n%-8s %-6s %10s %10s   %-28s %-28s\n", "go mode", "cores", "wall ms", "cpu ms", "x astropy alt/az+airmass", "x astropy with sky"
	split("sky no-sky", modes, " ")
	for (m = 1; m <= 2; m++) for (c = 1; c <= 2; c++) {
		cores = (c == 1) ? 1 : ncpu; k = modes[m] "," cores
		if (!(k in gw)) continue
		printf "%-8s %-6s %10.1f %10.1f   wall %6.1fx  cpu %6.1fx     wall %6.1fx  cpu %6.1fx\n", modes[m], cores, gw[k], gc[k],
			aw["no-sky"] / gw[k], ac["no-sky"] / gc[k], aw["sky"] / gw[k], ac["sky"] / gc[k]
	}
	printf "astropy no-sky: wall %.1f ms, cpu %.1f ms; astropy sky: wall %.1f ms, cpu %.1f ms\n", aw["no-sky"], ac["no-sky"], aw["sky"], ac["sky"]
}' "$out"
