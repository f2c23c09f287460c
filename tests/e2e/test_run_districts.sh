#!/bin/sh
# stocktake run with districts, defaults and reference counts on the demo
# scenario (samples/): exit codes and "nothing written" on bad districts,
# reference counts and defaults tables (with file:line); the districts
# layer; byte-identical outputs for the same seed, inputs and rules
# (SOURCE_DATE_EPOCH pins the time stamps), other values for another seed;
# the draw's provenance; counts checked with GDAL (ogrinfo / osgeo.ogr).
. "$ST_TESTS_ROOT/e2e/lib.sh"
S=$ROOT/samples
R=$ROOT/rules/demo.rules
IN="$S/buildings_osm.geojson $S/buildings_cadastre.geojson"
D="--districts $S/districts.geojson --district-key district_id --region-key region_id"

# ---- same seed: the same bytes; another seed: other draws -------------------
export SOURCE_DATE_EPOCH=1700000000
for i in 1 2; do
    # shellcheck disable=SC2086
    "$STOCKTAKE" run -q -r "$R" $D --reference "$S/reference_counts.csv" --fill draw \
        --seed 11 -o "$TMP/out.gpkg" $IN 2>/dev/null
    [ $? -le 1 ] || fail "run $i"
    mv "$TMP/out.gpkg" "$TMP/run$i.gpkg"
done
cmp -s "$TMP/run1.gpkg" "$TMP/run2.gpkg" || fail "same seed, inputs and rules: outputs differ"
# shellcheck disable=SC2086
"$STOCKTAKE" run -q -r "$R" $D --reference "$S/reference_counts.csv" --fill draw \
    --seed 12 -o "$TMP/out.gpkg" $IN 2>/dev/null
$PY - "$TMP/run1.gpkg" "$TMP/out.gpkg" <<'PY' || fail "seeds"
import sys
from osgeo import ogr
def values(p):
    ds = ogr.Open(p)
    return {f.GetField("bid"): (f.GetField("material"), f.GetField("material_from"))
            for f in ds.GetLayerByName("buildings")}
a, b = values(sys.argv[1]), values(sys.argv[2])
assert a.keys() == b.keys()
drawn = [k for k in a if a[k][1] == "drawn"]
assert len(drawn) > 100, len(drawn)
assert all(b[k][1] == "drawn" for k in drawn)
assert sum(a[k][0] != b[k][0] for k in drawn) > len(drawn) // 5
# observed values do not depend on the seed
assert all(a[k] == b[k] for k in a if a[k][1] in ("source", "derived"))
PY
unset SOURCE_DATE_EPOCH

# ---- most-likely: provenance default, never drawn; the districts layer ------
# shellcheck disable=SC2086
"$STOCKTAKE" run -q -r "$R" $D --reference "$S/reference_counts.csv" -o "$TMP/ml.gpkg" $IN \
    2>/dev/null
[ $? -le 1 ] || fail "most-likely run"
[ "$(ogr_count "$TMP/ml.gpkg" districts)" = 11 ] || fail "districts layer: 10 districts + none"
$PY - "$TMP/ml.gpkg" <<'PY' || fail "most-likely and the districts layer"
import sys
from osgeo import ogr
ds = ogr.Open(sys.argv[1])
froms = {f.GetField("material_from") for f in ds.GetLayerByName("buildings")}
assert "drawn" not in froms and "default" in froms, froms
rows = [(f.GetField("district"), f.GetField("reference"), f.GetGeometryRef() is None)
        for f in ds.GetLayerByName("districts")]
assert rows[-1] == ("none", None, True), rows[-1]
assert [r[0] for r in rows[:10]] == ["QM%02d" % i for i in range(1, 11)], rows
assert {r[0] for r in rows if r[1] == "under"} == {"QM08"}, rows
aside = {f.GetField("district") for f in ds.GetLayerByName("set_aside")}
assert aside <= {"QM%02d" % i for i in range(1, 11)} | {"none"}, aside
PY

# ---- single-layer output: the districts layer goes to OUT.districts.geojson --
# shellcheck disable=SC2086
expect_rc 0 "$STOCKTAKE" run -q $D -o "$TMP/one.geojson" $IN
[ "$(ogr_count "$TMP/one.districts.geojson")" = 11 ] || fail "one.districts.geojson"

# ---- bad input: exit 2, a message with file:line, nothing written -----------
printf 'district_id,buildings\nQM01,475\nQM02,lots\n' >"$TMP/badref.csv"
# shellcheck disable=SC2086
expect_rc 2 "$STOCKTAKE" run -q $D --reference "$TMP/badref.csv" -o "$TMP/bad.gpkg" $IN
expect_stderr "badref.csv:3: error: expected count is not a whole number"
[ ! -e "$TMP/bad.gpkg" ] || fail "a failed run wrote its output"

printf 'scope,key,field,value,share\ndistrict,QM0*,material,URM,60\ndistrict,QM0*,material,RC,30\n' \
    >"$TMP/d.csv"
printf 'include "%s"\ndefaults\n  table "d.csv"\nend\n' "$R" >"$TMP/t.rules"
# shellcheck disable=SC2086
expect_rc 2 "$STOCKTAKE" run -q -r "$TMP/t.rules" $D -o "$TMP/bad.gpkg" $IN
expect_stderr "d.csv:2: error: default for 'material': shares add up to 90%"
[ ! -e "$TMP/bad.gpkg" ] || fail "a failed run wrote its output"
# lint checks the table's content too
expect_rc 2 "$STOCKTAKE" lint "$TMP/t.rules"
expect_stderr "d.csv:2: error: default for 'material': shares add up to 90%"

# shellcheck disable=SC2086
expect_rc 2 "$STOCKTAKE" run -q --districts "$S/districts.geojson" --district-key nope \
    -o "$TMP/bad.gpkg" $IN
expect_stderr "--district-key: the layer has no field 'nope' \(its fields: 'district_id'"
expect_rc 2 "$STOCKTAKE" run -q --reference "$S/reference_counts.csv" -o "$TMP/bad.gpkg" \
    "$S/buildings_osm.geojson"
expect_stderr "need --districts"
expect_rc 2 "$STOCKTAKE" run -q --fill sometimes -o "$TMP/bad.gpkg" "$S/buildings_osm.geojson"
expect_rc 2 "$STOCKTAKE" run -q --seed -3 -o "$TMP/bad.gpkg" "$S/buildings_osm.geojson"
expect_rc 2 "$STOCKTAKE" run -q -j 0 -o "$TMP/bad.gpkg" "$S/buildings_osm.geojson"
[ ! -e "$TMP/bad.gpkg" ] || fail "a failed run wrote its output"

# ---- the gate: a fail line on district completeness exits 1 -----------------
printf 'include "%s"\ngate\n  fail when district-completeness < 30%%\nend\n' "$R" >"$TMP/g.rules"
# shellcheck disable=SC2086
expect_rc 1 "$STOCKTAKE" run -r "$TMP/g.rules" $D --reference "$S/reference_counts.csv" \
    -o "$TMP/g.gpkg" $IN
expect_stderr "gate: FAILED -- district-completeness of QM08 = 0.1[0-9]* < 0.3"
[ -f "$TMP/g.gpkg" ] || fail "a gate failure still writes the inventory"
exit 0
