#!/bin/sh
# Run each cmocka unit-test binary; print one summary line that CI reads.
pass=0; fail=0; failed=""
for t in "$@"; do
    if "$t"; then pass=$((pass + 1)); else fail=$((fail + 1)); failed="$failed $t"; fi
done
echo "unit test programs: $pass passed, $fail failed"
[ -n "$failed" ] && echo "failed:$failed"
[ "$fail" -eq 0 ]
