#!/bin/sh
# bench/compare.sh -- stocktake against the scripted comparison
# (bench/peer.py, geopandas) on the same files in the same session;
# 'make bench-compare' runs it. Never part of check or CI.
#
# Input:   $STOCKTAKE      the binary (default build/stocktake)
#          COMPARE_N       sizes of the benchmark town (default "100000";
#                          "100000 1000000" for both: the peer takes many
#                          minutes and several GB at 1,000,000)
#          COMPARE_FORMATS input formats (default "gpkg"; also "geojsonl")
#          BENCH_SEED      generator seed (default 1)
#          BENCH_RUNS      stocktake runs per size (default 3; the median
#                          run is shown). The peer runs once per size.
#          BENCH_JOBS      stocktake -j (default: stocktake's own default)
# Output:  for each size and format: both tools' per-stage tables (wall s,
#          cpu s, footprints/s, peak MB), the end-to-end figures from GNU
#          time, and the ratios peer / stocktake (wall, cpu, peak memory).
#          Outputs in bench/data/out/ (git-ignored).
# Data:    bench/data/town-nN-sS/ as bench/run.sh makes it (the invented
#          town of bench/gen_town.py, 5,000 districts, reference counts);
#          made here the same way when missing.
# Errors:  a tool that fails is reported with its stderr; exit 1 at the end.
set -u
cd "$(dirname "$0")/.." || exit 2
ST=${STOCKTAKE:-build/stocktake}
SIZES=${COMPARE_N:-100000}
FORMATS=${COMPARE_FORMATS:-gpkg}
SEED=${BENCH_SEED:-1}
RUNS=${BENCH_RUNS:-3}
JOBS=${BENCH_JOBS:-}
PY=/usr/bin/python3
TIME=/usr/bin/time
OUT=bench/data/out
[ -x "$ST" ] || { echo "compare: no stocktake binary at $ST (make first)" >&2; exit 2; }
[ -x "$TIME" ] || { echo "compare: $TIME missing (apt-get install time)" >&2; exit 2; }
mkdir -p "$OUT" || exit 1
. bench/lib.sh

compare_one() {   # compare_one DATA FORMAT N
    d=$1; fmt=$2; n=$3
    in=$d/buildings_osm.$fmt
    # shellcheck disable=SC2046
    set -- $(place_opts "$d")
    jobs=""
    [ -n "$JOBS" ] && jobs="-j $JOBS"
    echo
    echo "== N = $n, input $in (both tools read the same file)"
    r=1
    while [ "$r" -le "$RUNS" ]; do
        # shellcheck disable=SC2086
        timed "$OUT/st$r" "$ST" run -q --timings $jobs -r bench/bench.rules "$@" \
            -o "$OUT/st-$n-$fmt.gpkg" "$in" ||
            { problem "stocktake failed:"; cat "$OUT/st$r.err" >&2; return; }
        r=$((r + 1))
    done
    med=$(median_run "$OUT/st" "$RUNS")
    echo "stocktake ($ST run -q --timings ${jobs:+$jobs }-r bench/bench.rules $* -o OUT.gpkg $in), median of $RUNS by wall:"
    stage_lines "$OUT/st$med.err"
    timed "$OUT/peer" "$PY" bench/peer.py "$in" "$d/districts.geojson" \
        "$d/reference_counts.csv" "$OUT/peer-$n-$fmt.gpkg" ||
        { problem "peer.py failed:"; cat "$OUT/peer.err" >&2; return; }
    echo "peer ($PY bench/peer.py $in $d/districts.geojson $d/reference_counts.csv OUT.gpkg), 1 run:"
    grep -v '^peer:' "$OUT/peer.err"
    grep '^peer:' "$OUT/peer.err"
    read -r sw su ss sm <"$OUT/st$med.t"
    read -r pw pu ps pm <"$OUT/peer.t"
    awk -v sw="$sw" -v su="$su" -v ss="$ss" -v sm="$sm" \
        -v pw="$pw" -v pu="$pu" -v ps="$ps" -v pm="$pm" -v n="$n" 'BEGIN {
        printf "end to end (GNU time)      %12s %12s %10s\n", "stocktake", "peer.py", "peer/st";
        printf "  wall s                   %12.2f %12.2f %9.1fx\n", sw, pw, pw / sw;
        printf "  cpu s (user+sys)         %12.2f %12.2f %9.1fx\n", su + ss, pu + ps, (pu + ps) / (su + ss);
        printf "  peak RSS MB              %12.1f %12.1f %9.1fx\n", sm / 1024, pm / 1024, pm / sm;
        printf "  peak bytes per footprint %12.0f %12.0f\n", sm * 1024 / n, pm * 1024 / n;
        printf "  footprints/s             %12.0f %12.0f\n", n / sw, n / pw }'
}

machine
for n in $SIZES; do
    d=$(town "$n") || continue
    for fmt in $FORMATS; do
        compare_one "$d" "$fmt" "$n"
    done
done
exit $failed
