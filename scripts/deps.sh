#!/bin/sh
# Install the Debian packages stocktake needs to build, test and demo.
# Prints what it installs; does nothing (quickly) when all are present.
set -eu

# Build: compiler, pkg-config and the libraries' -dev packages.
BUILD_PKGS="gcc make pkg-config libgeos-dev libproj-dev libshp-dev
libsqlite3-dev libpcre2-dev libyajl-dev libcsv-dev libcmocka-dev"
# Tests: outside references (GDAL, PROJ tools, shapely/pyproj/geopandas
# on Debian's python), and the sqlite3 shell.
TEST_PKGS="gdal-bin python3-gdal proj-bin python3-pyproj python3-shapely
python3-geopandas shapelib sqlite3 valgrind time"

missing=""
for p in $BUILD_PKGS $TEST_PKGS; do
    dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "ok installed" ||
        missing="$missing $p"
done

if [ -z "$missing" ]; then
    echo "deps: all packages present"
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
