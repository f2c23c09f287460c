#!/bin/sh
# Make the committed seeds of fuzz_shp (tests/fuzz/corpus/shp/) from the
# invented fixtures in tests/data, through `stocktake convert` (the project's
# own Shapefile writer), packed by pack_shp.sh. Run by hand when the writer
# or the fixtures change: STOCKTAKE=build/stocktake sh tests/fuzz/mkseeds_shp.sh
set -eu
: "${STOCKTAKE:?set STOCKTAKE to the stocktake binary}"
root=$(cd "$(dirname "$0")/../.." && pwd)
out=$root/tests/fuzz/corpus/shp
tmp=$(mktemp -d)
trap 'rm -rf "$tmp"' EXIT
mkdir -p "$out"
pack() { sh "$root/tests/fuzz/pack_shp.sh" "$1" >"$out/$2"; }

"$STOCKTAKE" convert -q "$root/tests/data/cli/marrowick.geojson" "$tmp/town.shp"
"$STOCKTAKE" convert -q "$root/tests/data/cli/roundtrip.geojson" "$tmp/round.shp"
pack "$tmp/town" town_all_parts
pack "$tmp/round" roundtrip_all_parts
rm "$tmp/town.cpg"; pack "$tmp/town" town_no_cpg
rm "$tmp/town.prj"; pack "$tmp/town" town_no_prj_cpg
rm "$tmp/town.dbf"; pack "$tmp/town" town_no_dbf

# Points and lines: the reader's other shape types.
cat >"$tmp/pts.geojson" <<'JSON'
{"type":"FeatureCollection","features":[
{"type":"Feature","properties":{"n":1,"s":"a"},"geometry":{"type":"Point","coordinates":[1.5,2.5]}},
{"type":"Feature","properties":{"n":2,"s":null},"geometry":{"type":"Point","coordinates":[-3,4]}}]}
JSON
cat >"$tmp/lines.geojson" <<'JSON'
{"type":"FeatureCollection","features":[
{"type":"Feature","properties":{"r":0.25},"geometry":{"type":"MultiLineString","coordinates":[[[0,0],[1,1],[2,0]],[[5,5],[6,6]]]}}]}
JSON
"$STOCKTAKE" convert -q "$tmp/pts.geojson" "$tmp/pts.shp"
"$STOCKTAKE" convert -q "$tmp/lines.geojson" "$tmp/lines.shp"
pack "$tmp/pts" points
pack "$tmp/lines" lines
ls -l "$out"
