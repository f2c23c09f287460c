#!/bin/sh
# tests/ref/test_reproject.sh -- reprojection through 'stocktake convert'
# against published coordinates and PROJ's cs2cs (../shared/REFERENCES.md
# section 1):
#  1. a one-feature shapefile in WGS 84 / UTM 38N (EPSG:32638) whose first
#     vertex is 444140.54 E 3684706.36 N, converted to GeoJSON, gives
#     44.4 E 33.3 N within the published 0.01 m (PUB-R: GeographicLib
#     GeoConvert(1) man page pair 33.3 44.4 <-> 38n 444140.54 3684706.36);
#  2. a layer in British National Grid (EPSG:27700) converted to CSV agrees
#     with `cs2cs EPSG:27700 EPSG:4326` at every vertex to 1e-9 degrees
#     (cs2cs is the reference; the GN7-2 published lat/lon is on OSGB36, not
#     WGS 84, so it does not apply directly);
#  3. the axis-order trap: a GeoPackage in LAEA Europe (EPSG:3035, northing
#     first in the EPSG registry, easting first as stored) at E 3962799.45
#     N 2999718.85 gives 5 E 50 N (GN7-2, PUB-S), and agrees with cs2cs.
# Fixtures are made here with ogr2ogr (-a_srs assigns the CRS, no change to
# the coordinates).
. "$ST_TESTS_ROOT/e2e/lib.sh"
command -v cs2cs >/dev/null || skip "cs2cs (proj-bin) not installed"

# converted OUT: run convert; skip while a needed format has not landed.
converted() {
    "$STOCKTAKE" convert -q "$1" "$2" >"$TMP/stdout" 2>"$TMP/stderr" && return 0
    grep -qE "unknown layer format|cannot tell the output format|not built yet" "$TMP/stderr" &&
        skip "format not built yet: $(head -n 1 "$TMP/stderr")"
    cat "$TMP/stderr" >&2
    fail "convert $1 $2 failed"
}

# polygon_layer FILE CRS "x y, x y, ...": a one-feature layer whose ring
# is the given vertices, written by ogr2ogr from GeoJSON.
polygon_layer() {
    ring=$(printf '%s' "$3" | sed 's/\([-0-9.][-0-9.]*\) \([-0-9.][-0-9.]*\)/[\1, \2]/g')
    cat >"$TMP/poly.json" <<EOF
{"type": "FeatureCollection", "features": [{"type": "Feature", "properties": {"name": "probe"},
 "geometry": {"type": "Polygon", "coordinates": [[ $ring ]]}}]}
EOF
    ogr2ogr -a_srs "$2" "$1" "$TMP/poly.json" 2>/dev/null || fail "ogr2ogr could not make $1"
}

# ---- 1. UTM 38N -> GeoJSON, GeoConvert's published pair ----------------------------
polygon_layer "$TMP/utm38.shp" EPSG:32638 \
    "444140.54 3684706.36, 444150.54 3684706.36, 444150.54 3684716.36, 444140.54 3684716.36, 444140.54 3684706.36"
converted "$TMP/utm38.shp" "$TMP/utm38.geojson"
$PY - "$TMP/utm38.geojson" <<'EOF' || fail "UTM 38N: not at 33.3 N 44.4 E within 0.01 m"
import json, math, sys
geom = json.load(open(sys.argv[1]))["features"][0]["geometry"]
ring = geom["coordinates"][0] if geom["type"] == "Polygon" else geom["coordinates"][0][0]
# Our rings may start elsewhere or run the other way: find the vertex
# nearest the published point, then measure in metres on the ellipsoid.
a, f = 6378137.0, 1 / 298.257223563
e2 = f * (2 - f)
lat0 = math.radians(33.3)
w = math.sqrt(1 - e2 * math.sin(lat0) ** 2)
m_lat = a * (1 - e2) / w ** 3 * math.pi / 180      # metres per degree of latitude
m_lon = a / w * math.cos(lat0) * math.pi / 180     # metres per degree of longitude
d = min((((x - 44.4) * m_lon) ** 2 + ((y - 33.3) * m_lat) ** 2, (x, y)) for x, y in ring[:-1])
(x, y) = d[1]
dx, dy = (x - 44.4) * m_lon, (y - 33.3) * m_lat
print(f"UTM 38N vertex {x:.10f} {y:.10f}: {dx*1000:+.1f} mm E, {dy*1000:+.1f} mm N")
assert abs(dx) <= 0.01 and abs(dy) <= 0.01
EOF

