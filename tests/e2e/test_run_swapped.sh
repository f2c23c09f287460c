#!/bin/sh
# The footprint checks run while the layers are read, before a layer's
# extent is known; the footprints the swapped-axes check could fire on are
# checked again once it is (pipeline/run_geometry.c). The demo samples hold
# five swapped footprints: under each repair policy, at -j 1, 2 and 4, their
# findings and rows (status, flags, area, geometry) are those the build
# before the overlap wrote (tests/data/swapped/*.expected, made with it),
# and the whole outputs are the same for every -j.
. "$ST_TESTS_ROOT/e2e/lib.sh"
S=$ROOT/samples
D=$DATA/swapped
SOURCE_DATE_EPOCH=1700000000
export SOURCE_DATE_EPOCH
for p in make-valid reject keep; do
    set --
    [ "$p" = make-valid ] || set -- -r "$D/$p.rules"
    for j in 1 2 4; do
        mkdir -p "$TMP/$p-j$j"
        (cd "$TMP/$p-j$j" && "$STOCKTAKE" run -q -j "$j" "$@" -o out.geojson \
            "$S/buildings_osm.geojson" "$S/buildings_cadastre.geojson") >"$TMP/stdout" 2>"$TMP/stderr" ||
            { cat "$TMP/stderr" >&2; fail "run ($p, -j $j) failed"; }
        $PY "$ROOT/tests/e2e/swapped_digest.py" "$TMP/$p-j$j/out" >"$TMP/$p-j$j.digest" ||
            fail "cannot read the outputs ($p, -j $j)"
        diff "$D/$p.expected" "$TMP/$p-j$j.digest" >&2 ||
            fail "swapped footprints differ from before ($p, -j $j)"
        for f in "$TMP/$p-j1"/*; do
            cmp "$f" "$TMP/$p-j$j/$(basename "$f")" || fail "-j 1 and -j $j differ ($p)"
        done
    done
done
grep -qx "swapped 5" "$D/make-valid.expected" || fail "the samples no longer hold 5 swapped footprints"
exit 0
