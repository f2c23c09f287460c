#!/bin/sh
# tests/e2e/test_hostile_shp.sh -- hostile Shapefiles through inspect,
# convert and run: truncated and bit-flipped .shp/.shx/.dbf, wrong magic
# numbers, absurd counts in headers (a ring count of 2^31, 2^31-1 points,
# record and file lengths, DBF record counts), a .dbf with fewer records
# than the .shp, NaN and huge coordinates, invalid UTF-8 in the DBF, a
# garbage or huge .prj, an unknown .cpg, missing sidecars. Every case ends
# within 60 s, exits 2 naming the file (or goes on with a finding and a
# balanced output), leaves no output, and the input files are unchanged
# (tests/e2e/hostile.sh). Broken copies are made by tests/e2e/shp_mangle.py
# from a Shapefile the project's own writer makes of the invented town.
. "$ST_TESTS_ROOT/e2e/lib.sh"
. "$ST_TESTS_ROOT/e2e/hostile.sh"

IN=$TMP/in
mkdir -p "$IN"
BAL="$PY $ST_TESTS_ROOT/e2e/balance.py"
MANGLE="$PY $ST_TESTS_ROOT/e2e/shp_mangle.py"
"$STOCKTAKE" convert -q "$DATA/cli/marrowick.geojson" "$TMP/town.shp" 2>/dev/null ||
    skip "Shapefile writer not built yet"
"$STOCKTAKE" inspect -q "$TMP/town.shp" >/dev/null 2>&1 || skip "Shapefile reader not built yet"

# files_of STEM: the sidecars that exist, for h_case.
files_of() { for e in shp shx dbf prj cpg; do [ -f "$1.$e" ] && printf '%s ' "$1.$e"; done; }

# all_commands WANT PATTERN STEM: inspect, convert and run on STEM.shp.
# $BALOPT: --no-values for bit-flipped inputs (see balance.py).
BALOPT=""
all_commands() {
    h_run "$1" "$2" "$STOCKTAKE" inspect -q "$3.shp"
    h_run "$1" "$2" "$STOCKTAKE" convert -q "$3.shp" "$HOUT/out.geojson"
    rm -rf "$HOUT"; mkdir -p "$HOUT"
    h_run "$1" "$2" "$STOCKTAKE" run -q -o "$HOUT/inv.geojson" "$3.shp"
    if [ "$H_RC" -le 1 ]; then
        $BAL $BALOPT "$HOUT/inv.geojson" "$3.shp" >"$TMP/bal" 2>&1 || { cat "$TMP/bal" >&2; h_fail "balance"; }
    fi
    rm -rf "$HOUT"; mkdir -p "$HOUT"
}

# one_case NAME WANT PATTERN MANGLE_CASE: a fresh folder per case, so a
# file appearing beside the input is seen.
one_case() {
    d=$IN/$4; mkdir -p "$d"
    $MANGLE "$TMP/town" "$4" "$d/town"
    # shellcheck disable=SC2046
    h_case "$1" $(files_of "$d/town")
    all_commands "$2" "$3" "$d/town"
}

# ---- wrong magic numbers, absurd header values ------------------------------------------
one_case "shp wrong file code" 2 "town.shp" magic_shp
one_case "shx wrong file code" 2 "town.sh[px]" magic_shx
one_case "dbf wrong version byte" any "town.dbf" magic_dbf
one_case "shp ring count 2^31" 2 "town.shp" parts_2p31
one_case "shp ring count 2^31-1" 2 "town.shp" parts_2p31_minus1
one_case "shp point count 2^31-1" 2 "town.shp" points_huge
one_case "shp part index past the points" 2 "town.shp" part_index_out
one_case "shp record length 2^31-1 words" any "town.shp" content_len_huge
one_case "shp file length 2^31-1 words" any "town.shp" file_len_huge
one_case "shx offset past the end" 2 "town.sh[px]" shx_offset_out
one_case "shp unknown shape type" 2 "town.shp" shape_type_bad
one_case "dbf record count 2^31-1" 2 "town.dbf" dbf_count_huge
one_case "dbf header length 65535" 2 "town.dbf" dbf_header_len_bad
one_case "dbf record length 0" 2 "town.dbf" dbf_record_len_zero
one_case "dbf with fewer records than the shp" 2 "town.(dbf|shp)" dbf_fewer_records
one_case "shp missing .shx" 2 "town.sh[px]" no_shx
one_case "shp missing .dbf" 2 "town.dbf" no_dbf

# ---- coordinates, text, sidecars: the run goes on where it can ------------------------------
# A NaN is set aside with the geometry as read, which GeoJSON cannot hold:
# that run stops naming the feature (see docs/reliability.md, open points).
one_case "shp NaN coordinate" any "town.shp|NaN" coord_nan
one_case "shp coordinate 1e308" any "town.shp" coord_huge
one_case "dbf invalid UTF-8 in a value (cpg UTF-8)" go "" dbf_invalid_utf8
one_case "prj of random bytes" 2 "town.prj|town.shp" prj_garbage
one_case "prj of 2 MiB" 2 "town.prj|town.shp" prj_huge
one_case "cpg naming an unknown encoding" go "" cpg_unknown

# ---- truncated, each file in turn ---------------------------------------------------------------
for ext in shp shx dbf; do
    for pct in 0 10 50 90 99; do
        d=$IN/cut_${ext}_$pct; mkdir -p "$d"
        for e in shp shx dbf prj cpg; do cp "$TMP/town.$e" "$d/town.$e"; done
        truncate_to "$TMP/town.$ext" $pct "$d/town.$ext"
        # shellcheck disable=SC2046
        h_case "$ext truncated to $pct%" $(files_of "$d/town")
        all_commands 2 "town.(shp|shx|dbf)" "$d/town"
    done
done

# ---- bit flips, each file in turn ---------------------------------------------------------------
BALOPT=--no-values
for ext in shp shx dbf; do
    for seed in 1 2 3 4 5 6 7 8; do
        d=$IN/flip_${ext}_$seed; mkdir -p "$d"
        for e in shp shx dbf prj cpg; do cp "$TMP/town.$e" "$d/town.$e"; done
        flip_bits "$TMP/town.$ext" "$seed" 3 "$d/town.$ext"
        # shellcheck disable=SC2046
        h_case "$ext 3 bits flipped (seed $seed)" $(files_of "$d/town")
        all_commands any "town.(shp|shx|dbf)" "$d/town"
    done
done
h_done
