#!/bin/sh
# The quality report of the demo run, checked against outside references:
# report.json against its JSON Schema (python3-jsonschema) and recomputed
# from the output GeoPackage (sqlite3, hashlib); report.html parsed by
# Python's html.parser (well-formed, nothing outside itself, one map shape
# per district) and rendered by headless Chromium (Debian's chromium):
# the DOM after the script ran, no console error, a screenshot; then driven
# over the DevTools protocol (tests/ref/report_browser.py): sorting the
# district table, switching the map's shading, no script exception.
# Skips (77) while `run` has no --report, and, after every other check,
# while it has no --districts (the map needs them).
. "$ST_TESTS_ROOT/e2e/lib.sh"
CHECK="$PY $ST_TESTS_ROOT/ref/report_check.py"
cd "$ROOT" || fail "no checkout at $ROOT"

help=$("$STOCKTAKE" run --help 2>&1)
case $help in *--report*) ;; *) skip "run has no --report yet" ;; esac
has() { case $help in *"$1"*) return 0 ;; esac; return 1; }

set -- -q -o "$TMP/inv.gpkg" --report "$TMP/rep"
[ -f rules/demo.rules ] && set -- "$@" -r rules/demo.rules
if has --districts; then
    set -- "$@" --districts samples/districts.geojson --district-key district_id \
        --region-key region_id --reference samples/reference_counts.csv
fi
has --seed && set -- "$@" --seed 73
"$STOCKTAKE" run "$@" samples/buildings_osm.geojson samples/buildings_cadastre.geojson \
    2>"$TMP/run.err"
rc=$?
[ "$rc" -le 1 ] || { cat "$TMP/run.err" >&2; fail "demo run exited $rc"; }
J=$TMP/rep/report.json
H=$TMP/rep/report.html
[ -f "$J" ] && [ -f "$H" ] || fail "the report folder lacks report.json or report.html"
[ "$(ls -A "$TMP/rep" | wc -l)" -eq 2 ] || fail "temporary files left in the report folder"

$CHECK schema "$J" docs/report.schema.json || fail "report.json breaks its schema"
$CHECK recompute "$J" "$TMP/inv.gpkg" || fail "report.json disagrees with the GeoPackage"
$CHECK html "$H" "$J" || fail "report.html"
# the gate's verdict in the report matches the exit code
failed=$($PY -c "import json,sys; print(int(json.load(open(sys.argv[1]))['gate']['failed']))" "$J")
[ "$failed" -eq "$rc" ] || fail "report.json gate.failed is $failed, the exit code $rc"

# ---- a real browser --------------------------------------------------------
command -v chromium >/dev/null 2>&1 || fail "chromium is missing (scripts/deps.sh installs it)"
# chrome HTML [ARGS...]: headless Chromium on file HTML, its log in $TMP/chrome.log
chrome() {
    page=$1; shift
    timeout 120 chromium --headless --no-sandbox --disable-gpu --disable-quic --no-first-run \
        --disable-background-networking --disable-component-update --disable-sync \
        --disable-dev-shm-usage --user-data-dir="$(mktemp -d "$TMP/chrome.XXXXXX")" \
        --enable-logging=stderr --v=0 "$@" "file://$page" 2>"$TMP/chrome.log"
}
# console errors are logged as CONSOLE lines ("Uncaught ...")
console_errors() { grep -E 'CONSOLE|Uncaught' "$TMP/chrome.log"; }

# the harness itself: a page with a deliberate script error must be caught
cp "$H" "$TMP/broken.html"
printf '<script>no_such_function();</script>\n' >>"$TMP/broken.html"
chrome "$TMP/broken.html" --dump-dom >/dev/null
console_errors >/dev/null || fail "the console check does not see a deliberate script error"

chrome "$H" --dump-dom >"$TMP/dom.html" || fail "chromium --dump-dom failed"
if console_errors; then fail "report.html logs to the console (script error)"; fi
$CHECK dom "$TMP/dom.html" "$J" || fail "report.html in Chromium"
chrome "$H" --screenshot="$TMP/shot.png" --window-size=1280,2000 --hide-scrollbars ||
    fail "chromium --screenshot failed"
if console_errors; then fail "report.html logs to the console while drawn"; fi
$CHECK png "$TMP/shot.png" 1280 || fail "screenshot"

has --districts || skip "report checked without districts; run has no --districts yet"
$PY -c "import json,sys; sys.exit(sum(d['mapped'] for d in json.load(open('$J'))['districts']) == 0)" ||
    fail "the demo districts are not on the map"
$PY "$ST_TESTS_ROOT/ref/report_browser.py" "$H" || fail "report.html used in Chromium"
exit 0
