#!/bin/sh
# bench/tiles.sh -- what splitting a job into windows costs (docs/scale.md,
# docs/performance.md "Windows"). The benchmark town of N footprints
# (default 200,000; bench/gen_town.py seed 1, GeoJSONL) is run whole, then
# split into 1, 2, 4 and 16 boxes of its extent (halves, quarters, a 4 x 4
# grid), every part run one after the other with -j 1, then merged; every
# merge is checked equal to the single run (tests/e2e/compare_inventories.py).
# Prints per split: the parts' CPU seconds summed, the slowest part's wall
# time (the wall time with one machine per part), the merge's, and both
# against the single run's (same -j 1, same session).
#
#   TILES_N=200000 TILES_RUNS=3 sh bench/tiles.sh      # = make bench-tiles
#
# TILES_FORMAT=gpkg runs the same on the town converted to a GeoPackage
# (stocktake convert, kept beside the GeoJSONL), its parts given the layer
# facts (stocktake tiles --facts, made once and timed apart) so that each
# reads through the R-tree; TILES_FACTS=0 leaves the facts out.
set -u
cd "$(dirname "$0")/.." || exit 2
ST=${STOCKTAKE:-build/stocktake}
N=${TILES_N:-200000}
RUNS=${TILES_RUNS:-3}
SEED=1
PY=/usr/bin/python3
TIME=/usr/bin/time
export ST SEED PY TIME
. bench/lib.sh
D=$(town "$N") || exit 2
IN=$D/buildings_osm.geojsonl
FORMAT=${TILES_FORMAT:-geojsonl}
W=$(mktemp -d)
trap 'rm -rf "$W"' EXIT
if [ "$FORMAT" = gpkg ]; then
    [ -f "$D/buildings_osm.gpkg" ] || "$ST" convert -q "$IN" "$D/buildings_osm.gpkg" ||
        { echo "bench: could not convert the town to a GeoPackage" >&2; exit 2; }
    IN=$D/buildings_osm.gpkg
fi
FACTS=""
if [ "$FORMAT" = gpkg ] && [ "${TILES_FACTS:-1}" = 1 ]; then
    FACTS="--facts $W/facts.txt"
fi
SOURCE_DATE_EPOCH=1700000000
export SOURCE_DATE_EPOCH
OPTS="-r bench/bench.rules --districts $D/districts.geojson --district-key district_id
--region-key region_id --reference $D/reference_counts.csv --fill draw --seed 3 -j 1 -q"
machine
echo "input: $IN${FACTS:+ (parts with --facts)}"

# t CMD...: "wall cpu" of one command (GNU time), its exit code checked.
t() {
    $TIME -f "%e %U %S" -o "$W/t" "$@" 2>"$W/err" || { cat "$W/err" >&2; exit 2; }
    awk '{printf "%.2f %.2f\n", $1, $2 + $3}' "$W/t"
}

ext=$("$ST" inspect --json "$IN" | $PY -c 'import json,sys; print(*json.load(sys.stdin)["layers"][0]["extent_lonlat"])')
# boxes K: a KxK-ish grid over the extent, slightly grown so it covers it
boxes() {
    echo "$ext" | awk -v k="$1" '{
        w=$1-1e-4; s=$2-1e-4; e=$3+1e-4; n=$4+1e-4
        nx = (k == 2) ? 2 : int(sqrt(k) + 0.5); ny = k / nx
        for (i = 0; i < nx; i++) for (j = 0; j < ny; j++)
            printf "%.7f,%.7f,%.7f,%.7f\n", w+(e-w)*i/nx, s+(n-s)*j/ny, w+(e-w)*(i+1)/nx, s+(n-s)*(j+1)/ny }'
}

median() { sort -n | awk '{a[NR]=$1} END {print a[int((NR+1)/2)]}'; }

printf '%-7s %8s %8s %9s %9s %8s %8s %10s %10s\n' windows "sum cpu" "max wall" "merge cpu" \
    "merge wall" "cpu x" "wall x" "halo share" "merge share"
: >"$W/single"
for r in $(seq "$RUNS"); do
    # shellcheck disable=SC2086
    t "$ST" run $OPTS -o "$W/single.gpkg" "$IN" >>"$W/single"
done
s_wall=$(cut -d' ' -f1 "$W/single" | median)
s_cpu=$(cut -d' ' -f2 "$W/single" | median)
printf '%-7s %8s %8s %9s %9s    (single run, median of %d: wall %s s, cpu %s s)\n' 1 - - - - "$RUNS" "$s_wall" "$s_cpu"
if [ -n "$FACTS" ]; then
    : >"$W/facts"
    for r in $(seq "$RUNS"); do
        t "$ST" tiles -z 0 --facts "$W/facts.txt" "$IN" | tail -n 1 >>"$W/facts"
    done
    echo "(the facts once: stocktake tiles --facts, median wall $(cut -d' ' -f1 "$W/facts" |
        median) s, cpu $(cut -d' ' -f2 "$W/facts" | median) s; not in the figures below)"
fi
for k in 1 2 4 16; do
    : >"$W/runs"
    for r in $(seq "$RUNS"); do
        rm -rf "$W/parts" && mkdir -p "$W/parts"
        sum=0; max=0; i=0
        for b in $(boxes "$k"); do
            i=$((i + 1))
            # shellcheck disable=SC2086
            x=$(t "$ST" run $OPTS $FACTS --bbox "$b" -o "$W/parts/$i.gpkg" "$IN")
            sum=$(echo "$sum $x" | awk '{print $1 + $3}')
            max=$(echo "$max $x" | awk '{print ($2 > $1) ? $2 : $1}')
        done
        # shellcheck disable=SC2086
        m=$(t "$ST" merge $OPTS -o "$W/merged.gpkg" "$W"/parts/*.gpkg)
        $PY tests/e2e/compare_inventories.py "$W/single.gpkg" "$W/merged.gpkg" >"$W/cmp" ||
            { cat "$W/cmp" >&2; echo "bench: $k windows: merge differs from the single run" >&2; exit 2; }
        echo "$sum $max $m" >>"$W/runs"
    done
    sc=$(cut -d' ' -f1 "$W/runs" | median); mw=$(cut -d' ' -f2 "$W/runs" | median)
    gw=$(cut -d' ' -f3 "$W/runs" | median); gc=$(cut -d' ' -f4 "$W/runs" | median)
    echo "$k $sc $mw $gc $gw $s_cpu $s_wall" | awk '{
        printf "%-7s %8.2f %8.2f %9.2f %9.2f %8.2f %8.2f %9.0f%% %9.0f%%\n", $1, $2, $3, $4, $5,
            ($2 + $4) / $6, ($3 + $5) / $7, 100 * ($2 - $6) / $6, 100 * $4 / $6 }'
done
echo "sum cpu: all parts' CPU; max wall: the slowest part (one machine per part);"
echo "cpu x, wall x: (parts + merge) against the single run; halo share: the parts' CPU beyond"
echo "the single run's; merge share: the merge's CPU, both as a share of the single run's CPU"
