#!/bin/sh
# Install the Debian packages stocktake needs to build, test and demo.
# Prints what it installs; does nothing (quickly) when all are present.
set -eu

# Build: compiler, pkg-config and the libraries' -dev packages.
BUILD_PKGS="gcc make pkg-config libgeos-dev libproj-dev libshp-dev
libsqlite3-dev libpcre2-dev libyajl-dev libcsv-dev libcmocka-dev"
# Tests: outside references (GDAL, PROJ tools, shapely/pyproj/geopandas
# on Debian's python), the sqlite3 shell, JSON Schema validation of
# report.json, a real browser (headless Chromium) for report.html, and
# GNU parallel for scripts/run-tiles.sh (a job run tile by tile).
TEST_PKGS="gdal-bin python3-gdal proj-bin python3-pyproj python3-shapely
python3-geopandas shapelib sqlite3 valgrind time python3-jsonschema chromium
parallel"
# Fuzzing (`make fuzz` only, asked for with `deps.sh fuzz`): clang and its
# runtime libraries (libFuzzer, sanitizers) for the default clang version.
FUZZ_PKGS="clang libclang-rt-dev"

want="$BUILD_PKGS $TEST_PKGS"
[ "${1:-}" = fuzz ] && want=$FUZZ_PKGS

missing=""
for p in $want; do
    dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "ok installed" ||
        missing="$missing $p"
done

if [ -z "$missing" ]; then
    echo "deps: all packages present${1:+ ($1)}"
    exit 0
fi

echo "deps: installing:$missing"
if [ "$(id -u)" != 0 ]; then
    echo "deps: not root; run as root or: apt-get install$missing" >&2
    exit 2
fi
export DEBIAN_FRONTEND=noninteractive
apt-get update -qq
# shellcheck disable=SC2086
apt-get install -y -qq $missing
