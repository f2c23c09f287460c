#!/bin/sh
# Pack STEM.shp .shx .dbf .prj .cpg into one fuzz_shp input on stdout, the
# parts separated by the 8 bytes "\n#STSEP#" (tests/fuzz/fuzz_shp.c). A
# missing sidecar ends the list early (the harness then deletes the rest).
stem=$1
first=1
for ext in shp shx dbf prj cpg; do
    [ -f "$stem.$ext" ] || break
    [ "$first" -eq 1 ] || printf '\n#STSEP#'
    cat "$stem.$ext"
    first=0
done
