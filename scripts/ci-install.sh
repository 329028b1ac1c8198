#!/usr/bin/env bash
# Installs the Debian packages that the tests of real outside parts need
# (called by .ci/run before the tests). Each package is installed only when
# missing, after one `apt-get update`. Locally, run it as root to get the same
# parts CI has; the tests that need them skip (locally) or fail (CI=true) when
# they are missing.
#
# One line per need in PACKAGES: "<command or file that proves it> <package>".
set -euo pipefail

PACKAGES=(
	"chromium chromium"
	"/usr/lib/postgresql/15/bin/initdb postgresql"
	"indiserver indi-bin"
	"/usr/lib/python3/dist-packages/astropy python3-astropy"
	"jq jq"
)

need=()
for entry in "${PACKAGES[@]}"; do
	probe=${entry%% *}
	pkg=${entry##* }
	if [[ $probe == /* ]]; then
		[ -e "$probe" ] || need+=("$pkg")
	else
		command -v "$probe" >/dev/null 2>&1 || need+=("$pkg")
	fi
done
if [ ${#need[@]} -eq 0 ]; then
	echo "ci-install: nothing missing"
	exit 0
fi
if [ "$(id -u)" != 0 ]; then
	echo "ci-install: missing ${need[*]} and not root; install them with apt-get"
	exit 0
fi
echo "ci-install: apt-get install ${need[*]}"
export DEBIAN_FRONTEND=noninteractive
apt-get update -qq
apt-get install -y -qq --no-install-recommends "${need[@]}"
