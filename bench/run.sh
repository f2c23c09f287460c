#!/bin/sh
# bench/run.sh -- stocktake's benchmarks; 'make bench' runs it.
#
# Input:   $STOCKTAKE, the binary (default build/stocktake).
#          BENCH_N        features in the benchmark town (default 1000000)
#          BENCH_SEED     generator seed (default 1)
#          BENCH_RUNS     timed runs per measurement (default 3)
#          BENCH_SECTIONS sections to run, in order (default "read run")
#          BENCH_RUN_N    sizes of the 'run' section (default "100000 1000000")
# Output:  tables on stdout. Data in bench/data/ (git-ignored), made once
#          and reused while the generator and the options are unchanged:
#          town-nN-sS/ holds the invented benchmark town of Quellamar
#          (bench/gen_town.py: N crowd-mapped footprints as GeoJSONL, 5,000
#          districts, the reference counts) and its GeoPackage and
#          Shapefile copies made with 'stocktake convert'.
# Errors:  a step that fails is reported with its message; the script goes
#          on with what it can measure and exits 1 at the end.
# Timing:  GNU time (/usr/bin/time, Debian package 'time', installed by
#          scripts/deps.sh): wall seconds and peak resident set size of
#          each run; the table gives the median run of BENCH_RUNS.
#
# Sections (add new ones as section_NAME functions and list them in
# BENCH_SECTIONS' default when they are ready):
#   read    inspect on GeoJSONL, GeoPackage, Shapefile: read throughput
#   place   run with districts, reference counts and defaults: the stages
#           districts (layer, reference, defaults tables), place, defaults
#           and audit from the run's own --timings, with 1 and 2 threads
#   run     the whole job at 100k and 1M, per stage, and the floor
#           (bench/stages.sh); the peer comparison is 'make bench-compare'
set -u
cd "$(dirname "$0")/.." || exit 2
ST=${STOCKTAKE:-build/stocktake}
N=${BENCH_N:-1000000}
SEED=${BENCH_SEED:-1}
RUNS=${BENCH_RUNS:-3}
SECTIONS=${BENCH_SECTIONS:-read place run}
DISTRICTS=5000
# The GeoPackage and Shapefile copies are made with 'stocktake convert',
# which refuses (by design) swapped latitude/longitude, and a Point among
# polygons for a shapefile (one shape type a file): the benchmark town
# leaves those two faults out (0.3 % of the buildings).
OMIT=point,swapped
PY=/usr/bin/python3
TIME=/usr/bin/time
DATA=bench/data/town-n$N-s$SEED
failed=0

[ -x "$ST" ] || { echo "bench: no stocktake binary at $ST (make first)" >&2; exit 2; }
[ -x "$TIME" ] || { echo "bench: $TIME missing (scripts/deps.sh installs 'time')" >&2; exit 2; }
[ -x "$PY" ] || { echo "bench: $PY missing" >&2; exit 2; }
case $N in ''|*[!0-9]*) echo "bench: BENCH_N must be a number" >&2; exit 2 ;; esac
case $RUNS in ''|*[!0-9]*|0) echo "bench: BENCH_RUNS must be 1 or more" >&2; exit 2 ;; esac

note() { echo "bench: $*" >&2; }
problem() { echo "bench: $*" >&2; failed=1; }

# ---- data -----------------------------------------------------------------

# The stamp names everything the data depends on; data with another stamp is
# made again.
stamp() {
    printf 'gen %s\nn %s seed %s districts %s omit %s\n' \
        "$(sha256sum bench/gen_town.py | cut -d' ' -f1)" "$N" "$SEED" \
        "$DISTRICTS" "$OMIT"
}

make_town() {
    if [ -f "$DATA/stamp" ] && [ "$(stamp)" = "$(cat "$DATA/stamp")" ] &&
            [ -f "$DATA/buildings_osm.geojsonl" ]; then
        return 0
    fi
    want=$(stamp)       # taken first: the generator it names made the data
    rm -rf "$DATA"
    mkdir -p "$DATA" || return 1
    note "generating $N footprints into $DATA/ (once; about a minute for 1M)"
    "$PY" bench/gen_town.py --seed "$SEED" --n "$N" --districts "$DISTRICTS" \
        --format geojsonl --no-cadastre --no-truth --omit "$OMIT" \
        --out "$DATA" || return 1
    echo "$want" >"$DATA/stamp"
}

# converted EXT: make $DATA/buildings_osm.EXT with stocktake convert once.
converted() {
    out=$DATA/buildings_osm.$1
    [ -f "$out" ] && return 0
    note "converting to $out"
    if ! "$ST" convert -q "$DATA/buildings_osm.geojsonl" "$out" 2>"$DATA/convert_$1.err"; then
        problem "convert to .$1 failed: $(head -n 1 "$DATA/convert_$1.err")"
        rm -f "$out"
        return 1
    fi
}

