#!/bin/sh
# Checks against outside references (GDAL, PROJ, shapely, pyproj, the
# published values in ../shared/REFERENCES.md, the real OSM extracts).
exec sh "$(dirname "$0")/../e2e/run.sh" "$(dirname "$0")"
