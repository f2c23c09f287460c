#!/bin/sh
# bench/stages.sh -- the whole job, stage by stage: bench/run.sh calls it
# (section 'run'); it also runs on its own.
#
# Input:   $STOCKTAKE     the binary (default build/stocktake)
#          $FLOOR         bench/floor built by 'make bench' (default
#                         build/bench/floor): the bare read-validate-index
#                         loop, measured on the same GeoPackage
#          STAGES_N       sizes (default "100000 1000000")
#          STAGES_FORMATS input formats (default "gpkg geojsonl")
#          BENCH_SEED     generator seed (default 1)
#          BENCH_RUNS     runs per measurement (default 3; medians shown)
#          BENCH_JOBS     stocktake -j (default: stocktake's own default)
# Output:  for each size: the floor (median run), then for each format the
#          per-stage table of the median run of `stocktake run --timings`
#          (wall s, cpu s, footprints/s, peak MB so far) with bench/bench.rules
#          (and the districts and reference counts when this build has
#          them), and the end-to-end line from GNU time: wall, cpu, peak
#          RSS and bytes per footprint; last, the ratio of the geometry
#          stages (footprints + neighbours), without and with the read,
#          to the floor (which reads, validates and indexes).
# Errors:  a step that fails is reported; exit 1 at the end.
set -u
cd "$(dirname "$0")/.." || exit 2
ST=${STOCKTAKE:-build/stocktake}
FLOOR=${FLOOR:-build/bench/floor}
SIZES=${STAGES_N:-100000 1000000}
FORMATS=${STAGES_FORMATS:-gpkg geojsonl}
SEED=${BENCH_SEED:-1}
RUNS=${BENCH_RUNS:-3}
JOBS=${BENCH_JOBS:-}
PY=/usr/bin/python3
TIME=/usr/bin/time
OUT=bench/data/out
[ -x "$ST" ] || { echo "stages: no stocktake binary at $ST (make first)" >&2; exit 2; }
[ -x "$TIME" ] || { echo "stages: $TIME missing (apt-get install time)" >&2; exit 2; }
mkdir -p "$OUT" || exit 1
. bench/lib.sh

# floor_median DATA: the floor's lines of its median run; its total wall
# seconds into $OUT/floor.total.
floor_median() {
    r=1
    while [ "$r" -le "$RUNS" ]; do
        timed "$OUT/fl$r" "$FLOOR" "$1/buildings_osm.gpkg" >"$OUT/fl$r.out" ||
            { problem "floor failed"; cat "$OUT/fl$r.err" >&2; return 1; }
        # rank the runs by the floor's own total, not GNU time's (start-up)
        awk '/^floor total/ {print $5, $7}' "$OUT/fl$r.out" >"$OUT/fl$r.t"
        r=$((r + 1))
    done
    med=$(median_run "$OUT/fl" "$RUNS")
    cat "$OUT/fl$med.out"
    awk '/^floor total/ {print $5}' "$OUT/fl$med.out" >"$OUT/floor.total"
}

stages_one() {   # stages_one DATA FORMAT N
    d=$1; fmt=$2; n=$3
    in=$d/buildings_osm.$fmt
    # shellcheck disable=SC2046
    set -- $(place_opts "$d")
    jobs=""
    [ -n "$JOBS" ] && jobs="-j $JOBS"
    r=1
    while [ "$r" -le "$RUNS" ]; do
        # shellcheck disable=SC2086
        timed "$OUT/sg$r" "$ST" run -q --timings $jobs -r bench/bench.rules "$@" \
            -o "$OUT/stages-$n-$fmt.gpkg" "$in" ||
            { problem "stocktake failed:"; cat "$OUT/sg$r.err" >&2; return; }
        r=$((r + 1))
    done
    med=$(median_run "$OUT/sg" "$RUNS")
    echo
    echo "-- N = $n, $fmt: $ST run -q --timings ${jobs:+$jobs }-r bench/bench.rules $* -o OUT.gpkg $in"
    echo "   median of $RUNS runs by wall time:"
    stage_lines "$OUT/sg$med.err"
    read -r w u s m <"$OUT/sg$med.t"
    awk -v w="$w" -v u="$u" -v s="$s" -v m="$m" -v n="$n" 'BEGIN {
        printf "end to end (GNU time): %.2f s wall, %.2f s cpu, %.0f footprints/s, peak %.1f MB = %.0f bytes a footprint\n",
            w, u + s, n / w, m / 1024, m * 1024 / n }'
    if [ "$fmt" = gpkg ] && [ -s "$OUT/floor.total" ]; then
        awk -v f="$(cat "$OUT/floor.total")" '
            $1 == "footprints" || $1 == "footprint" || $1 == "neighbours" { g += $2 }
            $1 == "read" { rd = $2 }
            END { if (f > 0) {
                printf "floor %.2f s; geometry stages (footprint + neighbours) %.2f s = %.1f x the floor;", f, g, g / f
                printf " with the read %.2f s = %.1f x\n", rd + g, (rd + g) / f } }' \
            "$OUT/sg$med.err"
    fi
}

machine
for n in $SIZES; do
    d=$(town "$n") || continue
    echo
    echo "== N = $n"
    rm -f "$OUT/floor.total"
    if [ -x "$FLOOR" ]; then
        echo "floor ($FLOOR $d/buildings_osm.gpkg), median of $RUNS:"
        floor_median "$d"
    else
        note "no floor binary at $FLOOR ('make bench' builds it)"
    fi
    for fmt in $FORMATS; do
        stages_one "$d" "$fmt" "$n"
    done
done
exit $failed
