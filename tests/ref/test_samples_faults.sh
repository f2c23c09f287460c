#!/bin/sh
# The demo scenario's fault inventory against outside references: every
# fault listed in samples/faults.csv is what GEOS (shapely) and PROJ's
# geodesic measures (pyproj) say it is, and every unlisted footprint is a
# valid, non-overlapping polygon (see tests/ref/samples_check.py for the
# sources and thresholds). Skips when shapely or pyproj are missing.
. "$ST_TESTS_ROOT/e2e/lib.sh"

[ -x "$PY" ] || skip "no $PY"
"$PY" "$ST_TESTS_ROOT/ref/samples_check.py" "$ROOT/samples"
