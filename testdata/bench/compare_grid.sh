#!/usr/bin/env bash
# Run constraints.BenchmarkNightGrid and testdata/bench/astropy_grid.py in one job and print the
# ratios (astropy time / nightloom time), CPU time and wall time, for each mode.
#
#   bash testdata/bench/compare_grid.sh            # installs Debian's python3-astropy and python3-ephem if missing
#   REPEAT=10 ROUNDS=5 bash testdata/bench/compare_grid.sh
#
# The machine's speed drifts over minutes (on the shared 2-core machine astropy's median took
# 220 ms in one run and 375 ms in another), so the script runs ROUNDS rounds (default 3), each
# one nightloom run per core count then one astropy run, and prints each round's ratios (nightloom
# against the astropy run next to it) and the median of the rounds' ratios.
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
go test -c -o "$out.test" ./constraints/
trap 'rm -f "$out" "$out.test"' EXIT
for round in $(seq "${ROUNDS:-3}"); do
	echo "round $round" | tee -a "$out"
	# One run per core count: with -cpu 1,N the sub-benchmarks (b.Loop) all ran with the first
	# list entry's GOMAXPROCS whatever their label said (seen with Go 1.26: "-cpu 1,2" gave both
	# rows two cores, "-cpu 2,1" gave both one).
	for c in 1 "$ncpu"; do
		(cd constraints && "$out.test" -test.run '^$' -test.bench 'NightGrid' -test.benchtime "${REPEAT:-5}x" -test.cpu "$c") | grep '^Benchmark' | tee -a "$out"
	done
	PYTHONDONTWRITEBYTECODE=1 "$py" "$here/astropy_grid.py" --repeat "${REPEAT:-5}" | tee -a "$out"
done
awk -v ncpu="$ncpu" '
function median(list,   a, n, i, j, t) {
	n = split(list, a, " ")
	for (i = 2; i <= n; i++) for (j = i; j > 1 && a[j-1] + 0 > a[j] + 0; j--) { t = a[j]; a[j] = a[j-1]; a[j-1] = t }
	return (n % 2) ? a[(n+1)/2] : (a[n/2] + a[n/2+1]) / 2
}
/^round / { r = $2; rounds = r }
/^BenchmarkNightGrid\// {
	split($1, a, "/"); mode = a[2]; cpus = 1
	if (mode ~ /-[0-9]+$/) { cpus = mode; sub(/.*-/, "", cpus); sub(/-[0-9]+$/, "", mode) }
	for (i = 2; i <= NF; i++) { if ($i == "ns/op") wall = $(i-1) / 1e6; if ($i == "cpu-ms/op") cpu = $(i-1) }
	gw[r "," mode "," cpus] = wall; gc[r "," mode "," cpus] = cpu
}
/^astropy / { aw[r "," $2] = $4; ac[r "," $2] = $6 }
END {
	split("sky no-sky", modes, " ")
	printf "\n%-5s %-8s %-6s %9s %9s   %-26s %-26s\n", "round", "go mode", "cores", "wall ms", "cpu ms", "x astropy alt/az+airmass", "x astropy with sky"
	for (r = 1; r <= rounds; r++) for (m = 1; m <= 2; m++) for (c = 1; c <= 2; c++) {
		cores = (c == 1) ? 1 : ncpu; k = r "," modes[m] "," cores
		if (!(k in gw)) continue
		x1 = aw[r ",no-sky"] / gw[k]; x2 = ac[r ",no-sky"] / gc[k]; x3 = aw[r ",sky"] / gw[k]; x4 = ac[r ",sky"] / gc[k]
		printf "%-5s %-8s %-6s %9.1f %9.1f   wall %6.1fx  cpu %6.1fx   wall %6.1fx  cpu %6.1fx\n", r, modes[m], cores, gw[k], gc[k], x1, x2, x3, x4
		key = modes[m] "," cores
		W[key] = W[key] " " gw[k]; C[key] = C[key] " " gc[k]; X1[key] = X1[key] " " x1; X2[key] = X2[key] " " x2; X3[key] = X3[key] " " x3; X4[key] = X4[key] " " x4
	}
	for (r = 1; r <= rounds; r++) printf "round %d astropy no-sky: wall %.1f ms, cpu %.1f ms; astropy sky: wall %.1f ms, cpu %.1f ms\n", r, aw[r ",no-sky"], ac[r ",no-sky"], aw[r ",sky"], ac[r ",sky"]
	printf "\nmedian over %d rounds of the ratios\n", rounds
	for (m = 1; m <= 2; m++) for (c = 1; c <= 2; c++) {
		cores = (c == 1) ? 1 : ncpu; key = modes[m] "," cores
		if (!(key in W)) continue
		printf "%-5s %-8s %-6s %9.1f %9.1f   wall %6.1fx  cpu %6.1fx   wall %6.1fx  cpu %6.1fx\n", "med", modes[m], cores, median(W[key]), median(C[key]), median(X1[key]), median(X2[key]), median(X3[key]), median(X4[key])
	}
}' "$out"
