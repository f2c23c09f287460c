#!/bin/sh
# Replay every fuzz target's seeds (tests/fuzz/corpus/<target>/ and the
# folders listed in tests/fuzz/<target>.seeds) and its crashers
# (tests/data/crashers/<target>/) through the plain driver
# build/fuzz/replay_<target>: each input must be handled without a crash, a
# sanitizer report or a broken harness invariant (see tests/fuzz/fuzz.h).
# Usage: replay.sh BINDIR TARGET...   Prints "N passed, N failed" at the end.
bindir=$1; shift
root=$(cd "$(dirname "$0")/../.." && pwd)
pass=0; fail=0
for t in "$@"; do
    set --
    for d in "$root/tests/data/crashers/$t" \
             $(sh "$root/tests/fuzz/seeds.sh" "$t"); do
        [ -d "$d" ] && set -- "$@" "$d"
    done
    if [ $# -eq 0 ]; then
        echo "replay $t: no corpus"
        fail=$((fail + 1))
        continue
    fi
    if out=$("$bindir/replay_$t" "$@" 2>&1); then
        pass=$((pass + 1))
        echo "$out" | tail -n 1
    else
        fail=$((fail + 1))
        echo "FAILED: replay $t"
        echo "$out" | tail -n 40 | sed 's/^/    /'
    fi
done
echo "fuzz replay targets: $pass passed, $fail failed"
[ "$fail" -eq 0 ]
