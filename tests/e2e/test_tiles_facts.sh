#!/bin/sh
# run --tile ... --facts (docs/scale.md, facts.h): the layer facts written
# once by 'stocktake tiles --facts' let every part read a GeoPackage input
# through its R-tree for its window and halo only. The demo town as two
# GeoPackages made by GDAL (one in lon/lat with features without
# coordinates and with swapped axes, one in UTM zone 9N, EPSG:32609): the
# parts made with the facts read fewer features than each layer holds
# (their notes say how many) and merge equal to a single run feature by
# feature; parts made without facts merge with them to the same result;
# two boxes with a 1 m halo, which the run widens and reads again through
# the R-tree, merge equal too.
# Refused with exit 2: a changed input, a damaged facts file, facts of
# other inputs or read from another CRS (--crs), facts without a window; merge refuses parts made with
# facts that say something else of the layers. A GeoJSON input keeps its
# whole read and is checked against the facts too.
. "$ST_TESTS_ROOT/e2e/lib.sh"
S=$ROOT/samples
SOURCE_DATE_EPOCH=1700000000
export SOURCE_DATE_EPOCH
command -v ogr2ogr >/dev/null || skip "ogr2ogr (GDAL) not installed"
opts="-r $ROOT/rules/demo.rules --districts $S/districts.geojson --district-key district_id
--region-key region_id --reference $S/reference_counts.csv --fill draw --seed 7"
cd "$TMP" || fail "no temporary folder"
ogr2ogr -f GPKG -nln osm osm.gpkg "$S/buildings_osm.geojson" 2>/dev/null ||
    fail "ogr2ogr could not make osm.gpkg"
ogr2ogr -f GPKG -nln cad -t_srs EPSG:32609 cad.gpkg "$S/buildings_cadastre.geojson" \
    2>/dev/null || fail "ogr2ogr could not make cad.gpkg"
ins="osm.gpkg cad.gpkg"

# shellcheck disable=SC2086
"$STOCKTAKE" run -q $opts -o single.gpkg --report single $ins 2>err ||
    { cat err >&2; fail "single run failed"; }
# shellcheck disable=SC2086
"$STOCKTAKE" tiles -z 16 --facts facts.txt $ins >tiles 2>err ||
    { cat err >&2; fail "tiles --facts failed"; }
# shellcheck disable=SC2086
"$STOCKTAKE" tiles -z 16 $ins >tiles.plain || fail "tiles failed"
cmp -s tiles tiles.plain || fail "--facts changed the tile list"
grep -q '^fids dense 1$' facts.txt || fail "no dense fids in the facts: $(cat facts.txt)"
grep -q '^coordless [1-9]' facts.txt || fail "no feature without coordinates in the facts"
n=$(wc -l <tiles)
[ "$n" -ge 16 ] || fail "only $n tiles at zoom 16"

mkdir with without
while read -r t; do
    p=$(echo "$t" | tr / _).gpkg
    # shellcheck disable=SC2086
    "$STOCKTAKE" run $opts --facts facts.txt --tile "$t" -o "with/$p" $ins >/dev/null \
        2>"err.$p" || { cat "err.$p" >&2; fail "part $t with facts failed"; }
    # shellcheck disable=SC2086
    "$STOCKTAKE" run -q $opts --tile "$t" -o "without/$p" $ins 2>err ||
        { cat err >&2; fail "part $t without facts failed"; }
