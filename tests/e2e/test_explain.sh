#!/bin/sh
# stocktake explain on a small run with rules (tests/data/explain): the
# exact provenance and rule (file:line, and the line's text) of a source,
# a derived and an unknown field; a set-aside bid; the findings; the same
# answer from a GeoJSON output; and the errors (exit 2, nothing on stdout).
# Expected rule lines are found with grep -n in the rule file, not written
# down here; the JSON is read with /usr/bin/python3's json module.
. "$ST_TESTS_ROOT/e2e/lib.sh"
rules=$DATA/explain/tiny.rules
in=$DATA/explain/tiny.geojson
expect_rc 0 "$STOCKTAKE" run -q -r "$rules" -o "$TMP/out.gpkg" "$in"
expect_rc 0 "$STOCKTAKE" run -q -r "$rules" -o "$TMP/out.geojson" "$in"

# The run's list of unmapped values, machine-readable: the barn's
# building=barn matches no line of tiny.rules (read with GDAL).
$PY - "$TMP/out.gpkg" "$TMP/out.unmapped.csv" <<'PY' || fail "unmapped table"
import csv, sys
from osgeo import ogr
ds = ogr.Open(sys.argv[1])
got = [(f.GetField("field"), f.GetField("value"), f.GetField("count")) for f in ds.GetLayerByName("unmapped")]
assert got == [("occupancy", "barn", 1)], got
rows = list(csv.DictReader(open(sys.argv[2], encoding="utf-8")))
assert [(r["field"], r["value"], int(r["count"])) for r in rows] == got, rows
PY

line_of() { grep -n -F -e "$1" "$rules" | head -n 1 | cut -d: -f1; }
src_line=$(line_of "house, apartments")
der_line=$(line_of "from levels")
unk_line=$(line_of "unknown material")
unk_occ=$(line_of "unknown occupancy")
[ -n "$src_line" ] && [ -n "$der_line" ] && [ -n "$unk_line" ] || fail "rule lines not found"

# The bids as the run gave them, read with GDAL: the kept copy of the
# duplicated footprint (a1), the barn (a4) and the set-aside copy (a3).
bids=$($PY - "$TMP/out.gpkg" <<'PY'
import sys
from osgeo import ogr
ds = ogr.Open(sys.argv[1])
ids = {}
for name in ("buildings", "set_aside"):
    for f in ds.GetLayerByName(name):
        ids[f.GetField("source_id")] = f.GetField("bid")
print(ids["a1"], ids["a4"], ids["a3"])
PY
) || fail "cannot read bids with GDAL"
set -- $bids
house=$1 barn=$2 dup=$3

# Text: one line per field with value, provenance and rule, then the rule text.
expect_rc 0 "$STOCKTAKE" explain "$TMP/out.gpkg" "$house"
cp "$TMP/stdout" "$TMP/house.txt"
grep -qE "^  occupancy +RES +source +$rules:$src_line\$" "$TMP/house.txt" || { cat "$TMP/house.txt"; fail "occupancy line"; }
grep -qE "^  storeys +3 +derived +$rules:$der_line\$" "$TMP/house.txt" || fail "storeys line"
grep -qE "^  material +UNK +unknown +$rules:$unk_line\$" "$TMP/house.txt" || fail "material line"
grep -qF "| house, apartments  -> RES" "$TMP/house.txt" || fail "rule text of the map line"
grep -qE "^  name +Mill House\$" "$TMP/house.txt" || fail "source attribute"
grep -qE "^building $house of .*: in buildings, status ok\$" "$TMP/house.txt" || fail "heading"

# JSON, the same facts, for every field of two buildings.
for out in out.gpkg out.geojson; do
    expect_rc 0 "$STOCKTAKE" explain --json "$TMP/$out" "$house"
    cp "$TMP/stdout" "$TMP/house.$out.json"
    expect_rc 0 "$STOCKTAKE" explain --json "$TMP/$out" "$barn"
    cp "$TMP/stdout" "$TMP/barn.$out.json"
    expect_rc 0 "$STOCKTAKE" explain --json "$TMP/$out" "$dup"
    cp "$TMP/stdout" "$TMP/dup.$out.json"
done
$PY - "$TMP" "$rules" "$src_line" "$der_line" "$unk_line" "$unk_occ" "$house" "$dup" <<'PY' || fail "JSON"
import json, sys
tmp, rules, src, der, unk, unk_occ, house, dup = sys.argv[1:9]
def load(name):
    return json.load(open("%s/%s" % (tmp, name), encoding="utf-8"))
def text_of(line):
    return open(rules, encoding="utf-8").read().split("\n")[int(line) - 1].strip()