# cs2cs_lonlat CRS: read "x y" lines on stdin, print "lon lat" (cs2cs
# prints EPSG:4326 in its authority order, latitude first).
cs2cs_lonlat() {
    cs2cs -f %.12f "$1" EPSG:4326 | awk '{print $2, $1}'
}

# compare_with_cs2cs CSV CRS "x y, ...": every vertex of the CSV's WKT agrees with
# cs2cs to 1e-9 degrees, in order.
compare_with_cs2cs() {
    printf '%s\n' "$3" | tr ',' '\n' | sed 's/^ *//' | cs2cs_lonlat "$2" >"$TMP/cs2cs.txt"
    $PY - "$1" "$TMP/cs2cs.txt" <<'EOF' || fail "$1 differs from cs2cs"
import csv, sys
from shapely import wkt
row = next(csv.DictReader(open(sys.argv[1], newline="", encoding="utf-8")))
ours = list(wkt.loads(row["wkt"]).exterior.coords)
ref = [tuple(map(float, line.split())) for line in open(sys.argv[2])]
# Compare as sets of vertices in ring order, allowing a reversed ring.
if len(ours) != len(ref):
    sys.exit(f"{len(ours)} vertices, cs2cs {len(ref)}")
def close(p, q):
    return abs(p[0] - q[0]) <= 1e-9 and abs(p[1] - q[1]) <= 1e-9
if not all(close(p, q) for p, q in zip(ours, ref)) and \
   not all(close(p, q) for p, q in zip(ours, list(reversed(ref)))):
    sys.exit(f"ours {ours}\ncs2cs {ref}")
EOF
}

# ---- 2. British National Grid -> CSV, against cs2cs ------------------------------------
BNG="577274.99 69740.50, 577274.99 69790.50, 577324.99 69790.50, 577324.99 69740.50, 577274.99 69740.50"
polygon_layer "$TMP/bng.shp" EPSG:27700 "$BNG"
converted "$TMP/bng.shp" "$TMP/bng.csv"
compare_with_cs2cs "$TMP/bng.csv" EPSG:27700 "$BNG"

# ---- 3. LAEA Europe in a GeoPackage: the axis-order trap ---------------------------------
LAEA="3962799.45 2999718.85, 3962799.45 2999738.85, 3962819.45 2999738.85, 3962819.45 2999718.85, 3962799.45 2999718.85"
polygon_layer "$TMP/laea.gpkg" EPSG:3035 "$LAEA"
converted "$TMP/laea.gpkg" "$TMP/laea.csv"
# cs2cs honours EPSG:3035's northing-first order: feed it N E.
printf '%s\n' "$LAEA" | tr ',' '\n' | sed 's/^ *//' | awk '{print $2, $1}' |
    cs2cs -f %.12f EPSG:3035 EPSG:4326 | awk '{print $2, $1}' >"$TMP/cs2cs.txt"
$PY - "$TMP/laea.csv" "$TMP/cs2cs.txt" <<'EOF' || fail "EPSG:3035 axis order"
import csv, sys
from shapely import wkt
row = next(csv.DictReader(open(sys.argv[1], newline="", encoding="utf-8")))
ours = list(wkt.loads(row["wkt"]).exterior.coords)
ref = [tuple(map(float, line.split())) for line in open(sys.argv[2])]
# GN7-2 (PUB-S): E 3962799.45 N 2999718.85 is 50 N 5 E; published to 0.01 m,
# so 0.005 m, i.e. below 1e-7 degrees on either axis at 50 N.
assert any(abs(x - 5.0) < 1e-7 and abs(y - 50.0) < 1e-7 for x, y in ours), ours
assert len(ours) == len(ref), (ours, ref)
for p in ours:
    assert any(abs(p[0] - q[0]) <= 1e-9 and abs(p[1] - q[1]) <= 1e-9 for q in ref), (p, ref)
EOF
exit 0