done <tiles
# every part read both layers through the R-tree; a window (600 m) with
# its halo (500 m a side) covers much of this small town, but the parts
# read less than every feature each, and some less than half
cat err.*.gpkg >notes
for layer in osm.gpkg:3000 cad.gpkg:1055; do
    f=${layer%:*} total=${layer#*:}
    k=$(grep -c "^$f: note: read [0-9]* of $total features through the R-tree" notes)
    [ "$k" -eq "$n" ] || fail "$f: $k of $n parts read through the R-tree: $(cat notes)"
    sed -n "s/^$f: note: read \([0-9]*\) of .*/\1/p" notes | sort -n >counts
    least=$(head -n 1 counts) sum=$(awk '{ s += $1 } END { print s }' counts)
    [ "$least" -lt $((total / 2)) ] || fail "$f: every part read at least $least of $total"
    [ "$sum" -lt $((n * total)) ] || fail "$f: the parts read $sum features, $n x $total"
done

# shellcheck disable=SC2086
"$STOCKTAKE" merge -q $opts -o merged.gpkg --report merged with/*.gpkg 2>err ||
    { cat err >&2; fail "merge of the parts made with facts failed"; }
$PY "$ST_TESTS_ROOT/e2e/compare_inventories.py" single.gpkg merged.gpkg single merged ||
    fail "parts made with facts merged differ from the single run"
# half the parts with facts, half without
mkdir mixed
k=0
for p in with/*.gpkg; do
    k=$((k + 1))
    if [ $((k % 2)) = 0 ]; then cp "$p" mixed/; else cp "without/${p#with/}" mixed/; fi
done
# shellcheck disable=SC2086
"$STOCKTAKE" merge -q $opts -o mixed.gpkg mixed 2>err ||
    { cat err >&2; fail "merge of parts made with and without facts failed"; }
$PY "$ST_TESTS_ROOT/e2e/compare_inventories.py" single.gpkg mixed.gpkg >/dev/null ||
    fail "parts made with and without facts merged differ from the single run"

# two boxes cut at the town's middle with a 1 m halo: the run widens the
# halo itself and reads through the R-tree again with the wider box
mid=-126.2375
# shellcheck disable=SC2086
"$STOCKTAKE" run $opts --facts facts.txt --bbox "-127,-49,$mid,-47" --halo 1 -o west.gpkg \
    $ins >/dev/null 2>err || { cat err >&2; fail "west box with facts failed"; }
grep -q "reading again with" err || fail "no halo widening noted: $(cat err)"
[ "$(grep -c "osm.gpkg: note: read [0-9]* of 3000 features through the R-tree" err)" -ge 2 ] ||
    fail "the wider halo was not read through the R-tree: $(cat err)"
# shellcheck disable=SC2086
"$STOCKTAKE" run -q $opts --facts facts.txt --bbox "$mid,-49,-125,-47" --halo 1 -o east.gpkg \
    $ins 2>/dev/null || fail "east box with facts failed"
# shellcheck disable=SC2086
"$STOCKTAKE" merge -q $opts -o boxes.gpkg west.gpkg east.gpkg || fail "merge of boxes failed"
$PY "$ST_TESTS_ROOT/e2e/compare_inventories.py" single.gpkg boxes.gpkg >/dev/null ||
    fail "two boxes with facts and a widened halo merged differ from the single run"

t=$(head -n 1 tiles)
# facts that say another extent (a whole, undamaged file): the part takes
# them, and merge refuses it beside the parts made with the right ones
$PY - facts.txt wrong.txt <<'PYEOF' || fail "could not write wrong facts"
import hashlib, sys
lines = open(sys.argv[1]).read().split("\n")
body = [l if not l.startswith("extent 1 ") else
        "extent 1 " + " ".join(repr(float(v) + 0.001) for v in l.split()[2:])
        for l in lines if not l.startswith("sha256 ")]
text = "\n".join(body).rstrip("\n") + "\n"
text += "sha256 " + hashlib.sha256(text.encode()).hexdigest() + "\n"
open(sys.argv[2], "w").write(text)
PYEOF
# shellcheck disable=SC2086
"$STOCKTAKE" run -q $opts --facts wrong.txt --tile "$t" -o wrong.gpkg $ins 2>err ||
    { cat err >&2; fail "part with other facts failed"; }
mkdir refused
cp with/*.gpkg refused/
cp wrong.gpkg "refused/$(echo "$t" | tr / _).gpkg"
# shellcheck disable=SC2086
expect_rc 2 "$STOCKTAKE" merge -q $opts -o refused.gpkg refused
expect_stderr "input layers differ .*other facts files"
[ ! -e refused.gpkg ] || fail "a refused merge wrote its output"

# refused before reading: damaged facts, other inputs, no window, changed input
sed 's/^count 3000$/count 3001/' facts.txt >damaged.txt
# shellcheck disable=SC2086
expect_rc 2 "$STOCKTAKE" run -q $opts --facts damaged.txt --tile "$t" -o p.gpkg $ins
expect_stderr "damaged.txt.*digest does not match"
# shellcheck disable=SC2086
expect_rc 2 "$STOCKTAKE" run -q $opts --facts facts.txt --tile "$t" -o p.gpkg cad.gpkg osm.gpkg
expect_stderr "facts.txt.*input 1 \(cad.gpkg\) is not the one these facts describe"
expect_rc 2 "$STOCKTAKE" run -q --facts facts.txt -o p.gpkg osm.gpkg cad.gpkg
expect_stderr "--facts goes with --tile or --bbox"
expect_rc 2 "$STOCKTAKE" run -q --facts nothing.txt --tile "$t" -o p.gpkg $ins
expect_stderr "nothing.txt"
# shellcheck disable=SC2086
expect_rc 2 "$STOCKTAKE" run -q $opts --crs EPSG:32609 --facts facts.txt --tile "$t" -o p.gpkg $ins
expect_stderr "facts.txt.*input 1 \(osm.gpkg\) .*read from the CRS 'EPSG:32609'"
touch -d '2001-01-01' cad.gpkg
# shellcheck disable=SC2086
expect_rc 2 "$STOCKTAKE" run -q $opts --facts facts.txt --tile "$t" -o p.gpkg $ins
expect_stderr "facts.txt.*input 2 \(cad.gpkg\) .*changed since the facts were written"
[ ! -e p.gpkg ] || fail "a refused part was written"

# a GeoJSON input is read whole, and its content checked against the facts
cp "$S/buildings_cadastre.geojson" cad.geojson
"$STOCKTAKE" tiles -z 16 --facts gj.txt cad.geojson >/dev/null || fail "tiles on GeoJSON failed"
grep -q '^fids none$' gj.txt || fail "a GeoJSON layer given dense fids"
"$STOCKTAKE" run --facts gj.txt --tile "$t" -o gj.gpkg cad.geojson >/dev/null 2>err ||
    { cat err >&2; fail "part of a GeoJSON with facts failed"; }
! grep -q "R-tree" err || fail "a GeoJSON read through an R-tree: $(cat err)"
$PY - gj.txt gjwrong.txt <<'PYEOF' || fail "could not write wrong GeoJSON facts"
import hashlib, sys
lines = [l for l in open(sys.argv[1]).read().split("\n") if l and not l.startswith("sha256 ")]
lines = [("count %d" % (int(l.split()[1]) + 1)) if l.startswith("count ") else l for l in lines]
text = "\n".join(lines) + "\n"
open(sys.argv[2], "w").write(text + "sha256 " + hashlib.sha256(text.encode()).hexdigest() + "\n")
PYEOF
expect_rc 2 "$STOCKTAKE" run -q --facts gjwrong.txt --tile "$t" -o gj2.gpkg cad.geojson
expect_stderr "gjwrong.txt.*features are not what the facts say"
echo "ok: $n parts with facts (R-tree reads, lon/lat and UTM) merge equal; refusals exit 2"
