#!/bin/sh
# tests/e2e/test_inspect.sh -- 'stocktake inspect' on the hand-made layer
# tests/data/cli/marrowick.geojson (an invented town): counts, geometry
# types, fill rates and top values as text and as JSON (checked against
# the same statistics computed by /usr/bin/python3 from the GeoJSON
# itself), the CRS of a UTM shapefile and --crs, a GeoPackage table, and
# bad inputs: each exits 2 naming the file, prints no JSON, and leaves the
# input unchanged (sha256 before/after).
. "$ST_TESTS_ROOT/e2e/lib.sh"

T=$DATA/cli/marrowick.geojson

# has_reader FILE: 0 when the format's reader is built (while formats land
# one by one on their branches, a missing reader says so in its message).
has_reader() {
    "$STOCKTAKE" inspect -q "$1" >/dev/null 2>"$TMP/probe" && return 0
    ! grep -qE "unknown layer format|not built yet" "$TMP/probe"
}
has_reader "$T" || skip "GeoJSON reader not built yet"
before=$(sha "$T")

# ---- text output -------------------------------------------------------------
expect_rc 0 "$STOCKTAKE" inspect -q "$T"
cp "$TMP/stdout" "$TMP/text"
grep -qE '^  features +8$' "$TMP/text" || fail "feature count"
grep -qE '^  geometry +POLYGON 5, MULTIPOLYGON 1, null 1, empty 1$' "$TMP/text" ||
    fail "geometry types: $(grep geometry "$TMP/text")"
grep -qE '^  crs +OGC:CRS84$' "$TMP/text" || fail "crs: $(grep crs "$TMP/text")"
grep -qF 'field "building" (text): filled 8 of 8 (100.0%); 4 distinct values' "$TMP/text" ||
    fail "building summary"
# Top values in order: most frequent first, ties by value (school < yes).
grep -A4 'field "building"' "$TMP/text" | tail -n 4 | awk '{print $1, $2}' >"$TMP/top"
printf '4 house\n2 shop\n1 school\n1 yes\n' | cmp -s - "$TMP/top" ||
    fail "building top values: $(cat "$TMP/top")"
grep -qF 'field "name" (text): filled 6 of 8 (75.0%), missing 1, empty 1; 6 distinct values' \
    "$TMP/text" || fail "name summary: $(grep 'field "name"' "$TMP/text")"
grep -qF 'Line\nbreak' "$TMP/text" || fail "control characters are not escaped"

# ---- JSON output, checked against statistics computed from the file -------------
expect_rc 0 "$STOCKTAKE" inspect --json -q "$T"
$PY -m json.tool "$TMP/stdout" >/dev/null || fail "--json output does not parse"
$PY - "$T" "$TMP/stdout" <<'EOF' || fail "JSON statistics differ from Python's"
import json, sys
from collections import Counter
src = json.load(open(sys.argv[1], encoding="utf-8"))["features"]
doc = json.load(open(sys.argv[2], encoding="utf-8"))
layer = doc["layers"][0]
assert layer["features"] == len(src), layer["features"]
assert layer["format"].startswith("geojson"), layer["format"]
g = layer["geometry"]
nulls = sum(1 for f in src if f["geometry"] is None)
empty = sum(1 for f in src if f["geometry"] and not f["geometry"]["coordinates"])
kinds = Counter(f["geometry"]["type"].upper() for f in src
                if f["geometry"] and f["geometry"]["coordinates"])
assert g["null"] == nulls and g["empty"] == empty, g
assert {t["type"]: t["count"] for t in g["types"]} == dict(kinds), g["types"]
# extent from every vertex of every ring
pts = []
def walk(c):
    if c and isinstance(c[0], (int, float)):
        pts.append(c)
    else:
        for k in c:
            walk(k)
for f in src:
    if f["geometry"]:
        walk(f["geometry"]["coordinates"])
ext = [min(p[0] for p in pts), min(p[1] for p in pts), max(p[0] for p in pts), max(p[1] for p in pts)]
assert layer["extent"] == ext, (layer["extent"], ext)
assert layer["extent_lonlat"] == ext, layer["extent_lonlat"]
def text(v):
    if v is None: return None
    if isinstance(v, bool): return "true" if v else "false"
    return str(v)
for fld in layer["fields"]:
    name = fld["name"]
    vals = [text(f["properties"].get(name)) for f in src]
    present = [v for v in vals if v is not None]
    filled = [v for v in present if v != ""]
    assert fld["present"] == len(present), (name, fld["present"], len(present))
    assert fld["filled"] == len(filled), (name, fld["filled"])
    assert abs(fld["fill_rate"] - len(filled) / len(src)) < 1e-15, name
    assert fld["distinct"] == len(set(filled)) and fld["distinct_exact"], name
    want = sorted(Counter(filled).items(), key=lambda kv: (-kv[1], kv[0].encode()))[:15]
    got = [(t["value"], t["count"]) for t in fld["top"]]
    assert got == want, (name, got, want)
assert [f["name"] for f in layer["fields"]] == ["building", "name", "levels"]
EOF

# ---- bad inputs: exit 2, the file named, no JSON on stdout ------------------------
expect_rc 2 "$STOCKTAKE" inspect "$TMP/nothere.geojson"
expect_stderr "nothere\.geojson"

head -c 700 "$T" >"$TMP/broken.geojson"
expect_rc 2 "$STOCKTAKE" inspect --json -q "$T" "$TMP/broken.geojson"
expect_stderr "broken\.geojson"
[ -s "$TMP/stdout" ] && fail "JSON printed although a layer failed"

