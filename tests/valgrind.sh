#!/bin/sh
# tests/valgrind.sh -- `make valgrind`: the demo (scripts/demo.sh) with every
# stocktake call under valgrind's memcheck; any memory error or leak fails.
#
# Input:   $STOCKTAKE, the binary to check.
# Output:  one valgrind log per process in build/valgrind/ (the folder is
#          emptied first), and a summary line "valgrind: N processes, N
#          errors, N leaked bytes"; the demo's own output in build/valgrind/demo.
# Errors:  exit 1 when a process reports an error (invalid read or write,
#          use of uninitialised memory, bad free) or a leak (definitely,
#          indirectly or possibly lost), or when a demo step fails.
#          Memory still reachable at exit (PROJ's and GEOS's caches) is not
#          a leak and is not counted.
# Until the demo exists, a run, a convert and an inspect of tests/data.
set -u
: "${STOCKTAKE:?set STOCKTAKE to the stocktake binary}"
root=$(cd "$(dirname "$0")/.." && pwd)
logs=$root/build/valgrind
rm -rf "$logs"; mkdir -p "$logs"
command -v valgrind >/dev/null 2>&1 || { echo "valgrind: not installed (make deps)" >&2; exit 2; }

wrapper=$logs/stocktake
cat >"$wrapper" <<EOS
#!/bin/sh
exec valgrind -q --error-exitcode=97 --leak-check=full \\
    --show-leak-kinds=definite,indirect,possible \\
    --errors-for-leak-kinds=definite,indirect,possible \\
    --log-file="$logs/vg.%p.log" "$STOCKTAKE" "\$@"
EOS
chmod +x "$wrapper"

status=0
if [ -f "$root/scripts/demo.sh" ] && [ -f "$root/samples/manifest.json" ]; then
    STOCKTAKE=$wrapper DEMO_OUT=$logs/demo sh "$root/scripts/demo.sh" >"$logs/demo.log" 2>&1 ||
        { echo "valgrind: a demo step failed (see $logs/demo.log)"; tail -n 20 "$logs/demo.log"; status=1; }
else
    out=$logs/data; mkdir -p "$out"
    for cmd in "inspect $root/tests/data/cli/marrowick.geojson" \
               "convert -q $root/tests/data/cli/marrowick.geojson $out/town.gpkg" \
               "run -q -o $out/inv.gpkg $root/tests/data/cli/marrowick.geojson"; do
        # shellcheck disable=SC2086
        "$wrapper" $cmd >/dev/null 2>&1 || { echo "valgrind: 'stocktake $cmd' failed"; status=1; }
    done
fi

n=0; errors=0; leaked=0
for f in "$logs"/vg.*.log; do
    [ -e "$f" ] || continue
    n=$((n + 1))
    if [ -s "$f" ]; then
        errors=$((errors + 1))
        echo "valgrind report ($f):"; head -n 40 "$f" | sed 's/^/    /'
        b=$(sed -n 's/.*definitely lost: \([0-9,]*\) bytes.*/\1/p' "$f" | tr -d , | head -n 1)
        leaked=$((leaked + ${b:-0}))
    fi
done
[ "$n" -gt 0 ] || { echo "valgrind: no process ran"; status=1; }
[ "$errors" -eq 0 ] || status=1
echo "valgrind: $n processes, $errors with errors or leaks, $leaked bytes definitely lost"
exit $status
