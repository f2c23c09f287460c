#!/bin/sh
# The starter pack over the real layers of $REAL (OpenStreetMap data, ODbL,
# © OpenStreetMap contributors): /usr/bin/python3 extracts each layer's
# attributes (json for GeoJSON, geopandas for Shapefiles), the harness
# build/tests/test_rules_real applies the pack, and the script checks the
# results row by row against its own reading of the source values.
. "$ST_TESTS_ROOT/e2e/lib.sh"
[ -n "$REAL" ] || skip "no real data folder"
HARNESS=$(dirname "$STOCKTAKE")/tests/test_rules_real
[ -x "$HARNESS" ] || skip "no $HARNESS (make $HARNESS)"
$PY -c "import geopandas" 2>/dev/null || skip "no geopandas for $PY"

for layer in banepa/buildings.geojson kronstadt/buildings.geojson belem/buildings.shp \
             north_macedonia/buildings.shp fianarantsoa/building.geojson; do
    name=$(echo "$layer" | tr '/.' '__')
    $PY - "$REAL/$layer" "$TMP/$name.tsv" <<'PY' || fail "cannot extract $layer"
import json, sys
src, dst = sys.argv[1], sys.argv[2]
def clean(v):
    if v is None or (isinstance(v, float) and v != v):
        return "\\N"
    return str(v).replace("\t", " ").replace("\n", " ").replace("\r", " ")
if src.endswith(".geojson"):
    feats = json.load(open(src, encoding="utf-8"))["features"]
    names = []
    for f in feats:
        for k in (f.get("properties") or {}):
            if k not in names:
                names.append(k)
    rows = [[clean((f.get("properties") or {}).get(k)) for k in names] for f in feats]
else:
    import geopandas
    d = geopandas.read_file(src)
    names = [c for c in d.columns if c != "geometry"]
    rows = [[clean(v) for v in r] for r in d[names].itertuples(index=False)]
with open(dst, "w", encoding="utf-8") as out:
    out.write("\t".join(names) + "\n")
    for r in rows:
        out.write("\t".join(r) + "\n")
PY
    ST_RULES_REAL_TSV="$TMP/$name.tsv" ST_RULES_REAL_OUT="$TMP/$name.out" "$HARNESS" \
        >"$TMP/harness.log" 2>&1 || { cat "$TMP/harness.log" >&2; fail "harness failed on $layer"; }
    grep -q "PASSED.*1 test" "$TMP/harness.log" || { cat "$TMP/harness.log" >&2; fail "harness skipped $layer"; }
    $PY - "$TMP/$name.tsv" "$TMP/$name.out" "$layer" <<'PY' || fail "unexpected values for $layer"
import sys
src, out, layer = sys.argv[1:4]
def table(path):
    lines = [l.rstrip("\n").split("\t") for l in open(path, encoding="utf-8")
             if not l.startswith("#")]
    head = lines[0]
    return [dict(zip(head, r)) for r in lines[1:]]
inp, res = table(src), table(out)
assert len(inp) == len(res), (len(inp), len(res))
# Our own reading of OSM's building=* values for a few unambiguous ones.
use = {"house": "RES", "residential": "RES", "apartments": "RES", "detached": "RES",
       "terrace": "RES", "school": "EDU", "university": "EDU", "hospital": "HLT",
       "church": "REL", "place_of_worship": "REL", "industrial": "IND",
       "commercial": "COM", "retail": "COM", "garages": "ANC", "garage": "ANC",
       "greenhouse": "AGR"}
checked = {"occupancy": 0, "storeys": 0, "roof": 0}
bad = []
for i, (a, r) in enumerate(zip(inp, res)):
    b = a.get("building", "\\N")
    if b == "\\N":
        b = a.get("type", "\\N")
    if b in use:
        checked["occupancy"] += 1
        if r["occupancy"] != use[b] or r["occupancy_from"] != "source":
            bad.append((i, "occupancy", b, r["occupancy"], r["occupancy_from"]))
    lv = a.get("building:levels", "\\N")
    if lv == "\\N":
        lv = a.get("building_l", "\\N")
    if lv != "\\N":
        try:
            x = float(lv)
        except ValueError:
            x = None
        if x is not None and x >= 1:
            want = str(int(x) if x == int(x) else int(x) + 1)   # fractions go up
            checked["storeys"] += 1
            if r["storeys"] != want or r["storeys_from"] != "derived":
                bad.append((i, "storeys", lv, r["storeys"], r["storeys_from"]))
        elif x == 0 and r["storeys"] == "0":
            bad.append((i, "storeys", lv, r["storeys"], "0 is outside 1..200"))
    rm = a.get("roof_mater", a.get("roof:material", "\\N"))
    if rm in ("concrete", "concerte"):
        checked["roof"] += 1
        if r["roof"] != "CONC":
            bad.append((i, "roof", rm, r["roof"], r["roof_from"]))
    for f in ("occupancy", "material", "roof", "storeys", "height_m", "year_built"):
        if r[f + "_from"] not in ("source", "derived", "unknown") or not r[f + "_rule"]:
            bad.append((i, f, "provenance", r[f + "_from"], r[f + "_rule"]))
if bad:
    for b in bad[:20]:
        print(layer, *b, file=sys.stderr)
    sys.exit(1)
# Each layer exercises at least the occupancy table.
assert checked["occupancy"] > 0, checked
if layer.startswith(("banepa", "kronstadt")):
    assert checked["storeys"] > 0, checked
if layer.startswith("banepa"):
    assert checked["roof"] > 1000, checked
PY
done
exit 0
