#!/bin/sh
# stocktake run without rules: the geometry stage on a tiny hand-made layer.
# Asserts the balance (read = buildings + set_aside, each id exactly once,
# counted by GDAL, not by us), the statuses, and that the input is unchanged.
. "$ST_TESTS_ROOT/e2e/lib.sh"
in=$DATA/run/small.geojson
before=$(sha "$in")
for ext in geojson gpkg; do
    out=$TMP/out.$ext
    expect_rc 0 "$STOCKTAKE" run -q -o "$out" "$in"
    [ -f "$out" ] || fail "no output $out"
    $PY "$ST_TESTS_ROOT/e2e/balance.py" "$out" "$in" || fail "balance ($ext)"
done
[ "$(sha "$in")" = "$before" ] || fail "input modified"

# statuses: 1 kept ok, 1 repaired (bowtie), 1 exact duplicate (rotated), 1
# rejected (null geometry); checked with GDAL on the GeoPackage
$PY - "$TMP/out.gpkg" <<'PY' || fail "statuses"
import sys
from osgeo import ogr
ds = ogr.Open(sys.argv[1])
b = {f.GetField("source_id"): f.GetField("status") for f in ds.GetLayerByName("buildings")}
s = {f.GetField("source_id"): (f.GetField("status"), f.GetField("duplicate_of")) for f in ds.GetLayerByName("set_aside")}
assert b == {"1": "ok", "3": "repaired"}, b
assert s["2"] == ("duplicate", 1), s
assert s["4"][0] == "rejected", s
codes = sorted(f.GetField("code") for f in ds.GetLayerByName("findings"))
assert "geom.self-intersection" in codes and "dup.exact" in codes and "geom.null" in codes, codes
PY

# --fail-on error: the null geometry and the self-intersection are errors
expect_rc 1 "$STOCKTAKE" run -q --fail-on error -o "$TMP/gate.geojson" "$in"
[ -f "$TMP/gate.geojson" ] || fail "a failed gate still writes the inventory"

# a Shapefile cannot hold the mixed set_aside layer: refused up front
expect_rc 2 "$STOCKTAKE" run -q -o "$TMP/inv.shp" "$in"
expect_stderr "convert"
[ ! -e "$TMP/inv.shp" ] || fail "a refused run wrote a Shapefile"

# bad usage and bad input: exit 2, nothing written
expect_rc 2 "$STOCKTAKE" run -q "$in"
expect_stderr "-o OUT"
expect_rc 2 "$STOCKTAKE" run -q -o "$TMP/x.gpkg" "$TMP/missing.geojson"
expect_stderr "missing.geojson"
[ ! -e "$TMP/x.gpkg" ] || fail "output written after an input error"
ls -a "$TMP" | grep -q '\.tmp-' && fail "temporary file left behind"
exit 0
