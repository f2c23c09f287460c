#!/bin/sh
# SIGTERM or SIGHUP during 'stocktake run', 'run --tile' and 'merge' (the
# benchmark's invented town, bench/gen_town.py seed 3, 60,000 footprints:
# a few seconds of work): the process ends as the signal would (exit 128 +
# signal) with "interrupted" on stderr, and leaves nothing in the output
# folders: no inventory, no report folder, no temporary file, inputs
# unchanged. A signal that comes once the outputs are in place is too late
# to undo them: the command then ends as it would have (exit 0 or 1) and
# the outputs are whole. The signal is sent at several moments so that it
# lands in different stages.
. "$ST_TESTS_ROOT/e2e/lib.sh"
$PY "$ROOT/bench/gen_town.py" --seed 3 --n 60000 --districts 200 --format geojsonl \
    --no-cadastre --no-truth --out "$TMP/town" >/dev/null 2>&1 || fail "gen_town.py failed"
IN=$TMP/town/buildings_osm.geojsonl
before=$(sha "$IN")
opts="-j 2 -r $ROOT/rules/starter.rules --districts $TMP/town/districts.geojson
--district-key district_id --reference $TMP/town/reference_counts.csv"

# signal_at SIG SECONDS DIR CMD...: run CMD (writing into DIR), send SIG
# after SECONDS, check what is left.
signal_at() {
    sig=$1 delay=$2 dir=$3
    shift 3
    rm -rf "$dir"; mkdir -p "$dir"
    "$@" 2>"$TMP/stderr" &
    pid=$!
    sleep "$delay"
    kill "-$sig" "$pid" 2>/dev/null
    wait "$pid"
    rc=$?
    case $rc in
        0 | 1) # too late: whole outputs
            ls -A "$dir" | grep -q . || fail "$*: exit $rc after a late $sig and no output"
            for f in "$dir"/*.gpkg; do
                [ "$(sqlite3 "$f" 'PRAGMA integrity_check')" = ok ] || fail "$f is damaged"
            done
            late=$((late + 1)) ;;
        *) case $sig in TERM) want=143 ;; HUP) want=129 ;; esac
            [ "$rc" -eq "$want" ] || { cat "$TMP/stderr" >&2; fail "$*: exit $rc after $sig, not $want"; }
            grep -q "interrupted; nothing was written" "$TMP/stderr" ||
                { cat "$TMP/stderr" >&2; fail "$*: no 'interrupted' after $sig"; }
            [ -z "$(ls -A "$dir")" ] || fail "$*: $sig at ${delay}s left: $(ls -A "$dir")"
            stopped=$((stopped + 1)) ;;
    esac
}

stopped=0 late=0
for d in 0.3 1 2; do
    # shellcheck disable=SC2086
    signal_at TERM $d "$TMP/o" "$STOCKTAKE" run -q $opts -o "$TMP/o/inv.gpkg" \
        --report "$TMP/o/report" "$IN"
done
# shellcheck disable=SC2086
signal_at HUP 1 "$TMP/o" "$STOCKTAKE" run -q $opts -o "$TMP/o/inv.gpkg" "$IN"
[ "$stopped" -ge 2 ] || fail "only $stopped of 4 runs were stopped: the input is too small"

# a part, then a merge of parts
tile=$("$STOCKTAKE" tiles -z 12 "$IN" | head -n 1)
# shellcheck disable=SC2086
signal_at TERM 0.5 "$TMP/p" "$STOCKTAKE" run -q $opts --tile "$tile" -o "$TMP/p/part.gpkg" "$IN"
mkdir -p "$TMP/parts"
for t in $("$STOCKTAKE" tiles -z 12 "$IN"); do
    # shellcheck disable=SC2086
    "$STOCKTAKE" run -q $opts --tile "$t" -o "$TMP/parts/$(echo "$t" | tr / -).gpkg" "$IN" ||
        fail "part $t"
done
# shellcheck disable=SC2086
signal_at TERM 0.3 "$TMP/m" "$STOCKTAKE" merge -q $opts -o "$TMP/m/inv.gpkg" \
    --report "$TMP/m/report" "$TMP/parts"
[ "$(sha "$IN")" = "$before" ] || fail "the input changed"
[ "$(ls "$TMP/parts" | wc -l)" -eq "$("$STOCKTAKE" tiles -z 12 "$IN" | wc -l)" ] ||
    fail "the parts changed"
echo "interrupts: $stopped stopped, $late too late to stop"
exit 0
