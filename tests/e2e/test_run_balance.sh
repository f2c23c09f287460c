#!/bin/sh
# tests/e2e/test_run_balance.sh -- nothing lost, end to end: `stocktake
# run` on the hand-made fixtures and on every real extract, each output
# checked by tests/e2e/balance.py with GDAL (read = buildings + set_aside
# per layer, every bid and source id exactly once, every source attribute
# back unchanged), inputs unchanged (sha256). A balance check that cannot
# fail is no check: the last case feeds it a wrong input list.
. "$ST_TESTS_ROOT/e2e/lib.sh"

"$PY" -c 'import osgeo.ogr' 2>/dev/null || skip "python3-gdal missing"
BAL="$PY $ST_TESTS_ROOT/e2e/balance.py"

# run_balanced EXT INPUT...: run into $TMP/o/inv.EXT, then check the balance.
run_balanced() {
    ext=$1; shift
    rm -rf "$TMP/o"; mkdir -p "$TMP/o"
    for f in "$@"; do sha "${f%%:*}"; done >"$TMP/before"
    "$STOCKTAKE" run -q -o "$TMP/o/inv.$ext" "$@" >"$TMP/stdout" 2>"$TMP/stderr"
    rc=$?
    [ $rc -le 1 ] || { cat "$TMP/stderr" >&2; fail "run on $* exited $rc"; }
    $BAL "$TMP/o/inv.$ext" "$@" >"$TMP/bal" 2>&1 || { cat "$TMP/bal" >&2; fail "balance broken: $*"; }
    for f in "$@"; do sha "${f%%:*}"; done | cmp -s - "$TMP/before" || fail "an input changed: $*"
}

# Output formats whose writer exists (the GeoPackage writer may land later).
formats="geojson"
"$STOCKTAKE" convert -q "$DATA/cli/marrowick.geojson" "$TMP/probe.gpkg" 2>/dev/null &&
    formats="$formats gpkg"

for ext in $formats; do
    run_balanced "$ext" "$DATA/cli/marrowick.geojson"
    run_balanced "$ext" "$DATA/cli/marrowick.geojson" "$DATA/cli/roundtrip.geojson" \
        "$DATA/cli/marrowick.geojson"
    run_balanced "$ext" "$DATA/geojson/mixed.geojson"
done

if [ -n "$REAL" ]; then
    for f in "$REAL"/*/buildings.geojson "$REAL"/*/building.geojson "$REAL"/*/buildings.shp \
             "$REAL"/*/*.gpkg; do
        [ -f "$f" ] || continue
        case $f in *.gpkg) "$STOCKTAKE" inspect -q "$f" >/dev/null 2>&1 || continue ;; esac
        run_balanced geojson "$f"
    done
    run_balanced geojson "$REAL/kronstadt/buildings.geojson" "$REAL/north_macedonia/buildings.shp"
fi

# The check itself fails on a wrong balance.
rm -rf "$TMP/o"; mkdir -p "$TMP/o"
"$STOCKTAKE" run -q -o "$TMP/o/inv.geojson" "$DATA/cli/marrowick.geojson" 2>/dev/null
$BAL "$TMP/o/inv.geojson" "$DATA/cli/marrowick.geojson" "$DATA/cli/marrowick.geojson" \
    >/dev/null 2>&1 && fail "balance.py accepted an output missing a whole layer"
$BAL "$TMP/o/inv.geojson" "$DATA/cli/roundtrip.geojson" >/dev/null 2>&1 &&
    fail "balance.py accepted the output of another input"
exit 0
