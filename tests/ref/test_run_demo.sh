#!/bin/sh
# tests/ref/test_run_demo.sh -- `stocktake run -r rules/demo.rules` on the
# demo town's two layers (samples/, invented data), checked like the real
# extracts (tests/ref/test_run_real.sh): the balance by GDAL's ogr and
# ogrinfo, then tests/ref/run_real_check.py (/usr/bin/python3, GDAL's ogr,
# shapely 1.8): invalid footprints against shapely's is_valid, exact
# duplicates against shapely's normalize(), schema values and provenance
# against the rule file's text, and the `unmapped` table against the map
# blocks applied in Python -- here with `ignoring case and accents`, quoted
# values, `mixed as` and values in three languages. Each layer is checked
# alone (the checks read one input); both together for the balance.
# The quality gate is not under test here: exit 1 (gate failed) is accepted.
. "$ST_TESTS_ROOT/e2e/lib.sh"
$PY -c "import shapely.wkb, osgeo.ogr" 2>/dev/null || skip "no shapely or GDAL for $PY"
command -v ogrinfo >/dev/null || skip "no ogrinfo"
RULES=$ROOT/rules/demo.rules
OSM=$ROOT/samples/buildings_osm.geojson
CAD=$ROOT/samples/buildings_cadastre.geojson
[ -f "$OSM" ] && [ -f "$CAD" ] && [ -f "$RULES" ] || skip "no demo samples in this checkout"

run_ok() {   # run_ok OUT INPUT...: a run that writes its inventory (exit 0 or 1)
    out=$1; shift
    "$STOCKTAKE" run -q -r "$RULES" -o "$out" "$@" >"$TMP/stdout" 2>"$TMP/stderr"
    rc=$?
    [ "$rc" -le 1 ] || { cat "$TMP/stderr" >&2; fail "run on $* exited $rc"; }
}

for in in "$OSM" "$CAD"; do
    name=$(basename "$in" .geojson)
    out=$TMP/$name.gpkg
    run_ok "$out" "$in"
    $PY "$ST_TESTS_ROOT/e2e/balance.py" "$out" "$in" >"$TMP/balance" 2>&1 ||
        { cat "$TMP/balance" >&2; fail "balance of $name"; }
    n_in=$(ogr_count "$in")
    n_b=$(ogr_count "$out" buildings)
    n_s=$(ogr_count "$out" set_aside)
    [ -n "$n_in" ] && [ "$n_in" -eq $((n_b + n_s)) ] ||
        fail "$name: ogrinfo reads $n_in, output has $n_b buildings + $n_s set aside"
    $PY "$ST_TESTS_ROOT/ref/run_real_check.py" "$RULES" "$out" "$in" >"$TMP/check" 2>"$TMP/check.err" ||
        { cat "$TMP/check" "$TMP/check.err" >&2; fail "checks of $name"; }
    cat "$TMP/check"
done

# Both layers in one run: every feature of each exactly once.
run_ok "$TMP/both.gpkg" "$OSM" "$CAD"
$PY "$ST_TESTS_ROOT/e2e/balance.py" "$TMP/both.gpkg" "$OSM" "$CAD" >"$TMP/balance" 2>&1 ||
    { cat "$TMP/balance" >&2; fail "balance of the two layers together"; }
# The whole inventory (buildings, set_aside with null, empty and invalid
# source geometries, findings, run_info, unmapped) passes GDAL's GeoPackage
# validator (validate_gpkg.py, GDAL 3.6.2; OGC GeoPackage 1.2 requirements).
VALIDATE=/usr/lib/python3/dist-packages/osgeo_utils/samples/validate_gpkg.py
if [ -f "$VALIDATE" ]; then
    $PY "$VALIDATE" --extra -k "$TMP/both.gpkg" >"$TMP/validate" 2>&1 ||
        { cat "$TMP/validate" >&2; fail "validate_gpkg.py refuses the demo inventory"; }
fi
exit 0
