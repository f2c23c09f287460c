#!/bin/sh
# scripts/demo.sh -- the demo scenario (samples/: the invented town of
# Quellamar) through stocktake; 'make demo' runs it.
#
# Input:   $STOCKTAKE, the binary (default build/stocktake); samples/.
#          $DEMO_OUT, the output folder (default out/demo).
# Output:  in $DEMO_OUT: layer profiles (text and JSON), conversions of the
#          sample layers to GeoPackage, Shapefile, GeoJSON and CSV, and the
#          run's inventory; on stdout one line per step and the files it
#          wrote, plus the tools' own summaries. Logs of every step in
#          $DEMO_OUT/log/; $DEMO_OUT/log/FAILED lists the failed steps.
# Errors:  every step runs even when one fails; a step "fails" when its
#          exit code is not the one expected. Exit 1 if any step failed.
#
# Sections: 1 inspect, 2 convert, 3 run. Section 3 is where the demo grows:
# it passes the run the options its --help offers (districts, reference
# counts, report, seed) and the demo rule pack once it exists.
set -u
cd "$(dirname "$0")/.." || exit 2
ST=${STOCKTAKE:-build/stocktake}
S=samples
OUT=${DEMO_OUT:-out/demo}
DEMO_RULES=${DEMO_RULES:-rules/demo.rules}   # the demo's pack (rules/README.md)

[ -x "$ST" ] || { echo "demo: no stocktake binary at $ST (make first)" >&2; exit 2; }
[ -f "$S/manifest.json" ] || { echo "demo: $S/ is missing" >&2; exit 2; }
# clear an earlier demo's output, never a folder the demo did not make
if [ -d "$OUT" ] && [ -n "$(ls -A "$OUT")" ] && [ ! -d "$OUT/log" ]; then
    echo "demo: $OUT is not empty and not an earlier demo's output" >&2
    exit 2
fi
rm -rf "$OUT"
mkdir -p "$OUT/log" || exit 2

steps=0
failed=0

# logged CMD...: run CMD with stdout and stderr in the log folder; the exit
# code is left in $rc, the logs in $log.out and $log.err.
logged() {
    steps=$((steps + 1))
    log=$OUT/log/$(printf '%02d' "$steps")
    "$@" >"$log.out" 2>"$log.err"
    rc=$?
}

# verdict ok|fail LABEL: one line per step; a failure shows its stderr.
verdict() {
    if [ "$1" = ok ]; then
        echo "  ok      $2"
    else
        echo "  FAILED  $2"
        sed -n '1,6s/^/          /p' "$log.err"
        echo "$log.err $2" >>"$OUT/log/FAILED"
        failed=$((failed + 1))
    fi
}

# step 'RC|RC' LABEL CMD...: logged CMD, ok when it exits with one of the
# expected codes.
step() {
    want=$1; label=$2; shift 2
    logged "$@"
    case "|$want|" in
        *"|$rc|"*) verdict ok "$label" ;;
        *) verdict fail "$label (exit $rc, expected $want)" ;;
    esac
}

# wrote FILE...: name each file that exists, with its size.
wrote() {
    for f in "$@"; do
        [ -f "$f" ] && printf '          wrote %s (%s bytes)\n' "$f" "$(wc -c <"$f" | tr -d ' ')"
    done
    return 0
}

echo "stocktake demo: Quellamar, an invented town (see $S/README.md)"
echo "binary: $ST; output: $OUT/"

# ---------------------------------------------------------------------------
echo
echo "== 1. inspect: what is in each sample layer"
for layer in buildings_osm buildings_cadastre districts; do
    f=$S/$layer.geojson
    step 0 "inspect $f" "$ST" inspect -q "$f"
    cp "$log.out" "$OUT/inspect_$layer.txt"
    # the layer's summary and one line per field; the full profile (with
    # each field's most common values) is in the file
    sed -n '1,/^  fields /s/^/    /p' "$log.out"
    grep '^  field ' "$log.out" | sed 's/^/  /'
    wrote "$OUT/inspect_$layer.txt"
done
step 0 "inspect --json (all three layers)" "$ST" inspect -q --json \
    "$S/buildings_osm.geojson" "$S/buildings_cadastre.geojson" "$S/districts.geojson"
