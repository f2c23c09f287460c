#!/bin/sh
# GeoJSON output obeys RFC 7946 (REFERENCES.md section 4): exterior rings
# counter-clockwise, holes clockwise (section 3.1.6), no "crs" member
# (Appendix B.1). Checked with shapely (/usr/bin/python3) and the feature
# count with GDAL's ogrinfo. Input: a hand-written collection with the
# Shapefile winding (exterior clockwise, hole counter-clockwise) and the
# real Kronstadt extract.
. "$ST_TESTS_ROOT/e2e/lib.sh"

$PY -c 'import shapely' 2>/dev/null || skip "shapely not available for $PY"
"$STOCKTAKE" convert "$DATA/geojson/feature.geojson" "$TMP/probe.geojson" >/dev/null 2>&1 ||
    skip "stocktake convert is not available in this build"

cat > "$TMP/cw.geojson" <<'JSON'
{"type": "FeatureCollection", "features": [
 {"type": "Feature", "id": 1, "properties": {"name": "cw shell, ccw hole"},
  "geometry": {"type": "Polygon", "coordinates": [
   [[8.54, 47.37], [8.54, 47.3701], [8.5401, 47.3701], [8.5401, 47.37], [8.54, 47.37]],
   [[8.540025, 47.370025], [8.540075, 47.370025], [8.540075, 47.370075], [8.540025, 47.370075], [8.540025, 47.370025]]]}},
 {"type": "Feature", "id": 2, "properties": {"name": "multi"},
  "geometry": {"type": "MultiPolygon", "coordinates": [
   [[[9, 47], [9, 47.001], [9.001, 47.001], [9.001, 47], [9, 47]]],
   [[[9.01, 47], [9.011, 47], [9.011, 47.001], [9.01, 47.001], [9.01, 47]]]]}}
]}
JSON

check() {  # check IN OUT: winding, no crs, same count and areas as IN
    expect_rc 0 "$STOCKTAKE" convert "$1" "$2"
    [ "$(ogr_count "$2")" = "$(ogr_count "$1")" ] || fail "$2: feature count differs from $1 (ogrinfo)"
    $PY - "$1" "$2" <<'PY' || fail "$2 breaks RFC 7946"
import json, sys
from shapely.geometry import shape
src, out = (json.load(open(p)) for p in sys.argv[1:3])
assert "crs" not in out, "crs member written"
bad = 0
for a, b in zip(src["features"], out["features"]):
    ga, gb = shape(a["geometry"]), shape(b["geometry"])
    polys = [gb] if gb.geom_type == "Polygon" else list(gb.geoms)
    for p in polys:
        bad += not p.exterior.is_ccw
        bad += sum(h.is_ccw for h in p.interiors)
    bad += abs(ga.area - gb.area) > 1e-9 * ga.area
sys.exit(1 if bad else 0)
PY
}

check "$TMP/cw.geojson" "$TMP/cw_out.geojson"
[ -n "$REAL" ] && check "$REAL/kronstadt/buildings.geojson" "$TMP/kronstadt.geojson"
exit 0
