#!/bin/sh
# Make the committed seeds of fuzz_gpkg (tests/fuzz/corpus/gpkg/): the
# geometry blobs of a GeoPackage the project's own writer makes of the
# invented fixtures, one file per blob, read back with the sqlite3 shell.
# Run by hand: STOCKTAKE=build/stocktake sh tests/fuzz/mkseeds_gpkg.sh
set -eu
: "${STOCKTAKE:?set STOCKTAKE to the stocktake binary}"
root=$(cd "$(dirname "$0")/../.." && pwd)
out=$root/tests/fuzz/corpus/gpkg
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
mkdir -p "$out"
for f in "$root/tests/data/cli/marrowick.geojson" "$root/tests/data/geojson/mixed.geojson"; do
    name=$(basename "$f" .geojson)
    "$STOCKTAKE" convert -q "$f" "$tmp/$name.gpkg" || continue
    table=$(sqlite3 "$tmp/$name.gpkg" "SELECT table_name FROM gpkg_geometry_columns LIMIT 1")
    col=$(sqlite3 "$tmp/$name.gpkg" "SELECT column_name FROM gpkg_geometry_columns LIMIT 1")
    for fid in $(sqlite3 "$tmp/$name.gpkg" "SELECT fid FROM \"$table\" WHERE \"$col\" IS NOT NULL"); do
        sqlite3 "$tmp/$name.gpkg" "SELECT writefile('$out/${name}_$fid', \"$col\") FROM \"$table\" WHERE fid = $fid" >/dev/null
    done
done
ls -l "$out"
# The same WKB without the blob header, for the harness's second path.
/usr/bin/python3 - "$out" <<'PY'
import os, sys
d = sys.argv[1]
for name in sorted(os.listdir(d)):
    if name.startswith("wkb_"):
        continue
    b = open(os.path.join(d, name), "rb").read()
    env = {0: 0, 1: 32, 2: 48, 3: 48, 4: 64}.get((b[3] >> 1) & 7, 0)
    open(os.path.join(d, "wkb_" + name), "wb").write(b[8 + env:])
PY
