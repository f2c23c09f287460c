#!/bin/sh
# The same inputs and rules give a byte-identical inventory when the clock
# is pinned with SOURCE_DATE_EPOCH (the common convention for reproducible
# outputs); without it only the timestamps differ.
. "$ST_TESTS_ROOT/e2e/lib.sh"
in=$ROOT/samples/buildings_osm.geojson
[ -f "$in" ] || skip "no demo samples"
export SOURCE_DATE_EPOCH=1700000000
expect_rc 0 "$STOCKTAKE" run -q -r "$ROOT/rules/demo.rules" -o "$TMP/a.gpkg" "$in"
mv "$TMP/a.gpkg" "$TMP/first.gpkg"
expect_rc 0 "$STOCKTAKE" run -q -r "$ROOT/rules/demo.rules" -o "$TMP/a.gpkg" "$in"
cmp -s "$TMP/first.gpkg" "$TMP/a.gpkg" || fail "two identical runs differ"
$PY "$ST_TESTS_ROOT/e2e/balance.py" "$TMP/a.gpkg" "$in" >/dev/null || fail "balance"
exit 0