# ---- measuring ------------------------------------------------------------

# timed_runs OUTFILE CMD...: run CMD $RUNS times (stdout to OUTFILE); print
# "median_seconds peak_rss_kb all_seconds" of the run with the median time.
timed_runs() {
    outfile=$1; shift
    : >"$DATA/times"
    i=0
    while [ "$i" -lt "$RUNS" ]; do
        if ! "$TIME" -f '%e %M' -o "$DATA/time1" "$@" >"$outfile" 2>"$DATA/run.err"; then
            problem "'$*' failed: $(head -n 1 "$DATA/run.err")"
            return 1
        fi
        tail -n 1 "$DATA/time1" >>"$DATA/times"
        i=$((i + 1))
    done
    sort -n "$DATA/times" | awk -v n="$RUNS" '
        { t[NR] = $1; m[NR] = $2; all = all (NR > 1 ? " " : "") $1 }
        END { k = int((n + 1) / 2); print t[k], m[k], all }'
}

# file_mb PATH...: total size in MB of the files given (missing ones skipped).
file_mb() {
    du -cb "$@" 2>/dev/null | tail -n 1 | awk '{ printf "%.1f", $1 / 1e6 }'
}

# ---- section: read --------------------------------------------------------
# stocktake inspect reads every feature and profiles every field: the cost
# of reading a layer once, in each input format.
section_read() {
    echo
    echo "== read: stocktake inspect, $N features, median of $RUNS runs"
    printf '%-10s %10s %9s %13s %12s  %s\n' format "size MB" "median s" \
        "features/s" "peak RSS MB" "runs (s)"
    for fmt in geojsonl gpkg shp; do
        f=$DATA/buildings_osm.$fmt
        case $fmt in
            geojsonl) size=$(file_mb "$f") ;;
            gpkg) converted gpkg || { printf '%-10s %s\n' gpkg "not measured (convert failed)"; continue; }
                  size=$(file_mb "$f") ;;
            shp)  converted shp || { printf '%-10s %s\n' shp "not measured (convert failed)"; continue; }
                  size=$(file_mb "$DATA/buildings_osm.shp" "$DATA/buildings_osm.shx" \
                         "$DATA/buildings_osm.dbf" "$DATA/buildings_osm.prj" \
                         "$DATA/buildings_osm.cpg") ;;
        esac
        res=$(timed_runs "$DATA/inspect_$fmt.json" "$ST" inspect -q --json "$f") ||
            { printf '%-10s %s\n' "$fmt" "not measured (inspect failed)"; continue; }
        # the count inspect reports must be the generator's
        got=$("$PY" -c 'import json,sys; print(json.load(open(sys.argv[1]))["layers"][0]["features"])' \
              "$DATA/inspect_$fmt.json" 2>/dev/null)
        [ "$got" = "$N" ] || problem "$fmt: inspect counted '$got' features, expected $N"
        echo "$res" | awk -v fmt="$fmt" -v size="$size" -v n="$N" '{
            runs = $3; for (i = 4; i <= NF; i++) runs = runs " " $i
            fps = ($1 > 0) ? sprintf("%.0f", n / $1) : "inf"
            printf "%-10s %10s %9.2f %13s %12.1f  %s\n", fmt, size, $1, fps, $2 / 1024, runs }'
    done
}

# ---- section: place ----------------------------------------------------------
# 'stocktake run' on the GeoJSONL town with its 5,000 districts (key
# district_id, region region_id), the reference counts, and a bench rule
# pack: starter.rules for the tags, inline defaults by district pattern,
# region and everywhere, a learned storeys default, and a defaults table of
# 15,000 rows (one material distribution per district, generated here with
# a fixed seed); defaults drawn with --seed 1. The figures are the run's own
# --timings of the stages this section is about (median of BENCH_RUNS per
# stage), the whole run's wall time and peak RSS.

place_rules() {
    dir=$DATA/place
    [ -f "$dir/bench.rules" ] && [ -f "$dir/defaults.csv" ] && return 0
    mkdir -p "$dir" || return 1
    "$PY" - "$DATA/reference_counts.csv" "$dir/defaults.csv" <<'PYEOF' || return 1
import csv, random, sys
keys = [r[0] for r in list(csv.reader(open(sys.argv[1], newline="")))[1:] if r]
rng = random.Random(1)                 # fixed: the table is the same every time
with open(sys.argv[2], "w", newline="") as out:
    out.write("scope,key,field,value,share,occupancy,note\n")
    for k in keys:
        a = rng.randint(20, 60)
        b = rng.randint(10, 100 - a - 5)
        for v, sh in (("URM", a), ("RM", b), ("RC", 100 - a - b)):
            out.write(f"district,{k},material,{v},{sh},RES,bench (invented)\n")
PYEOF
    {
        echo "include \"$(pwd)/rules/starter.rules\""
        echo "defaults"
        echo "  in district QM00* when occupancy = RES set material URM 60%, RM 30%, TMB 10%"
        echo "  in region R0* set storeys 1 50%, 2 30%, 3 20%"
        echo "  everywhere set occupancy RES"
        echo "  everywhere set material RM"
        echo "  table \"defaults.csv\""
        echo "  learn storeys per district from 30 buildings"
        echo "end"
    } >"$dir/bench.rules"
}

