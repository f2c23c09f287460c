#!/bin/sh
# The committed demo scenario (samples/) is exactly what the documented
# command makes: bench/gen_town.py, run again into a temporary folder with
# the seed, size and districts recorded in samples/manifest.json, gives
# byte-identical files; samples/README.md shows that command and its three
# tables equal the generator's tables for the committed manifest.
. "$ST_TESTS_ROOT/e2e/lib.sh"

S=$ROOT/samples
GEN=$ROOT/bench/gen_town.py
[ -x "$PY" ] || skip "no $PY"
[ -f "$S/manifest.json" ] || fail "samples/manifest.json missing"

field() { sed -n "s/^ \"$1\": \([0-9]*\),\$/\1/p" "$S/manifest.json"; }
seed=$(field seed); n=$(field n); k=$(field districts)
[ -n "$seed" ] && [ -n "$n" ] && [ -n "$k" ] || fail "manifest lacks seed/n/districts"

cmd="/usr/bin/python3 bench/gen_town.py --seed $seed --n $n --districts $k --out samples/"
grep -qF "$cmd" "$S/README.md" || fail "README does not show the rebuild command: $cmd"

"$PY" "$GEN" --seed "$seed" --n "$n" --districts "$k" --out "$TMP/s" 2>"$TMP/gen.err" ||
    { cat "$TMP/gen.err" >&2; fail "gen_town.py failed"; }

made=$(cd "$TMP/s" && ls | sort)
kept=$(cd "$S" && ls | grep -v '^README.md$' | sort)
[ "$made" = "$kept" ] || fail "file lists differ: made [$made] committed [$kept]"
for f in $made; do
    cmp -s "$TMP/s/$f" "$S/$f" || fail "samples/$f differs from a fresh rebuild"
done

# a second run into another folder is identical too (no clock, no order
# of a set or dict leaking into the output)
"$PY" "$GEN" --seed "$seed" --n "$n" --districts "$k" --out "$TMP/t" 2>/dev/null ||
    fail "second run failed"
for f in $made; do cmp -s "$TMP/s/$f" "$TMP/t/$f" || fail "$f differs between runs"; done

for kind in faults facts districts; do
    "$PY" "$GEN" --table "$S/manifest.json" --table-kind "$kind" >"$TMP/want.md" ||
        fail "--table-kind $kind failed"
    sed -n "/^<!-- table:$kind -->\$/,/^<!-- end -->\$/p" "$S/README.md" |
        sed '1d;$d' >"$TMP/got.md"
    [ -s "$TMP/got.md" ] || fail "README has no table:$kind block"
    cmp -s "$TMP/want.md" "$TMP/got.md" ||
        { diff "$TMP/want.md" "$TMP/got.md" >&2; fail "README table $kind is stale"; }
done
exit 0