cp "$log.out" "$OUT/inspect.json"
wrote "$OUT/inspect.json"

# ---------------------------------------------------------------------------
echo
echo "== 2. convert: the sample layers to GeoPackage, Shapefile, GeoJSON, CSV"
# convert_to LAYER_FILE BASE: convert to BASE.gpkg, .shp, .geojson, .csv.
# A clean layer must convert. A raw layer may instead be refused: convert
# checks strictly, exits 2 and writes nothing, with a diagnostic that names
# the feature ('run' sets such features aside instead). Any other outcome,
# a refusal without a feature named included, is a failure.
convert_to() {
    src=$1; base=$2; raw=$3
    for ext in gpkg shp geojson csv; do
        if [ "$raw" = raw ]; then
            label="convert $src -> $base.$ext"
            logged "$ST" convert -q "$src" "$base.$ext"
            if [ "$rc" -eq 0 ]; then
                verdict ok "$label"
            elif [ "$rc" -eq 2 ] && grep -q 'feature [0-9]' "$log.err" &&
                    [ ! -e "$base.$ext" ]; then
                verdict ok "$label: refused, nothing written:"
                sed -n '1s/^/            /p' "$log.err"
            else
                verdict fail "$label (exit $rc; a refusal must name a feature)"
            fi
        else
            step 0 "convert $src -> $base.$ext" "$ST" convert -q "$src" "$base.$ext"
        fi
        case $ext in
            shp) wrote "$base.shp" "$base.shx" "$base.dbf" "$base.prj" "$base.cpg" ;;
            *)   wrote "$base.$ext" ;;
        esac
    done
}
convert_to "$S/districts.geojson" "$OUT/districts" clean
# the two footprint layers are raw: the crowd layer has features with
# latitude and longitude swapped, the cadastre unclosed rings
# (samples/faults.csv)
convert_to "$S/buildings_cadastre.geojson" "$OUT/buildings_cadastre" raw
convert_to "$S/buildings_osm.geojson" "$OUT/buildings_osm" raw

# ---------------------------------------------------------------------------
echo
echo "== 3. run: check, repair and de-duplicate both layers together"
# >>> Extend the demo here. The run gets each option as soon as its --help
# >>> lists it, and the demo rule pack once $DEMO_RULES exists; add new
# >>> options the same way, and new outputs to the 'wrote' line below.
run_help=$("$ST" run --help 2>&1)
has() { case $run_help in *"$1"*) return 0 ;; esac; return 1; }
set -- -o "$OUT/inventory.gpkg"
[ -f "$DEMO_RULES" ] && set -- "$@" -r "$DEMO_RULES"
has --districts && set -- "$@" --districts "$S/districts.geojson"
has --district-key && set -- "$@" --district-key district_id
has --region-key && set -- "$@" --region-key region_id
has --reference && set -- "$@" --reference "$S/reference_counts.csv"
has --fill && set -- "$@" --fill draw
has --seed && set -- "$@" --seed 73
has --report && set -- "$@" --report "$OUT/report"
echo "  stocktake run $* $S/buildings_osm.geojson $S/buildings_cadastre.geojson"
# exit 1 means done but the quality gate failed: a result, not an error
step '0|1' "run (exit 0: gate passed, 1: gate failed)" \
    "$ST" run "$@" "$S/buildings_osm.geojson" "$S/buildings_cadastre.geojson"
if [ "$rc" -le 1 ]; then
    sed 's/^/    /' "$log.err"
    sed 's/^/    /' "$log.out"
fi
wrote "$OUT/inventory.gpkg"
[ -d "$OUT/report" ] && wrote "$OUT/report"/*
# the inventory's buildings are clean: they convert to every format
[ -f "$OUT/inventory.gpkg" ] &&
    convert_to "$OUT/inventory.gpkg:buildings" "$OUT/inventory_buildings" clean
# <<< end of the run section

# ---------------------------------------------------------------------------
echo
if [ "$failed" -eq 0 ]; then
    echo "demo: $steps steps, all as expected; outputs in $OUT/"
    exit 0
fi
echo "demo: $failed of $steps steps failed (logs in $OUT/log/)"
exit 1