expect_rc 2 "$STOCKTAKE" inspect --frobnicate "$T"
expect_rc 2 "$STOCKTAKE" inspect
expect_rc 0 "$STOCKTAKE" inspect --help
grep -q "usage: stocktake inspect" "$TMP/stdout" || fail "--help"

[ "$(sha "$T")" = "$before" ] || fail "the input was modified"

# ---- the distinct-value cap: 200,005 different ids ------------------------------------
$PY - "$TMP/many.geojsonl" <<'EOF'
import json, sys
with open(sys.argv[1], "w") as fp:
    for i in range(200005):
        fp.write(json.dumps({"type": "Feature", "properties": {"id": f"b{i}", "kind": "ABC"[i % 3]},
                             "geometry": {"type": "Point", "coordinates": [3.2 + i * 1e-7, 51.18]}}) + "\n")
EOF
if has_reader "$TMP/many.geojsonl"; then
    expect_rc 0 "$STOCKTAKE" inspect --json -q "$TMP/many.geojsonl"
    $PY - "$TMP/stdout" <<'EOF' || fail "distinct-value cap"
import json, sys
ids, kind = json.load(open(sys.argv[1]))["layers"][0]["fields"]
# The cap is 200,000 tracked values: the last 5 ids are counted as untracked.
assert ids["distinct"] == 200000 and not ids["distinct_exact"] and ids["untracked"] == 5, ids
assert ids["filled"] == 200005 and len(ids["top"]) == 15, ids["filled"]
assert kind["distinct"] == 3 and kind["distinct_exact"], kind
assert [(t["value"], t["count"]) for t in kind["top"]] == [("A", 66669), ("B", 66668), ("C", 66668)]
EOF
    expect_rc 0 "$STOCKTAKE" inspect -q "$TMP/many.geojsonl"
    grep -qF 'more than 200000 distinct values (5 occurrences not tracked)' "$TMP/stdout" ||
        fail "text output of the cap: $(grep 'field "id"' "$TMP/stdout")"
fi

# ---- a shapefile in UTM 31N: CRS, lon/lat extent, missing and unknown CRS ---------
ogr2ogr -f "ESRI Shapefile" -lco ENCODING=UTF-8 -t_srs EPSG:32631 \
    "$TMP/town.shp" "$T" 2>/dev/null || fail "ogr2ogr could not make the fixture"
has_reader "$TMP/town.shp" || skip "Shapefile reader not built yet (GeoJSON checks passed)"
shp_before=$(cat "$TMP"/town.* | sha256sum)
expect_rc 0 "$STOCKTAKE" inspect --json -q "$TMP/town.shp"
$PY - "$TMP/stdout" <<'EOF' || fail "UTM shapefile profile"
import json, sys
layer = json.load(open(sys.argv[1]))["layers"][0]
assert layer["features"] == 8, layer["features"]
assert layer["crs"] == "EPSG:32631", layer["crs"]
w, s, e, n = layer["extent_lonlat"]
# The outline of the UTM extent encloses the lon/lat extent of the
# GeoJSON (3.21 51.18 3.2151 51.1805) and exceeds it by grid convergence
# only (about 1.5 m here, 2e-5 degrees).
assert w <= 3.21 and s <= 51.18 and e >= 3.2151 and n >= 51.1805, layer["extent_lonlat"]
assert abs(w - 3.21) < 1e-4 and abs(n - 51.1805) < 1e-4, layer["extent_lonlat"]
EOF

mv "$TMP/town.prj" "$TMP/town.prj.saved"
expect_rc 2 "$STOCKTAKE" inspect "$TMP/town.shp"
expect_stderr "town\.shp.*--crs"
expect_rc 0 "$STOCKTAKE" inspect -q --crs EPSG:32631 "$TMP/town.shp"
grep -qE '^  crs +EPSG:32631$' "$TMP/stdout" || fail "--crs not used"

printf 'PROJCS["Marrowick local grid",GEOGCS["nowhere"]]' >"$TMP/town.prj"
expect_rc 2 "$STOCKTAKE" inspect "$TMP/town.shp"
expect_stderr "town\.(shp|prj).*coordinate reference system.*Marrowick local grid"
mv "$TMP/town.prj.saved" "$TMP/town.prj"
[ "$(cat "$TMP"/town.* | sha256sum)" = "$shp_before" ] || fail "the shapefile was modified"

# ---- a GeoPackage table ------------------------------------------------------------
ogr2ogr -f GPKG "$TMP/two.gpkg" "$T" -nln homes 2>/dev/null &&
    ogr2ogr -f GPKG -update "$TMP/two.gpkg" "$TMP/town.shp" -nln utm 2>/dev/null ||
    fail "ogr2ogr could not make the GeoPackage"
has_reader "$TMP/two.gpkg:homes" || skip "GeoPackage reader not built yet (other checks passed)"
printf 'this is not a GeoPackage\n' >"$TMP/fake.gpkg"
expect_rc 2 "$STOCKTAKE" inspect "$TMP/fake.gpkg"
expect_stderr "fake\.gpkg"
grep -q "unknown layer format" "$TMP/stderr" && fail "fake.gpkg not read as a GeoPackage"
expect_rc 2 "$STOCKTAKE" inspect "$TMP/two.gpkg:nosuchlayer"
expect_stderr "two\.gpkg.*nosuchlayer"
expect_rc 0 "$STOCKTAKE" inspect -q "$TMP/two.gpkg:utm"
grep -qE '^  features +8$' "$TMP/stdout" || fail "gpkg:utm feature count"
grep -qE '^  layer +utm$' "$TMP/stdout" || fail "gpkg layer name"
grep -qE '^  crs +EPSG:32631$' "$TMP/stdout" || fail "gpkg:utm crs"
exit 0
