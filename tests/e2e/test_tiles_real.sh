#!/bin/sh
# run --tile and merge on real OpenStreetMap extracts (../shared/data/real,
# ODbL, (c) OpenStreetMap contributors): four layers together (about 35,000
# footprints with real invalid rings, duplicates drawn twice and overlaps
# on tile edges), the Bengaluru wards as districts, the benchmark's rules
# with defaults learned and drawn; each layer's tiles of zoom 11 (about a hundred: the layers lie far apart) run as
# parts, merged, equal to a single run feature by feature
# (tests/e2e/compare_inventories.py).
. "$ST_TESTS_ROOT/e2e/lib.sh"
[ -n "$REAL" ] || skip "no real data at ../shared/data/real"
ins="$REAL/north_macedonia/buildings.shp $REAL/belem/buildings.shp
$REAL/bengaluru/BuildingFootprintsOSM.gpkg $REAL/banepa/buildings.geojson"
wards=$REAL/bengaluru/BBMP_wards_2022.geojson
for f in $ins $wards; do [ -f "$f" ] || skip "missing $f"; done
SOURCE_DATE_EPOCH=1700000000
export SOURCE_DATE_EPOCH
opts="-r $ROOT/bench/bench.rules --districts $wards --fill draw --seed 11"
# shellcheck disable=SC2086
"$STOCKTAKE" run -q $opts -o "$TMP/single.gpkg" --report "$TMP/single" $ins 2>"$TMP/err" ||
    { cat "$TMP/err" >&2; fail "single run failed"; }
# shellcheck disable=SC2086
"$STOCKTAKE" tiles -z 11 $ins >"$TMP/tiles" || fail "tiles failed"
n=$(wc -l <"$TMP/tiles")
[ "$n" -ge 8 ] || fail "only $n tiles"
mkdir -p "$TMP/parts"
while read -r t; do
    # shellcheck disable=SC2086
    "$STOCKTAKE" run -q $opts --tile "$t" -o "$TMP/parts/$(echo "$t" | tr / -).gpkg" $ins \
        2>"$TMP/err" || { cat "$TMP/err" >&2; fail "part $t failed"; }
done <"$TMP/tiles"
# shellcheck disable=SC2086
"$STOCKTAKE" merge -q $opts -o "$TMP/merged.gpkg" --report "$TMP/merged" "$TMP"/parts/*.gpkg \
    2>"$TMP/err" || { cat "$TMP/err" >&2; fail "merge failed"; }
$PY "$ST_TESTS_ROOT/e2e/compare_inventories.py" "$TMP/single.gpkg" "$TMP/merged.gpkg" \
    "$TMP/single" "$TMP/merged" >"$TMP/cmp" || { cat "$TMP/cmp" >&2; fail "merged differ"; }
echo "$n tiles: $(cat "$TMP/cmp")"
