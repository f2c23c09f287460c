#!/bin/sh
# tests/e2e/test_hostile_geojson.sh -- hostile GeoJSON inputs through
# inspect, convert and run: truncated and bit-flipped files, wrong magic,
# absurd nesting, sizes and numbers, invalid UTF-8, NUL bytes. Every case
# ends within 60 s with exit 2 and a message naming the file (or goes on
# with a finding), leaves no output or temporary file, and the input is
# byte-identical afterwards (tests/e2e/hostile.sh). A run that goes on is
# checked for balance with GDAL (tests/e2e/balance.py).
. "$ST_TESTS_ROOT/e2e/lib.sh"
. "$ST_TESTS_ROOT/e2e/hostile.sh"

SRC=$DATA/cli/marrowick.geojson
IN=$TMP/in
mkdir -p "$IN"
BAL="$PY $ST_TESTS_ROOT/e2e/balance.py"

# all_commands WANT PATTERN FILE: inspect, convert and run on FILE.
# $BALOPT: --no-values for bit-flipped inputs (see balance.py).
BALOPT=""
all_commands() {
    h_run "$1" "$2" "$STOCKTAKE" inspect -q "$3"
    h_run "$1" "$2" "$STOCKTAKE" convert -q "$3" "$HOUT/out.geojson"
    rm -rf "$HOUT"; mkdir -p "$HOUT"
    h_run "$1" "$2" "$STOCKTAKE" run -q -o "$HOUT/inv.geojson" "$3"
    if [ "$H_RC" -le 1 ]; then
        $BAL $BALOPT "$HOUT/inv.geojson" "$3" >"$TMP/bal" 2>&1 || { cat "$TMP/bal" >&2; h_fail "balance"; }
    fi
    rm -rf "$HOUT"; mkdir -p "$HOUT"
}

# ---- truncated at several points -----------------------------------------------------
for pct in 1 10 33 50 75 99; do
    truncate_to "$SRC" $pct "$IN/cut$pct.geojson"
    h_case "geojson truncated to $pct%" "$IN/cut$pct.geojson"
    all_commands 2 "cut$pct.geojson" "$IN/cut$pct.geojson"
done
: >"$IN/empty.geojson"
h_case "geojson empty file" "$IN/empty.geojson"
all_commands 2 "empty.geojson" "$IN/empty.geojson"

# ---- bit flips: the run may go on (a flipped digit is still JSON) --------------------
BALOPT=--no-values
for seed in 1 2 3 4 5 6 7 8 9 10 11 12; do
    flip_bits "$SRC" "$seed" 4 "$IN/flip$seed.geojson"
    h_case "geojson 4 bits flipped (seed $seed)" "$IN/flip$seed.geojson"
    all_commands any "flip$seed.geojson" "$IN/flip$seed.geojson"
done

BALOPT=""

# ---- wrong magic: other formats under a .geojson name ----------------------------------
printf '\211PNG\r\n\032\n\000\000\000\rIHDR' >"$IN/png.geojson"
printf 'SQLite format 3\000' >"$IN/sqlite.geojson"
head -c 100 /dev/zero >"$IN/zeros.geojson"
printf '\357\273\277\377\376{"type":"FeatureCollection"' >"$IN/bom.geojson"
for f in png sqlite zeros bom; do
    h_case "geojson wrong magic ($f)" "$IN/$f.geojson"
    all_commands 2 "$f.geojson" "$IN/$f.geojson"
done

# ---- deeply nested JSON ------------------------------------------------------------------
$PY - "$IN" <<'PY'
import sys
d = sys.argv[1]
open(d + "/nest_props.geojson", "w").write(
    '{"type":"FeatureCollection","features":[{"type":"Feature","properties":{"a":'
    + "[" * 200000 + "]" * 200000 + '},"geometry":null}]}')
open(d + "/nest_coords.geojson", "w").write(
    '{"type":"FeatureCollection","features":[{"type":"Feature","properties":{},'
    '"geometry":{"type":"Polygon","coordinates":' + "[" * 100000 + "0,0" + "]" * 100000 + "}}]}")
