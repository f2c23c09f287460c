#!/bin/sh
# Run every tests/e2e/test_*.sh (or those of the folder given as $1) with
# $STOCKTAKE pointing at the binary. Each script exits 0 on success, 77 to
# skip; it prints its own failures. Prints "N passed, N failed" at the end.
dir=${1:-$(dirname "$0")}
: "${STOCKTAKE:?set STOCKTAKE to the stocktake binary}"
export STOCKTAKE
export ST_TESTS_ROOT="$(cd "$(dirname "$0")/.." && pwd)"
pass=0; fail=0; skip=0; failed=""
for t in "$dir"/test_*.sh; do
    [ -e "$t" ] || continue
    out=$(sh "$t" 2>&1); rc=$?
    case $rc in
        0) pass=$((pass + 1)) ;;
        77) skip=$((skip + 1)); echo "skipped: $t" ;;
        *) fail=$((fail + 1)); failed="$failed $t"; echo "FAILED: $t"; echo "$out" | sed 's/^/    /' | tail -n 40 ;;
    esac
done
echo "$(basename "$dir") scripts: $pass passed, $fail failed, $skip skipped"
[ "$fail" -eq 0 ]
