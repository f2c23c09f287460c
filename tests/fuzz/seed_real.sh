#!/bin/sh
# Add small cuts of the real extracts (../shared/data/real, ODbL: tests
# only, not committed) to the working fuzz corpora under $1/<target>/.
# Each cut is the first few features, so the fuzzer starts from real
# structure (Cyrillic names, long tag lists, code-page DBFs) without the
# corpus growing by megabytes. Skips quietly when the data is absent.
set -u
out=$1
root=$(cd "$(dirname "$0")/../.." && pwd)
real=$(cd "$root/../shared/data/real" 2>/dev/null && pwd) || exit 0
py=/usr/bin/python3
mkdir -p "$out/geojson" "$out/shp" "$out/rules" "$out/gpkg"

# GeoJSON: the first 3 features of each layer, as a collection and as lines.
for f in "$real"/*/*.geojson; do
    name=$(basename "$(dirname "$f")")_$(basename "$f" .geojson)
    "$py" - "$f" "$out/geojson/real_$name" <<'PY' || true
import json, sys
doc = json.load(open(sys.argv[1], encoding="utf-8"))
feats = doc.get("features", [])[:3]
doc["features"] = feats
open(sys.argv[2] + ".json", "w", encoding="utf-8").write(json.dumps(doc, ensure_ascii=False))
open(sys.argv[2] + ".jsonl", "w", encoding="utf-8").write(
    "\n".join(json.dumps(x, ensure_ascii=False) for x in feats) + "\n")
PY
done

# Shapefile: the first 3 records through GDAL, packed as fuzz_shp expects.
if command -v ogr2ogr >/dev/null 2>&1; then
    tmp=$(mktemp -d)
    for f in "$real"/*/*.shp; do
        name=$(basename "$(dirname "$f")")
        ogr2ogr -q -limit 3 "$tmp/$name.shp" "$f" 2>/dev/null || continue
        [ -f "$(dirname "$f")/$(basename "$f" .shp).cpg" ] &&
            cp "$(dirname "$f")/$(basename "$f" .shp).cpg" "$tmp/$name.cpg"
        sh "$root/tests/fuzz/pack_shp.sh" "$tmp/$name" >"$out/shp/real_$name"
    done
    rm -rf "$tmp"
fi

# GeoPackage: the geometry blobs of the first 5 features of each table.
if command -v sqlite3 >/dev/null 2>&1; then
    for f in "$real"/*/*.gpkg; do
        [ -f "$f" ] || continue
        name=$(basename "$(dirname "$f")")
        sqlite3 -readonly "$f" "SELECT table_name, column_name FROM gpkg_geometry_columns" 2>/dev/null |
        while IFS='|' read -r table col; do
            sqlite3 -readonly "$f" "SELECT writefile('$out/gpkg/real_${name}_' || rowid, \"$col\")
                FROM \"$table\" WHERE \"$col\" IS NOT NULL LIMIT 5" >/dev/null 2>&1 || true
        done
    done
fi

# Rules: the shipped rule packs.
for f in "$root"/rules/*.rules "$root"/rules/*/*.rules; do
    [ -f "$f" ] && cp "$f" "$out/rules/pack_$(basename "$f")"
done
exit 0