open(d + "/nest_root.geojson", "w").write("[" * 1000000)
PY
for f in nest_props nest_coords; do
    h_case "geojson deep nesting ($f)" "$IN/$f.geojson"
    all_commands 2 "$f.geojson.*(nest|deep|depth|limit)" "$IN/$f.geojson"
done
h_case "geojson deep nesting (a million '[')" "$IN/nest_root.geojson"
all_commands 2 "nest_root.geojson" "$IN/nest_root.geojson"

# ---- absurd sizes --------------------------------------------------------------------------
$PY - "$IN" <<'PY'
import sys
d = sys.argv[1]
head = '{"type":"FeatureCollection","features":[{"type":"Feature",'
poly = '"geometry":{"type":"Polygon","coordinates":[[[0,0],[1,0],[1,1],[0,0]]]}}'
open(d + "/long_string.geojson", "w").write(
    head + '"properties":{"name":"' + "x" * (3 << 20) + '"},' + poly + "]}")
open(d + "/long_number.geojson", "w").write(
    head + '"properties":{"n":' + "9" * (2 << 20) + "}," + poly + "]}")
open(d + "/many_fields.geojson", "w").write(
    head + '"properties":{' + ",".join('"f%d":1' % i for i in range(12000)) + "}," + poly + "]}")
open(d + "/long_name.geojson", "w").write(
    head + '"properties":{"' + "k" * 100000 + '":1},' + poly + "]}")
PY
for f in long_string long_number many_fields long_name; do
    h_case "geojson absurd size ($f)" "$IN/$f.geojson"
    all_commands 2 "$f.geojson.*(limit|long|too many|exceed)" "$IN/$f.geojson"
done

# ---- huge and non-finite coordinates: the run goes on and sets them aside; -----------
# ---- convert (strict coordinates) refuses them -----------------------------------------
for v in 1e308 -1e308 1e400 1e-400 123456789012345678901234567890; do
    f=$IN/coord_$(echo "$v" | tr -c 'a-z0-9' '_').geojson
    printf '{"type":"FeatureCollection","features":[{"type":"Feature","properties":{"n":1},"geometry":{"type":"Polygon","coordinates":[[[%s,0],[1,0],[1,1],[%s,0]]]}},{"type":"Feature","properties":{"n":2},"geometry":{"type":"Polygon","coordinates":[[[3,3],[3.001,3],[3.001,3.001],[3,3.001],[3,3]]]}}]}\n' "$v" "$v" >"$f"
    h_case "geojson coordinate $v" "$f"
    h_run any "$(basename "$f")" "$STOCKTAKE" convert -q "$f" "$HOUT/out.geojson"
    rm -rf "$HOUT"; mkdir -p "$HOUT"
    # An infinite coordinate (1e400 overflows) is set aside with its
    # geometry as read, which GeoJSON cannot hold: that run stops (exit 2,
    # nothing written) naming the feature; the others go on.
    h_run any "infinite" "$STOCKTAKE" run -q -o "$HOUT/inv.geojson" "$f"
    if [ "$H_RC" -le 1 ]; then
        $BAL "$HOUT/inv.geojson" "$f" >"$TMP/bal" 2>&1 || { cat "$TMP/bal" >&2; h_fail "balance"; }
    elif [ "$v" != 1e400 ]; then
        h_fail "run stopped on a finite coordinate $v"
    fi
    rm -rf "$HOUT"; mkdir -p "$HOUT"
done

