#!/bin/sh
# run --tile and merge on a generated layer of 200,000 footprints (the
# benchmark's invented town, bench/gen_town.py seed 1, with its faults:
# invalid rings, exact and near duplicates, slivers, fragments, messy
# attributes) split into 16 or more tiles: the merge equals a single run
# feature by feature (tests/e2e/compare_inventories.py), with the
# benchmark's rules (defaults learned per district and drawn), 5,000
# districts and reference counts. The data is made once into
# bench/data/ (git-ignored), as make bench does. Then the same layer as a
# GeoPackage (stocktake convert), its parts made with the layer facts of
# 'stocktake tiles --facts': each reads fewer features than the layer
# holds (through the R-tree; its note says how many), and they merge
# equal to a single run of the GeoPackage; a changed input is refused.
. "$ST_TESTS_ROOT/e2e/lib.sh"
D=$ROOT/bench/data/town-n200000-s1
if [ ! -f "$D/buildings_osm.geojsonl" ] || [ ! -f "$D/districts.geojson" ]; then
    mkdir -p "$D" &&
    $PY "$ROOT/bench/gen_town.py" --seed 1 --n 200000 --districts 5000 --format geojsonl \
        --no-cadastre --no-truth --omit point,swapped --out "$D" >"$TMP/gen" 2>&1 ||
        { cat "$TMP/gen" >&2; fail "generator failed"; }
fi
SOURCE_DATE_EPOCH=1700000000
export SOURCE_DATE_EPOCH
opts="-r $ROOT/bench/bench.rules --districts $D/districts.geojson --district-key district_id
--region-key region_id --reference $D/reference_counts.csv --fill draw --seed 3"
in=$D/buildings_osm.geojsonl
# shellcheck disable=SC2086
"$STOCKTAKE" run -q $opts -o "$TMP/single.gpkg" --report "$TMP/single" "$in" 2>"$TMP/err" ||
    { cat "$TMP/err" >&2; fail "single run failed"; }
# the coarsest zoom with at least 16 tiles
for z in 10 11 12 13 14 15; do
    "$STOCKTAKE" tiles -z "$z" "$in" >"$TMP/tiles" || fail "tiles failed"
    [ "$(wc -l <"$TMP/tiles")" -ge 16 ] && break
done
n=$(wc -l <"$TMP/tiles")
[ "$n" -ge 16 ] || fail "only $n tiles"
mkdir -p "$TMP/parts"
while read -r t; do
    # shellcheck disable=SC2086
    "$STOCKTAKE" run -q $opts --tile "$t" -o "$TMP/parts/$(echo "$t" | tr / _).gpkg" "$in" \
        2>"$TMP/err" || { cat "$TMP/err" >&2; fail "part $t failed"; }
done <"$TMP/tiles"
# shellcheck disable=SC2086
"$STOCKTAKE" merge -q $opts -o "$TMP/merged.gpkg" --report "$TMP/merged" "$TMP"/parts/*.gpkg \
    2>"$TMP/err" || { cat "$TMP/err" >&2; fail "merge failed"; }
$PY "$ST_TESTS_ROOT/e2e/compare_inventories.py" "$TMP/single.gpkg" "$TMP/merged.gpkg" \
    "$TMP/single" "$TMP/merged" >"$TMP/cmp" || { cat "$TMP/cmp" >&2; fail "$n tiles merged differ from the single run"; }
echo "$n tiles: $(cat "$TMP/cmp")"

# The GeoPackage, its parts read through the R-tree with the facts.
"$STOCKTAKE" convert -q "$in" "$TMP/town.gpkg" || fail "convert to GeoPackage failed"
gp=$TMP/town.gpkg
# shellcheck disable=SC2086
"$STOCKTAKE" run -q $opts -o "$TMP/gsingle.gpkg" --report "$TMP/gsingle" "$gp" 2>"$TMP/err" ||
    { cat "$TMP/err" >&2; fail "single run of the GeoPackage failed"; }
"$STOCKTAKE" tiles -z "$z" --facts "$TMP/facts.txt" "$gp" >"$TMP/gtiles" || fail "tiles --facts failed"
cmp -s "$TMP/tiles" "$TMP/gtiles" || fail "the GeoPackage lists other tiles than the GeoJSONL"
mkdir -p "$TMP/gparts"
total=$(sed -n 's/^count //p' "$TMP/facts.txt")
[ "$total" = 200000 ] || fail "the facts count $total features"
while read -r t; do
    # shellcheck disable=SC2086
    "$STOCKTAKE" run $opts --facts "$TMP/facts.txt" --tile "$t" \
        -o "$TMP/gparts/$(echo "$t" | tr / _).gpkg" "$gp" >/dev/null 2>"$TMP/err" ||
        { cat "$TMP/err" >&2; fail "part $t with facts failed"; }
    k=$(sed -n 's/^.*note: read \([0-9]*\) of 200000 features through the R-tree.*/\1/p' "$TMP/err")
    [ -n "$k" ] && [ "$k" -lt 200000 ] || fail "part $t did not read through the R-tree: $(cat "$TMP/err")"
done <"$TMP/tiles"
# shellcheck disable=SC2086
"$STOCKTAKE" merge -q $opts -o "$TMP/gmerged.gpkg" --report "$TMP/gmerged" "$TMP"/gparts/*.gpkg \
    2>"$TMP/err" || { cat "$TMP/err" >&2; fail "merge of the GeoPackage parts failed"; }
$PY "$ST_TESTS_ROOT/e2e/compare_inventories.py" "$TMP/gsingle.gpkg" "$TMP/gmerged.gpkg" \
    "$TMP/gsingle" "$TMP/gmerged" >"$TMP/cmp" ||
    { cat "$TMP/cmp" >&2; fail "$n GeoPackage parts made with facts merged differ from the single run"; }
touch "$gp"
# shellcheck disable=SC2086
expect_rc 2 "$STOCKTAKE" run -q $opts --facts "$TMP/facts.txt" --tile "$(head -n 1 "$TMP/tiles")" \
    -o "$TMP/late.gpkg" "$gp"
expect_stderr "facts.txt.*changed since the facts were written"
echo "$n GeoPackage tiles with facts: $(cat "$TMP/cmp")"
