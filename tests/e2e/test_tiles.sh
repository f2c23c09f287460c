#!/bin/sh
# run --tile / --bbox and merge (docs/scale.md): the demo town split into
# the tiles of zoom 16 (at least 16 of them), each run as a part, then
# merged, gives the inventory and report of a single run feature by
# feature (tests/e2e/compare_inventories.py): the same buildings kept, the
# same duplicates set aside, the same findings, district figures, defaults
# learned from the data and drawn with a seed. Then the same with two
# boxes and a halo too small (the run widens it itself), and the merges
# that must be refused: a part missing, a part twice (overlapping
# windows), a part made with other rules, a part with a report.
. "$ST_TESTS_ROOT/e2e/lib.sh"
S=$ROOT/samples
SOURCE_DATE_EPOCH=1700000000
export SOURCE_DATE_EPOCH
opts="-r $ROOT/rules/demo.rules --districts $S/districts.geojson --district-key district_id
--region-key region_id --reference $S/reference_counts.csv --fill draw --seed 7"
ins="$S/buildings_osm.geojson $S/buildings_cadastre.geojson"
before=$(sha "$S/buildings_osm.geojson")

# shellcheck disable=SC2086
"$STOCKTAKE" run -q $opts -o "$TMP/single.gpkg" --report "$TMP/single" $ins 2>"$TMP/err" ||
    { cat "$TMP/err" >&2; fail "single run failed"; }

# shellcheck disable=SC2086
"$STOCKTAKE" tiles -z 16 $ins >"$TMP/tiles" || fail "tiles failed"
n=$(wc -l <"$TMP/tiles")
[ "$n" -ge 16 ] || fail "only $n tiles at zoom 16"
mkdir -p "$TMP/parts"
while read -r t; do
    # shellcheck disable=SC2086
    "$STOCKTAKE" run -q $opts --tile "$t" -o "$TMP/parts/$(echo "$t" | tr / _).gpkg" $ins \
        2>"$TMP/err" || { cat "$TMP/err" >&2; fail "part $t failed"; }