# ---- broken rings are set aside as read, in every output format ---------------------------
# (a two-point ring made a CSV run stop: GEOS cannot build it for the WKT).
# Shapefile output is left out: its set_aside layer cannot be declared yet
# (docs/reliability.md, open points).
printf '{"type":"FeatureCollection","features":[{"type":"Feature","properties":{"n":1},"geometry":{"type":"Polygon","coordinates":[[[0,0],[0.001,0],[0.001,0.001],[0,0.001]]]}},{"type":"Feature","properties":{"n":2},"geometry":{"type":"Polygon","coordinates":[[[0,0],[0.001,0]]]}},{"type":"Feature","properties":{"n":3},"geometry":{"type":"MultiPolygon","coordinates":[[[[5,5]]],[[[6,6],[6.001,6],[6.001,6.001],[6,6]]]]}}]}\n' >"$IN/rings.geojson"
for ext in gpkg geojson geojsonl csv; do
    h_case "geojson unclosed and two-point rings, output .$ext" "$IN/rings.geojson"
    h_run go "" "$STOCKTAKE" run -q -o "$HOUT/inv.$ext" "$IN/rings.geojson"
    case $ext in csv)
        grep -q '"POLYGON ((0 0, 0.001 0))"' "$HOUT/inv.set_aside.csv" ||
            h_fail "the two-point ring is not in set_aside as read" ;; *)
        $BAL "$HOUT/inv.$ext" "$IN/rings.geojson" >"$TMP/bal" 2>&1 || { cat "$TMP/bal" >&2; h_fail "balance"; } ;;
    esac
    rm -rf "$HOUT"; mkdir -p "$HOUT"
done

# ---- invalid UTF-8 and NUL bytes in attributes: kept, replaced by U+FFFD ------------------
printf '{"type":"FeatureCollection","features":[{"type":"Feature","id":"a\377b","properties":{"name":"caf\351 \300\200 \355\240\200 end","k\377":"v"},"geometry":{"type":"Polygon","coordinates":[[[0,0],[0.001,0],[0.001,0.001],[0,0]]]}}]}\n' >"$IN/utf8.geojson"
h_case "geojson invalid UTF-8 in attributes" "$IN/utf8.geojson"
h_run go "" "$STOCKTAKE" run -q -o "$HOUT/inv.geojson" "$IN/utf8.geojson"
$PY - "$HOUT/inv.geojson" <<'PY' || h_fail "output not valid UTF-8 or value lost"
import sys
t = open(sys.argv[1], "rb").read().decode("utf-8")   # strict: raises on invalid
assert "caf\ufffd" in t and " end" in t, t[:300]
PY
printf '{"type":"FeatureCollection","features":[{"type":"Feature","properties":{"name":"a\\u0000b"},"geometry":null}]}\n' >"$IN/nul_escape.geojson"
printf '{"type":"FeatureCollection","features":[{"type":"Feature","properties":{"name":"a\000b"},"geometry":null}]}\n' >"$IN/nul_raw.geojson"
# An escaped NUL cannot live in a C string: it becomes U+FFFD, it must not
# cut the value short (it did: "a\u0000b" came out as "a").
h_case "geojson NUL escaped in a string" "$IN/nul_escape.geojson"
h_run go "" "$STOCKTAKE" run -q -o "$HOUT/inv.geojson" "$IN/nul_escape.geojson"
$PY - "$HOUT/inv.set_aside.geojson" <<'PY' || h_fail "escaped NUL cut the value short"
import json, sys
p = json.load(open(sys.argv[1], encoding="utf-8"))["features"][0]["properties"]
assert p["name"] == "a\ufffdb", p
PY
rm -rf "$HOUT"; mkdir -p "$HOUT"
h_case "geojson raw NUL byte" "$IN/nul_raw.geojson"
all_commands 2 "nul_raw.geojson" "$IN/nul_raw.geojson"

# ---- a file that is not a file -------------------------------------------------------------
mkdir -p "$IN/dir.geojson"
h_case "geojson path is a folder"
h_run 2 "dir.geojson" "$STOCKTAKE" inspect -q "$IN/dir.geojson"
h_run 2 "dir.geojson" "$STOCKTAKE" run -q -o "$HOUT/inv.geojson" "$IN/dir.geojson"
h_case "geojson missing file"
h_run 2 "nothere.geojson" "$STOCKTAKE" run -q -o "$HOUT/inv.geojson" "$IN/nothere.geojson"
h_done
