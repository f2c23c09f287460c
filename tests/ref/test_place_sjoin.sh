#!/bin/sh
# Reference check: stocktake's placement of buildings in districts against
# geopandas sjoin (/usr/bin/python3, GeoPandas on shapely/GEOS), building by
# building (tests/ref/place_sjoin.py), on
#   - a generated grid: 12 x 9 districts with jittered shared vertices (so
#     borders run at every angle), written in shuffled order, and about
#     2,850 buildings: 1,650 centred exactly on a shared corner or at k/16
#     along a shared edge (coordinates on a 1/4096-degree lattice and its
#     binary fractions, exact in binary), 1,200 anywhere;
#   - the real extracts: Belem (bairros in EPSG:31982 vs buildings in
#     EPSG:4326; the data README states 60.7 % of buildings in a bairro),
#     Fianarantsoa (fokontany, 100 %) and Bengaluru (BBMP wards with 6
#     invalid polygons, buildings in EPSG:32643; 100 %).
. "$ST_TESTS_ROOT/e2e/lib.sh"

$PY -c 'import geopandas' 2>/dev/null || skip "geopandas not installed for $PY"
CHECK=$ST_TESTS_ROOT/ref/place_sjoin.py

# ---- generated grid --------------------------------------------------------
$PY - "$TMP" <<'PYEOF' || fail "cannot generate the grid"
import json, random, sys
out = sys.argv[1]
rng = random.Random(20240611)       # fixed seed: the test is reproducible
Q = 1 / 4096.0                      # lattice step, exact in binary
NX, NY, STEP = 12, 9, 64            # cells of 64 lattice steps
X0, Y0 = -70.0, -33.5
# shared vertices, jittered by up to 16 steps except on the outer edge
V = {}
for i in range(NX + 1):
    for j in range(NY + 1):
        jx = 0 if i in (0, NX) else rng.randint(-16, 16)
        jy = 0 if j in (0, NY) else rng.randint(-16, 16)
        V[i, j] = (i * STEP + jx, j * STEP + jy)
def xy(p):
    return [X0 + p[0] * Q, Y0 + p[1] * Q]
cells = [(i, j) for i in range(NX) for j in range(NY)]
rng.shuffle(cells)
feats = []
for k, (i, j) in enumerate(cells):
    ring = [V[i, j], V[i + 1, j], V[i + 1, j + 1], V[i, j + 1], V[i, j]]
    feats.append({"type": "Feature", "properties": {"cell": f"C{i:02d}_{j:02d}"},
                  "geometry": {"type": "Polygon", "coordinates": [[xy(p) for p in ring]]}})
json.dump({"type": "FeatureCollection", "features": feats}, open(f"{out}/grid.geojson", "w"))
centres = [V[i, j] for i in range(1, NX) for j in range(1, NY)]   # shared corners
edges = [(V[i, j], V[i, j + 1]) for i in range(1, NX) for j in range(NY)]
edges += [(V[i, j], V[i + 1, j]) for i in range(NX) for j in range(1, NY)]
for a, b in edges:      # points at k/16 along each shared edge: exactly on it
    for k in rng.sample(range(1, 16), 8):
        centres.append((a[0] + (b[0] - a[0]) * k / 16, a[1] + (b[1] - a[1]) * k / 16))
for n in range(1200):   # anywhere, including a margin outside the grid
    centres.append((rng.uniform(-20, NX * STEP + 20), rng.uniform(-20, NY * STEP + 20)))
bld = []
h = 0.25                # half-side in lattice steps: a square centred on c
for n, c in enumerate(centres):
    ring = [(c[0] - h, c[1] - h), (c[0] + h, c[1] - h), (c[0] + h, c[1] + h),
            (c[0] - h, c[1] + h), (c[0] - h, c[1] - h)]
    bld.append({"type": "Feature", "properties": {"n": n},
                "geometry": {"type": "Polygon", "coordinates": [[xy(p) for p in ring]]}})
json.dump({"type": "FeatureCollection", "features": bld}, open(f"{out}/bld.geojson", "w"))
PYEOF

"$STOCKTAKE" run -q --districts "$TMP/grid.geojson" --district-key cell \
    -o "$TMP/grid_out.geojson" "$TMP/bld.geojson" 2>"$TMP/err" ||
    { cat "$TMP/err" >&2; fail "stocktake run on the grid"; }
$PY "$CHECK" "$TMP/bld.geojson" "$TMP/grid.geojson" cell "$TMP/grid_out.geojson" \
    >"$TMP/grid.txt" || { cat "$TMP/grid.txt" >&2; fail "grid: placement differs from sjoin"; }
cat "$TMP/grid.txt"
# the grid must really put buildings on shared borders
border=$(sed -n 's/.* \([0-9]*\) on a shared border.*/\1/p' "$TMP/grid.txt")
[ "${border:-0}" -ge 1000 ] || fail "grid: only ${border:-0} buildings on a shared border"
# -j 2 gives the same assignment
"$STOCKTAKE" run -q -j 2 --districts "$TMP/grid.geojson" --district-key cell \
    -o "$TMP/grid_j2.geojson" "$TMP/bld.geojson" 2>/dev/null || fail "stocktake run -j 2"
cmp -s "$TMP/grid_out.geojson" "$TMP/grid_j2.geojson" || fail "-j 2 gives another output"

# ---- real extracts ----------------------------------------------------------
[ -n "$REAL" ] || skip "real data not found (../shared/data/real)"

real_case() {   # name buildings districts key published-share
    "$STOCKTAKE" run -q --districts "$3" --district-key "$4" -o "$TMP/$1.geojson" "$2" \
        2>"$TMP/$1.err" || { cat "$TMP/$1.err" >&2; fail "$1: stocktake run"; }
    $PY "$CHECK" "$2" "$3" "$4" "$TMP/$1.geojson" "$5" >"$TMP/$1.txt" ||
        { cat "$TMP/$1.txt" >&2; fail "$1: placement differs from sjoin"; }
    echo "$1: $(cat "$TMP/$1.txt")"
}

real_case belem "$REAL/belem/buildings.shp" "$REAL/belem/bairros/BAIRROS_BELEM.shp" STRING 60.7
n=$(grep -c "repaired with GEOSMakeValid" "$TMP/belem.err")
[ "$n" -eq 1 ] || fail "belem: $n bairros reported repaired, the data README says 1 is invalid"
real_case fianarantsoa "$REAL/fianarantsoa/building.geojson" \
    "$REAL/fianarantsoa/andrainjato_fokontany.geojson" LIB_FKT 100
real_case bengaluru "$REAL/bengaluru/BuildingFootprintsOSM.gpkg" \
    "$REAL/bengaluru/BBMP_wards_2022.geojson" KGISWardName 100
n=$(grep -c "repaired with GEOSMakeValid" "$TMP/bengaluru.err")
[ "$n" -eq 6 ] || fail "bengaluru: $n wards reported repaired, the data README says 6 are invalid"
exit 0