done <"$TMP/tiles"
# shellcheck disable=SC2086
"$STOCKTAKE" merge -q $opts -o "$TMP/merged.gpkg" --report "$TMP/merged" "$TMP"/parts/*.gpkg \
    2>"$TMP/err" || { cat "$TMP/err" >&2; fail "merge failed"; }
$PY "$ST_TESTS_ROOT/e2e/compare_inventories.py" "$TMP/single.gpkg" "$TMP/merged.gpkg" \
    "$TMP/single" "$TMP/merged" || fail "tiles merged differ from the single run"
[ "$(sha "$S/buildings_osm.geojson")" = "$before" ] || fail "input changed"
# the parts' folder stands for the parts in it
# shellcheck disable=SC2086
"$STOCKTAKE" merge -q $opts -o "$TMP/folder.gpkg" "$TMP/parts" 2>"$TMP/err" ||
    { cat "$TMP/err" >&2; fail "merge of the parts' folder failed"; }
$PY "$ST_TESTS_ROOT/e2e/compare_inventories.py" "$TMP/single.gpkg" "$TMP/folder.gpkg" >/dev/null ||
    fail "the parts' folder merged differs from the single run"

# Two boxes split at the town's middle, with a 1 m halo: buildings across
# the cut make the run read again with a wider one (a note says so).
mid=-126.2375
# shellcheck disable=SC2086
"$STOCKTAKE" run $opts --bbox "-127,-49,$mid,-47" --halo 1 -o "$TMP/west.gpkg" $ins \
    >/dev/null 2>"$TMP/err" || { cat "$TMP/err" >&2; fail "west box failed"; }
grep -q "reading again with" "$TMP/err" || fail "no halo widening noted: $(cat "$TMP/err")"
# shellcheck disable=SC2086
"$STOCKTAKE" run -q $opts --bbox "$mid,-49,-125,-47" --halo 1 -o "$TMP/east.gpkg" $ins ||
    fail "east box failed"
# shellcheck disable=SC2086
"$STOCKTAKE" merge -q $opts -o "$TMP/boxes.gpkg" "$TMP/west.gpkg" "$TMP/east.gpkg" ||
    fail "merge of boxes failed"
$PY "$ST_TESTS_ROOT/e2e/compare_inventories.py" "$TMP/single.gpkg" "$TMP/boxes.gpkg" ||
    fail "boxes merged differ from the single run"

# A footprint drawn with latitude and longitude swapped, whose true place
# is a tile no other footprint touches: tiles lists that tile too (the
# footprint stage swaps it back before its owner is decided).
$PY - "$TMP/swapped.geojson" <<'PYEOF' || fail "could not write the swapped layer"
import json, sys
def square(x, y, d=0.0001):
    return [[x, y], [x + d, y], [x + d, y + d], [x, y + d], [x, y]]
feats = [{"type": "Feature", "properties": {},
          "geometry": {"type": "Polygon", "coordinates": [square(10 + i / 100, 50 + j / 100)]}}
         for i in range(10) for j in range(10) if (i, j) != (5, 5)]
feats.append({"type": "Feature", "properties": {"swapped": 1}, "geometry": {
    "type": "Polygon", "coordinates": [[[y, x] for x, y in square(10.05, 50.05)]]}})
json.dump({"type": "FeatureCollection", "features": feats}, open(sys.argv[1], "w"))
PYEOF
mkdir -p "$TMP/swparts"
"$STOCKTAKE" tiles -z 16 "$TMP/swapped.geojson" >"$TMP/swtiles" || fail "tiles of the swapped layer"
grep -qx "16/34597/22212" "$TMP/swtiles" || fail "the swapped footprint's own tile is not listed"
while read -r t; do
    "$STOCKTAKE" run -q --tile "$t" -o "$TMP/swparts/$(echo "$t" | tr / -).gpkg" \
        "$TMP/swapped.geojson" || fail "swapped part $t"
done <"$TMP/swtiles"
"$STOCKTAKE" merge -q -o "$TMP/swmerged.gpkg" "$TMP/swparts" || fail "merge of the swapped layer"
"$STOCKTAKE" run -q -o "$TMP/swsingle.gpkg" "$TMP/swapped.geojson" || fail "single swapped run"
$PY "$ST_TESTS_ROOT/e2e/compare_inventories.py" "$TMP/swsingle.gpkg" "$TMP/swmerged.gpkg" >/dev/null ||
    fail "the swapped layer merged differs from the single run"

# Refused merges: exit 2, a message, nothing written.
first=$(ls "$TMP"/parts/*.gpkg | head -n 1)
rest=$(ls "$TMP"/parts/*.gpkg | tail -n +2)
# shellcheck disable=SC2086
expect_rc 2 "$STOCKTAKE" merge -q $opts -o "$TMP/bad.gpkg" $rest
expect_stderr "a window is missing"
# shellcheck disable=SC2086
expect_rc 2 "$STOCKTAKE" merge -q $opts -o "$TMP/bad.gpkg" "$TMP"/parts/*.gpkg "$first"
expect_stderr "in two parts"
# shellcheck disable=SC2086
expect_rc 2 "$STOCKTAKE" merge -q -r "$ROOT/rules/starter.rules" --districts "$S/districts.geojson" \
    --district-key district_id --region-key region_id --reference "$S/reference_counts.csv" \
    --fill draw --seed 7 -o "$TMP/bad.gpkg" "$TMP"/parts/*.gpkg
expect_stderr "made with other rules"
# shellcheck disable=SC2086
expect_rc 2 "$STOCKTAKE" merge -q $opts --seed 8 -o "$TMP/bad.gpkg" "$TMP"/parts/*.gpkg
expect_stderr "made with other options"
# rules whose included file changed between the parts and the merge
mkdir -p "$TMP/inc"
printf 'include "demo.rules"\n' >"$TMP/inc/top.rules"
cp "$ROOT/rules/demo.rules" "$TMP/inc/demo.rules"
iopts="-r $TMP/inc/top.rules --districts $S/districts.geojson --district-key district_id
--region-key region_id --reference $S/reference_counts.csv --fill draw --seed 7"
t1=$(head -n 1 "$TMP/tiles")
# shellcheck disable=SC2086
"$STOCKTAKE" run -q $iopts --tile "$t1" -o "$TMP/inc/part.gpkg" $ins || fail "part with an include"
# alone the part is refused for what is missing, not for its rules ...
# shellcheck disable=SC2086
expect_rc 2 "$STOCKTAKE" merge -q $iopts -o "$TMP/bad.gpkg" "$TMP/inc/part.gpkg"
expect_stderr "a window is missing"
# ... but once the included file changes, for its rules
printf '# an edit\n' >>"$TMP/inc/demo.rules"
# shellcheck disable=SC2086
expect_rc 2 "$STOCKTAKE" merge -q $iopts -o "$TMP/bad.gpkg" "$TMP/inc/part.gpkg"
expect_stderr "made with other rules"
expect_rc 2 "$STOCKTAKE" merge -q -o "$TMP/bad.gpkg" "$S/buildings_osm.geojson"
expect_stderr "buildings_osm.geojson"
# a damaged part: every feature blob cut short
cp "$first" "$TMP/damaged.gpkg"
sqlite3 "$TMP/damaged.gpkg" "UPDATE part_features SET data = substr(data, 1, 20)" ||
    fail "could not damage a part"
before_part=$(sha "$TMP/damaged.gpkg")
# shellcheck disable=SC2086
expect_rc 2 "$STOCKTAKE" merge -q $opts -o "$TMP/bad.gpkg" "$TMP/damaged.gpkg" $rest
expect_stderr "damaged.gpkg"
[ "$(sha "$TMP/damaged.gpkg")" = "$before_part" ] || fail "merge changed a part"
# shellcheck disable=SC2086
expect_rc 2 "$STOCKTAKE" run -q $opts --tile 16/1/1 --report "$TMP/r" -o "$TMP/bad.gpkg" $ins
expect_stderr "no report of its own"
expect_rc 2 "$STOCKTAKE" run -q --tile 16/99999/1 -o "$TMP/bad.gpkg" $ins
expect_stderr "not a tile address"
expect_rc 2 "$STOCKTAKE" run -q --bbox 10,0,5,1 -o "$TMP/bad.gpkg" $ins
expect_stderr "not a box"
[ ! -e "$TMP/bad.gpkg" ] || fail "a refused merge or part left $TMP/bad.gpkg"
exit 0
