#!/bin/sh
# Print the seed folders of fuzz target $1, absolute, one per line: its
# committed corpus tests/fuzz/corpus/$1/ and each existing folder named
# (relative to the checkout) in tests/fuzz/$1.seeds. Test fixtures serve as seeds where
# they are, so the committed corpus only holds what no fixture has.
root=$(cd "$(dirname "$0")/../.." && pwd)
t=$1
[ -d "$root/tests/fuzz/corpus/$t" ] && echo "$root/tests/fuzz/corpus/$t"
[ -f "$root/tests/fuzz/$t.seeds" ] || exit 0
grep -v '^#' "$root/tests/fuzz/$t.seeds" | while read -r d; do
    [ -n "$d" ] && [ -d "$root/$d" ] && echo "$root/$d"
done
exit 0
