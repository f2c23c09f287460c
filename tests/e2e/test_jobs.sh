#!/bin/sh
# stocktake run -j N: the outputs are byte-for-byte the same for any number
# of threads. Four real layers together (about 35,000 footprints, so the
# per-feature stages split into many chunks of work across layer
# boundaries), the benchmark's rule pack (maps, derives, checks, defaults
# learned per district, drawn with a seed), the Bengaluru wards as
# districts (placement and defaults run on the threads too), GeoPackage and
# GeoJSON outputs, -j 1, 2 and 4 compared with cmp. SOURCE_DATE_EPOCH fixes the timestamps (the
# reproducible-builds convention); -j is not recorded in run_info.
. "$ST_TESTS_ROOT/e2e/lib.sh"
[ -n "$REAL" ] || skip "no real data at ../shared/data/real"
ins="$REAL/north_macedonia/buildings.shp $REAL/belem/buildings.shp
$REAL/bengaluru/BuildingFootprintsOSM.gpkg $REAL/banepa/buildings.geojson"
wards=$REAL/bengaluru/BBMP_wards_2022.geojson
for f in $ins $wards; do [ -f "$f" ] || skip "missing $f"; done
SOURCE_DATE_EPOCH=1700000000
export SOURCE_DATE_EPOCH
for ext in gpkg geojson; do
    for j in 1 2 4; do
        mkdir -p "$TMP/$ext-j$j"
        # the same relative output name in each folder: the command line
        # recorded in run_info is then the same too
        # shellcheck disable=SC2086
        (cd "$TMP/$ext-j$j" && "$STOCKTAKE" run -q -j "$j" -r "$ROOT/bench/bench.rules" \
            --districts "$wards" --fill draw --seed 11 -o "out.$ext" $ins) >"$TMP/stdout" 2>"$TMP/stderr" ||
            { cat "$TMP/stderr" >&2; fail "run -j $j to .$ext failed"; }
    done
    n=$(ls "$TMP/$ext-j1" | wc -l)
    [ "$n" -ge 1 ] || fail "no output for .$ext"
    for j in 2 4; do
        for f in "$TMP/$ext-j1"/*; do
            b=$(basename "$f")
            cmp "$f" "$TMP/$ext-j$j/$b" || fail "-j 1 and -j $j differ in $b"
        done
        [ "$(ls "$TMP/$ext-j$j" | wc -l)" -eq "$n" ] || fail "-j $j wrote other files"
    done
done

# The run spanned many chunks (4,096 features each): count with GDAL.
kept=$(ogr_count "$TMP/gpkg-j1/out.gpkg" buildings)
aside=$(ogr_count "$TMP/gpkg-j1/out.gpkg" set_aside)
[ $((kept + aside)) -gt 30000 ] || fail "only $kept + $aside features read"
# Defaults were drawn (so the defaults stage ran on the threads), read by GDAL.
$PY - "$TMP/gpkg-j1/out.gpkg" <<'PY' || fail "no drawn or default values"
import sys
from osgeo import ogr
ds = ogr.Open(sys.argv[1])
froms = {f.GetField("material_from") for f in ds.GetLayerByName("buildings")}
assert "drawn" in froms or "default" in froms, froms
PY
# The timestamp is SOURCE_DATE_EPOCH's (2023-11-14T22:13:20Z), read by GDAL.
ogrinfo -ro -al "$TMP/gpkg-j1/out.gpkg" run_info 2>/dev/null | grep -q "2023-11-14T22:13:20Z" ||
    fail "run_info does not carry SOURCE_DATE_EPOCH's time"
sqlite3 "$TMP/gpkg-j1/out.gpkg" "SELECT DISTINCT last_change FROM gpkg_contents" |
    grep -qx "2023-11-14T22:13:20.000Z" || fail "gpkg_contents.last_change is not SOURCE_DATE_EPOCH's"
exit 0
