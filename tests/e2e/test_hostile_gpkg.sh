#!/bin/sh
# tests/e2e/test_hostile_gpkg.sh -- hostile GeoPackages through inspect,
# convert and run: files that are not SQLite, SQLite files that are not
# GeoPackages, truncated and bit-flipped files, and geometry blobs with
# absurd counts (a ring count of 2^31, 2^31-1 polygons and points), a
# wrong blob magic, an envelope code that does not exist, empty and text
# blobs, WKB nested deeper than any geometry. Every case ends within 60 s,
# exits 2 naming the file (or goes on and balances), leaves no output, and
# leaves the input byte-identical with no -journal/-wal/-shm beside it
# (tests/e2e/hostile.sh). Blob offsets follow OGC 12-128r clause 2.1.3
# (8-byte header, 32-byte xy envelope) and OGC 06-103r4 WKB.
. "$ST_TESTS_ROOT/e2e/lib.sh"
. "$ST_TESTS_ROOT/e2e/hostile.sh"

command -v sqlite3 >/dev/null 2>&1 || skip "sqlite3 shell missing"
IN=$TMP/in
mkdir -p "$IN"
BAL="$PY $ST_TESTS_ROOT/e2e/balance.py"
"$STOCKTAKE" convert -q "$DATA/cli/marrowick.geojson" "$TMP/town.gpkg" 2>/dev/null ||
    skip "GeoPackage writer not built yet"
"$STOCKTAKE" inspect -q "$TMP/town.gpkg" >/dev/null 2>&1 || skip "GeoPackage reader not built yet"
TABLE=$(sqlite3 "$TMP/town.gpkg" "SELECT table_name FROM gpkg_geometry_columns")
COL=$(sqlite3 "$TMP/town.gpkg" "SELECT column_name FROM gpkg_geometry_columns")

BALOPT=""
all_commands() {
    h_run "$1" "$2" "$STOCKTAKE" inspect -q "$3"
    h_run "$1" "$2" "$STOCKTAKE" convert -q "$3" "$HOUT/out.geojson"
    rm -rf "$HOUT"; mkdir -p "$HOUT"
    h_run "$1" "$2" "$STOCKTAKE" run -q -o "$HOUT/inv.gpkg" "$3"
    if [ "$H_RC" -le 1 ]; then
        $BAL $BALOPT "$HOUT/inv.gpkg" "$3" >"$TMP/bal" 2>&1 || { cat "$TMP/bal" >&2; h_fail "balance"; }
    fi
    rm -rf "$HOUT"; mkdir -p "$HOUT"
}

# blob_case NAME WANT SQL-EXPRESSION: feature 1's geometry replaced by the
# expression (over the original blob 'g'), in a fresh folder.
blob_case() {
    d=$IN/$(echo "$1" | tr -c 'a-z0-9' '_'); mkdir -p "$d"
    cp "$TMP/town.gpkg" "$d/town.gpkg"
    # The R-tree triggers call ST_IsEmpty, which the sqlite3 shell lacks.
    for tr in $(sqlite3 "$d/town.gpkg" "SELECT name FROM sqlite_master WHERE type = 'trigger'"); do
        sqlite3 "$d/town.gpkg" "DROP TRIGGER \"$tr\""
    done
    sqlite3 "$d/town.gpkg" "UPDATE \"$TABLE\" SET \"$COL\" = (SELECT CAST($3 AS BLOB) FROM (SELECT \"$COL\" AS g FROM \"$TABLE\" WHERE fid = 1)) WHERE fid = 1" ||
        fail "cannot prepare $1"
    h_case "$1" "$d/town.gpkg"
    all_commands "$2" "town.gpkg" "$d/town.gpkg"
}

# ---- geometry blobs -------------------------------------------------------------------------------
# WKB of feature 1 (a MultiPolygon): byte order at 40, type 41, polygon count
# 45, then the polygon: byte order 49, type 50, ring count 54, point count 58.
blob_case "gpkg blob ring count 2^31" 2 "substr(g,1,54) || x'00000080' || substr(g,59)"
blob_case "gpkg blob polygon count 2^31-1" 2 "substr(g,1,45) || x'ffffff7f' || substr(g,50)"
blob_case "gpkg blob point count 2^31" 2 "substr(g,1,58) || x'00000080' || substr(g,63)"
blob_case "gpkg blob wrong magic" 2 "x'5858' || substr(g,3)"
blob_case "gpkg blob envelope code 7" 2 "substr(g,1,3) || x'0f' || substr(g,5)"
blob_case "gpkg blob WKB type 99" 2 "substr(g,1,41) || x'63000000' || substr(g,46)"
blob_case "gpkg blob cut after the header" 2 "substr(g,1,40)"
blob_case "gpkg blob cut in a coordinate" 2 "substr(g,1,70)"
blob_case "gpkg blob of zero bytes" 2 "x''"
blob_case "gpkg geometry column holding text" 2 "CAST('not a geometry' AS TEXT)"
# 100 GeometryCollections inside one another (WKB type 7, one member each).
nest=$($PY -c 'print(("010700000001000000" * 100) + "0101000000" + "00" * 16)')
blob_case "gpkg blob WKB nested 100 deep" 2 "x'47500001' || substr(g,5,4) || x'$nest'"

# ---- whole files ------------------------------------------------------------------------------------
printf '{"type":"FeatureCollection","features":[]}' >"$IN/json.gpkg"
: >"$IN/empty.gpkg"
printf 'SQLite format 3\000' >"$IN/header_only.gpkg"
head -c 4096 /dev/urandom >"$IN/random.gpkg"
sqlite3 "$IN/plain.gpkg" "CREATE TABLE t(a); INSERT INTO t VALUES (1)"
cp "$TMP/town.gpkg" "$IN/no_table.gpkg"
sqlite3 "$IN/no_table.gpkg" "DROP TABLE \"$TABLE\""
for f in json empty header_only random plain no_table; do
    h_case "gpkg file: $f" "$IN/$f.gpkg"
    all_commands 2 "$f.gpkg" "$IN/$f.gpkg"
done

for pct in 1 10 50 90 99; do
    d=$IN/cut$pct; mkdir -p "$d"
    truncate_to "$TMP/town.gpkg" $pct "$d/town.gpkg"
    h_case "gpkg truncated to $pct%" "$d/town.gpkg"
    all_commands any "town.gpkg" "$d/town.gpkg"
done
BALOPT=--no-values
for seed in 1 2 3 4 5 6 7 8 9 10; do
    d=$IN/flip$seed; mkdir -p "$d"
    flip_bits "$TMP/town.gpkg" "$seed" 8 "$d/town.gpkg"
    h_case "gpkg 8 bits flipped (seed $seed)" "$d/town.gpkg"
    all_commands any "town.gpkg" "$d/town.gpkg"
done
h_done
