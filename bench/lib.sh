# bench/lib.sh -- shell functions shared by bench/stages.sh and
# bench/compare.sh (sourced, not run). Expects ST (the stocktake binary),
# SEED, PY (/usr/bin/python3) and TIME (/usr/bin/time) to be set, and the
# current folder to be the checkout.
#
# Data layout (the same as bench/run.sh's): bench/data/town-nN-sS/ holds
# the invented town of bench/gen_town.py with N crowd-mapped footprints as
# GeoJSONL, 5,000 districts and the reference counts, plus a GeoPackage
# copy made with 'stocktake convert'. Outputs go to bench/data/out/.

failed=0
note() { echo "bench: $*" >&2; }
problem() { echo "bench: $*" >&2; failed=1; }

machine() {
    note "machine: $(nproc) cores, $(grep -m1 'model name' /proc/cpuinfo | cut -d: -f2 |
        sed 's/^ //'), load $(cut -d' ' -f1-3 /proc/loadavg)"
}

# stamp N: what the data of size N depends on, as bench/run.sh writes it;
# data with another stamp is made again.
stamp() {
    printf 'gen %s\nn %s seed %s districts %s omit %s\n' \
        "$(sha256sum bench/gen_town.py | cut -d' ' -f1)" "$1" "$SEED" 5000 point,swapped
}

# town N: print the data folder of size N, making what is missing (the
# same files, options and stamp as bench/run.sh's make_town).
town() {
    d=bench/data/town-n$1-s$SEED
    if [ ! -f "$d/stamp" ] || [ "$(stamp "$1")" != "$(cat "$d/stamp")" ] ||
            [ ! -f "$d/buildings_osm.geojsonl" ]; then
        [ -f bench/gen_town.py ] || { problem "no $d and no bench/gen_town.py"; return 1; }
        note "generating $1 footprints into $d/ (once)"
        rm -rf "$d"
        mkdir -p "$d" &&
        "$PY" bench/gen_town.py --seed "$SEED" --n "$1" --districts 5000 \
            --format geojsonl --no-cadastre --no-truth --omit point,swapped \
            --out "$d" >&2 || { problem "generator failed"; return 1; }
        stamp "$1" >"$d/stamp"
    fi
    if [ ! -f "$d/buildings_osm.gpkg" ]; then
        note "converting $d/buildings_osm.geojsonl to GeoPackage (once)"
        "$ST" convert -q "$d/buildings_osm.geojsonl" "$d/buildings_osm.gpkg" >&2 ||
            { problem "convert to GeoPackage failed"; return 1; }
    fi
    echo "$d"
}

# place_opts DATA: --districts/--reference when this build's run has them.
place_opts() {
    if "$ST" run --help 2>&1 | grep -q -- '--districts'; then
        echo "--districts $1/districts.geojson --district-key district_id" \
            "--region-key region_id --reference $1/reference_counts.csv"
    fi
}

# timed OUT CMD...: GNU time's "wall user sys maxrss_kB" into OUT.t, the
# command's stderr into OUT.err.
timed() {
    f=$1; shift
    "$TIME" -o "$f.t" -f "%e %U %S %M" "$@" 2>"$f.err"
}

# median_run PREFIX RUNS: the number r (1..RUNS) of the run PREFIXr whose
# wall time is the median.
median_run() {
    r=1
    while [ "$r" -le "$2" ]; do
        echo "$(cut -d' ' -f1 "$1$r.t") $r"
        r=$((r + 1))
    done | sort -n | sed -n "$(( ($2 + 1) / 2 ))p" | cut -d' ' -f2
}

# The per-stage lines of a `run --timings` (or peer.py) stderr.
stage_lines() {
    grep -E '^(stage|rules|districts|read|footprints?|neighbours|place|map-derive-check|defaults|findings|audit|gate|summary|write|total) ' "$1"
}
