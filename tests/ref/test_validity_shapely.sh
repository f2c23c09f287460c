#!/bin/sh
# Reference check: every case of tests/data/footprint/invalid_cases.txt is
# judged by shapely (/usr/bin/python3, shapely on GEOS) exactly as the file
# says -- explain_validity names the invalidity kind that matches the
# expected stocktake code, and shapely's make_valid (GEOS MakeValid,
# linework method) gives the file's linework area. The C unit test
# (tests/unit/test_footprint.c) reads the same file and checks stocktake
# finds the same code and repairs to the stated areas.
. "$ST_TESTS_ROOT/e2e/lib.sh"

CASES=$DATA/footprint/invalid_cases.txt
[ -r "$CASES" ] || fail "missing $CASES"
$PY -c 'import shapely' 2>/dev/null || skip "shapely not installed for $PY"

$PY - "$CASES" <<'PYEOF' || fail "shapely disagrees with $CASES"
import sys
from shapely import wkt
from shapely.validation import explain_validity, make_valid

# stocktake finding code -> the reason text GEOS/shapely gives
REASON = {
    "geom.self-intersection": "Self-intersection",
    "geom.ring-self-intersection": "Ring Self-intersection",
    "geom.hole-outside-shell": "Hole lies outside shell",
    "geom.nested-holes": "Holes are nested",
    "geom.disconnected-interior": "Interior is disconnected",
    "geom.nested-shells": "Nested shells",
    "geom.too-few-points": "Too few points in geometry component",
    "geom.bad-coordinate": "Invalid Coordinate",
}

def polygon_area(g):
    """Area of the polygonal members only; None when there are none."""
    if g is None or g.is_empty:
        return None
    if g.geom_type in ("Polygon", "MultiPolygon"):
        return g.area
    if g.geom_type == "GeometryCollection":
        polys = [m for m in g.geoms if m.geom_type in ("Polygon", "MultiPolygon")]
        return sum(p.area for p in polys) if polys else None
    return None

bad = 0
n = 0
for lineno, line in enumerate(open(sys.argv[1]), 1):
    line = line.strip()
    if not line or line.startswith("#"):
        continue
    code, _structure, linework, text = [f.strip() for f in line.split(" | ")]
    n += 1
    g = wkt.loads(text)
    reason = explain_validity(g).split("[")[0]
    if reason != REASON.get(code):
        print(f"line {lineno}: expected {code} ({REASON.get(code)}), shapely says {reason}")
        bad += 1
    try:
        area = polygon_area(make_valid(g))
    except ValueError:          # GEOS refuses NaN input
        area = None
    want = None if linework == "reject" else float(linework)
    if (area is None) != (want is None) or (want is not None and abs(area - want) > 1e-9):
        print(f"line {lineno}: make_valid area {area}, file says {linework}")
        bad += 1
print(f"{n} cases, {bad} disagreements")
sys.exit(1 if bad or n == 0 else 0)
PYEOF
