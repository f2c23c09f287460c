#!/bin/sh
# Run each libFuzzer target for $FUZZ_SECONDS seconds (default 30).
# Usage: run.sh FUZZBUILD TARGET...
#
# Corpus: libFuzzer reads the committed seeds (tests/fuzz/corpus/<t>/ and
# the test-data folders listed in tests/fuzz/<t>.seeds) and a
# working corpus FUZZBUILD/corpus/<t>/ where it keeps what it finds (never
# the committed folder, which stays small). tests/fuzz/seed_real.sh adds
# cuts of the real extracts to the working corpus when they are present.
# Crashes: written to FUZZBUILD/crashes/<t>/; a target that crashes fails
# the run. Turn each into a regression file with
#   cp FUZZBUILD/crashes/<t>/crash-... tests/data/crashers/<t>/<name>
# (tests/fuzz/replay.sh then replays it in every `make check`).
# Prints per target: executions, corpus size, and "N passed, N failed".
set -u
fb=$1; shift
secs=${FUZZ_SECONDS:-30}
root=$(cd "$(dirname "$0")/../.." && pwd)
sh "$root/tests/fuzz/seed_real.sh" "$fb/corpus" || true
pass=0; fail=0
for t in "$@"; do
    work=$fb/corpus/$t; crashes=$fb/crashes/$t; log=$fb/log/$t.log
    mkdir -p "$work" "$crashes" "$fb/log"
    dict=""
    [ -f "$root/tests/fuzz/$t.dict" ] && dict="-dict=$root/tests/fuzz/$t.dict"
    # -timeout: one input taking 10 s is a hang; -rss_limit_mb and
    # -malloc_limit_mb: more than 2 GiB for one input is a bug (limits
    # must refuse it first). detect_leaks stays on.
    # shellcheck disable=SC2086
    "$fb/fuzz/fuzz_$t" -max_total_time="$secs" -timeout=10 -rss_limit_mb=2048 \
        -malloc_limit_mb=2048 -print_final_stats=1 -artifact_prefix="$crashes/" \
        $dict "$work" $(sh "$root/tests/fuzz/seeds.sh" "$t") >"$log" 2>&1
    rc=$?
    runs=$(sed -n 's/^stat::number_of_executed_units: *//p' "$log" | tail -n 1)
    cov=$(grep -E '^#[0-9]+' "$log" | tail -n 1 | sed -n 's/.*cov: \([0-9]*\).*/\1/p')
    n=$(ls "$work" | wc -l)
    if [ "$rc" -eq 0 ]; then
        pass=$((pass + 1))
        echo "fuzz $t: ${secs}s, ${runs:-?} executions, coverage ${cov:-?}, corpus $n, no crash"
    else
        fail=$((fail + 1))
        echo "FAILED: fuzz $t (exit $rc): ${runs:-?} executions; see $log and $crashes/"
        grep -E 'ERROR|SUMMARY|invariant' "$log" | head -n 5 | sed 's/^/    /'
    fi
done
echo "fuzz targets: $pass passed, $fail failed"
[ "$fail" -eq 0 ]
