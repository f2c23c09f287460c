#!/bin/sh
# stocktake tiles: tile addresses equal to those from pyproj's EPSG:3857
# (tests/ref/tiles_pyproj.py), 800 points at seven zooms.
. "$ST_TESTS_ROOT/e2e/lib.sh"
$PY -c 'import pyproj' 2>/dev/null || skip "no pyproj for $PY"
$PY "$ST_TESTS_ROOT/ref/tiles_pyproj.py" "$STOCKTAKE" "$TMP" || fail "tiles differ from pyproj's"
