#!/bin/sh
# tests/ref/test_run_real.sh -- `stocktake run -r rules/starter.rules` on
# every real building layer of ../shared/data/real (OpenStreetMap data,
# ODbL, (c) OpenStreetMap contributors), checked against outside
# references:
#   - the balance: GDAL's ogr (tests/e2e/balance.py) finds every input
#     feature exactly once in buildings or set_aside, and ogrinfo's count of
#     the input equals ogrinfo's buildings + set_aside;
#   - tests/ref/run_real_check.py (/usr/bin/python3, GDAL's ogr, shapely
#     1.8): invalid footprints against shapely's is_valid, exact duplicates
#     against shapely's normalize(), schema values against the rule file's
#     own field lines, provenance and rule lines against the rule text, and
#     the run's `unmapped` table against the map blocks applied in Python
#     (see its docstring for what it reproduces and what it does not).
# Expected counts are computed there, never written here; the data's
# README (north_macedonia: 1 invalid, 5 duplicates after normalisation) is
# only echoed as a sanity check of the computation.
. "$ST_TESTS_ROOT/e2e/lib.sh"
[ -n "$REAL" ] || skip "no real data at ../shared/data/real"
$PY -c "import shapely.wkb, osgeo.ogr" 2>/dev/null || skip "no shapely or GDAL for $PY"
command -v ogrinfo >/dev/null || skip "no ogrinfo"
RULES=$ROOT/rules/starter.rules

for layer in kronstadt/buildings.geojson belem/buildings.shp \
             bengaluru/BuildingFootprintsOSM.gpkg banepa/buildings.geojson \
             fianarantsoa/building.geojson north_macedonia/buildings.shp; do
    in=$REAL/$layer
    out=$TMP/$(dirname "$layer").gpkg
    before=$(sha "$in")
    expect_rc 0 "$STOCKTAKE" run -q -r "$RULES" -o "$out" "$in"
    [ "$(sha "$in")" = "$before" ] || fail "$layer was modified"
    $PY "$ST_TESTS_ROOT/e2e/balance.py" "$out" "$in" >"$TMP/balance" 2>&1 ||
        { cat "$TMP/balance" >&2; fail "balance of $layer"; }
    n_in=$(ogr_count "$in")
    n_b=$(ogr_count "$out" buildings)
    n_s=$(ogr_count "$out" set_aside)
    [ -n "$n_in" ] && [ "$n_in" -gt 0 ] || fail "ogrinfo cannot count $layer"
    [ "$n_in" -eq $((n_b + n_s)) ] ||
        fail "$layer: ogrinfo reads $n_in, output has $n_b buildings + $n_s set aside"
    $PY "$ST_TESTS_ROOT/ref/run_real_check.py" "$RULES" "$out" "$in" >"$TMP/check" 2>&1 ||
        { cat "$TMP/check" >&2; fail "checks of $layer"; }
    cat "$TMP/check"
done
# The one layer with real defects must have shown them (README.md there).
grep -q "north_macedonia/buildings.shp: .* invalid 1 (shapely 1); exact duplicates 5 (shapely 5)" \
    "$TMP/check" || fail "north_macedonia: expected the README's 1 invalid and 5 duplicates"
exit 0