section_place() {
    echo
    echo "== place and defaults: stocktake run, $N features, $DISTRICTS districts," \
        "median of $RUNS runs"
    place_rules || { problem "cannot write the bench rules"; return; }
    printf '%-8s %12s %9s %13s %11s %9s %9s %12s\n' threads "districts s" "place s" \
        "placed/s" "defaults s" "audit s" "run s" "peak RSS MB"
    for j in 1 2; do
        : >"$DATA/place_times"
        i=0
        while [ "$i" -lt "$RUNS" ]; do
            "$TIME" -f '%e %M' -o "$DATA/time1" "$ST" run -q --timings -j "$j" \
                -r "$DATA/place/bench.rules" --districts "$DATA/districts.geojson" \
                --district-key district_id --region-key region_id \
                --reference "$DATA/reference_counts.csv" --fill draw --seed 1 \
                -o "$DATA/place/out.gpkg" "$DATA/buildings_osm.geojsonl" 2>"$DATA/place.err"
            rc=$?   # 1: the gate failed, the run is complete
            if [ "$rc" -gt 1 ]; then
                problem "place run (-j $j) failed: $(head -n 1 "$DATA/place.err")"
                break
            fi
            # one line per run: districts place defaults audit wall rss
            awk -v t="$(tail -n 1 "$DATA/time1")" '
                /^districts / { d = $2 } /^place / { p = $2 }
                /^defaults / { f = $2 } /^audit / { a = $2 }
                END { print d, p, f, a, t }' "$DATA/place.err" >>"$DATA/place_times"
            i=$((i + 1))
        done
        [ "$i" -eq "$RUNS" ] || continue
        awk -v n="$N" -v j="$j" -v runs="$RUNS" '
            { for (c = 1; c <= 6; c++) v[c, NR] = $c }
            function median(c,   i, k, t, tmp) {
                for (i = 1; i <= runs; i++) tmp[i] = v[c, i]
                for (i = 2; i <= runs; i++)
                    for (k = i; k > 1 && tmp[k - 1] > tmp[k]; k--) {
                        t = tmp[k]; tmp[k] = tmp[k - 1]; tmp[k - 1] = t
                    }
                return tmp[int((runs + 1) / 2)]
            }
            END {
                p = median(2)
                printf "%-8s %12.3f %9.3f %13.0f %11.3f %9.3f %9.1f %12.1f\n", j, median(1), p,
                       (p > 0 ? n / p : 0), median(3), median(4), median(5), median(6) / 1024
            }' "$DATA/place_times"
    done
    rm -f "$DATA/place/out.gpkg"
}

# ---- section: run ------------------------------------------------------------
# The whole job (stocktake run with bench/bench.rules, the districts and the
# reference counts) at 100,000 and 1,000,000 footprints, GeoPackage and
# GeoJSONL: per-stage wall, CPU, footprints/s and peak memory from the run's
# own --timings, end to end from GNU time, and the floor (bench/floor.c: the
# bare read-validate-index loop). bench/stages.sh does the work; its sizes
# are BENCH_RUN_N (default "100000 1000000"). The peer comparison is
# 'make bench-compare' (bench/compare.sh), not part of this target.
section_run() {
    echo
    echo "== run: the whole job, per stage (bench/stages.sh)"
    STAGES_N=${BENCH_RUN_N:-100000 1000000} BENCH_SEED=$SEED BENCH_RUNS=$RUNS \
        STOCKTAKE=$ST sh bench/stages.sh || problem "bench/stages.sh failed"
}

# ---- main -------------------------------------------------------------------
echo "stocktake benchmarks: $("$ST" --version 2>/dev/null | head -n 1)"
echo "machine: $(nproc) cores, $(awk '/MemTotal/ { printf "%.0f GB", $2 / 1048576 }' /proc/meminfo)"
if ! make_town; then
    echo "bench: could not make the benchmark town" >&2
    exit 1
fi
echo "data: $DATA/ (invented town of Quellamar: $N footprints, $DISTRICTS districts," \
    "bench/gen_town.py seed $SEED, the demo's faults without '$OMIT')"
for s in $SECTIONS; do
    case $s in
        read) section_read ;;
        place) section_place ;;
        run) section_run ;;
        *) problem "unknown section '$s'" ;;
    esac
done
[ "$failed" -eq 0 ] || { echo; echo "bench: some measurements failed (see above)"; }
exit "$failed"