for out in ("out.gpkg", "out.geojson"):
    h = load("house.%s.json" % out)
    assert h["found_in"] == "buildings" and h["status"] == "ok", h
    assert h["bid"] == int(house), h
    f = {x["name"]: x for x in h["fields"]}
    assert [x["name"] for x in h["fields"]] == ["occupancy", "storeys", "material"], h["fields"]
    assert (f["occupancy"]["value"], f["occupancy"]["from"], f["occupancy"]["rule"]) == \
        ("RES", "source", "%s:%s" % (rules, src)), f["occupancy"]
    assert (f["storeys"]["value"], f["storeys"]["from"], f["storeys"]["rule"]) == \
        ("3", "derived", "%s:%s" % (rules, der)), f["storeys"]
    assert (f["material"]["value"], f["material"]["from"], f["material"]["rule"]) == \
        ("UNK", "unknown", "%s:%s" % (rules, unk)), f["material"]
    for x in h["fields"]:
        assert x["rule_text"] == text_of(x["rule"].rsplit(":", 1)[1]), x
    assert h["source"] == {"building": "House", "levels": 3, "name": "Mill House"}, h["source"]
    assert h["building"]["source_id"] == "a1" and h["building"]["district"] == "none", h
    assert h["building"]["area_m2"] > 0 and h["building"]["perimeter_m"] > 0, h
    # the duplicate's note is about the kept building
    assert [g["code"] for g in h["findings"]] == ["dup.exact"], h["findings"]
    b = load("barn.%s.json" % out)
    fb = {x["name"]: x for x in b["fields"]}
    assert (fb["occupancy"]["value"], fb["occupancy"]["from"], fb["occupancy"]["rule"]) == \
        ("UNK", "unknown", "%s:%s" % (rules, unk_occ)), fb["occupancy"]
    assert fb["storeys"]["value"] == "12" and fb["storeys"]["from"] == "derived", fb
    assert [(g["code"], g["severity"]) for g in b["findings"]] == [("rule.check", "warning")], b
    assert "tall for this town" in b["findings"][0]["message"], b
    d = load("dup.%s.json" % out)
    assert d["found_in"] == "set_aside" and d["status"] == "duplicate", d
    assert d["duplicate_of"] == int(house), d
    assert "exact duplicate of building %s" % house in d["reason"], d
    assert d["fields"] == [] and d["source"] == {"building": "house"}, d
# the GeoPackage and the GeoJSON outputs give the same answer
for who in ("house", "barn", "dup"):
    a, b = load("%s.out.gpkg.json" % who), load("%s.out.geojson.json" % who)
    a.pop("file"); b.pop("file")
    assert a == b, (who, a, b)
PY

# Set aside, as text: why, and which building was kept.
expect_rc 0 "$STOCKTAKE" explain "$TMP/out.gpkg" "$dup"
grep -qE "^building $dup of .*: set aside, status duplicate\$" "$TMP/stdout" || fail "set-aside heading"
grep -qE "^  duplicate of +$house " "$TMP/stdout" || fail "duplicate of"

# A rule file that moved: the rule is still named, its text is not shown.
cp "$rules" "$TMP/moved.rules"
expect_rc 0 "$STOCKTAKE" run -q -r "$TMP/moved.rules" -o "$TMP/moved.gpkg" "$in"
rm "$TMP/moved.rules"
expect_rc 0 "$STOCKTAKE" explain "$TMP/moved.gpkg" "$house"
grep -qE "^  occupancy +RES +source +$TMP/moved.rules:$src_line\$" "$TMP/stdout" || fail "moved rule"
grep -q "not at that path any more" "$TMP/stdout" || fail "moved rule text"

# Errors: exit 2, a message naming the problem, nothing on stdout.
expect_rc 2 "$STOCKTAKE" explain "$TMP/out.gpkg" 999
expect_stderr "no building 999 in this output.*bids run from 1 to 4"
[ ! -s "$TMP/stdout" ] || fail "stdout written for a missing bid"
expect_rc 2 "$STOCKTAKE" explain --json "$TMP/out.geojson" 999
expect_stderr "no building 999"
[ ! -s "$TMP/stdout" ] || fail "stdout written for a missing bid (json)"
expect_rc 2 "$STOCKTAKE" explain "$TMP/missing.gpkg" 1
expect_stderr "missing.gpkg: error: cannot open"
expect_rc 2 "$STOCKTAKE" explain "$in" 1
expect_stderr "not a stocktake output"
expect_rc 2 "$STOCKTAKE" explain "$rules" 1
expect_stderr "not a stocktake output"
"$STOCKTAKE" convert "$in" "$TMP/plain.gpkg" >/dev/null 2>&1 || fail "convert"
expect_rc 2 "$STOCKTAKE" explain "$TMP/plain.gpkg" 1
expect_stderr "not a stocktake output: no buildings layer"
expect_rc 2 "$STOCKTAKE" explain "$TMP/out.gpkg" 0
expect_stderr "whole number"
expect_rc 2 "$STOCKTAKE" explain "$TMP/out.gpkg"
expect_rc 2 "$STOCKTAKE" explain --bogus "$TMP/out.gpkg" 1
exit 0
