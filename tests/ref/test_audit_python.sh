#!/bin/sh
# Reference check: the audit's figures (the `districts` layer of the output
# GeoPackage) recomputed independently by /usr/bin/python3 (sqlite3, csv,
# shapely) from the per-building rows of the same file
# (tests/ref/audit_recompute.py), on
#   - the demo scenario: both sample layers, the invented districts and
#     reference counts, rules/demo.rules, defaults drawn with seed 73; the
#     samples README says QM08 (Sombralta) is deliberately under-mapped, and
#     it must be the one district flagged;
#   - the real Belem extract without rules or reference counts (39.3 % of
#     buildings outside every bairro: the "none" row).
. "$ST_TESTS_ROOT/e2e/lib.sh"

$PY -c 'import shapely' 2>/dev/null || skip "shapely not installed for $PY"
S=$ROOT/samples
CHECK=$ST_TESTS_ROOT/ref/audit_recompute.py

"$STOCKTAKE" run -q -r "$ROOT/rules/demo.rules" --districts "$S/districts.geojson" \
    --district-key district_id --region-key region_id --reference "$S/reference_counts.csv" \
    --fill draw --seed 73 -o "$TMP/demo.gpkg" \
    "$S/buildings_osm.geojson" "$S/buildings_cadastre.geojson" 2>"$TMP/err"
rc=$?
[ "$rc" -le 1 ] || { cat "$TMP/err" >&2; fail "demo run exited $rc"; }
# thresholds: demo.rules has 'warn when district-completeness < 50%'; the
# over-mapped threshold is the default 1.5 (common practice, no source)
$PY "$CHECK" "$TMP/demo.gpkg" "$S/reference_counts.csv" 0.5 1.5 >"$TMP/demo.txt" ||
    { cat "$TMP/demo.txt" >&2; fail "demo: the audit differs from the recomputation"; }
cat "$TMP/demo.txt"
grep -q "under-mapped: QM08;" "$TMP/demo.txt" || fail "demo: QM08 should be the one under-mapped district"

[ -n "$REAL" ] || skip "real data not found (../shared/data/real)"
echo "key,count" >"$TMP/empty.csv"
"$STOCKTAKE" run -q --districts "$REAL/belem/bairros/BAIRROS_BELEM.shp" --district-key STRING \
    -o "$TMP/belem.gpkg" "$REAL/belem/buildings.shp" 2>"$TMP/err" ||
    { cat "$TMP/err" >&2; fail "belem run"; }
$PY "$CHECK" "$TMP/belem.gpkg" "$TMP/empty.csv" 0.5 1.5 >"$TMP/belem.txt" ||
    { cat "$TMP/belem.txt" >&2; fail "belem: the audit differs from the recomputation"; }
cat "$TMP/belem.txt"
none=$($PY -c 'import sqlite3, sys
print(sqlite3.connect(sys.argv[1]).execute(
    "SELECT buildings FROM districts WHERE district = ?", ("none",)).fetchone()[0])' "$TMP/belem.gpkg")
[ "$none" = 3964 ] || fail "belem: $none buildings outside every bairro, geopandas counts 3964"
exit 0
