#!/bin/sh
# The gate's exit codes with --report: 0 passed, 1 failed (inventory and
# report written, the report says which gate and by how much), 2 error
# (nothing written: no inventory, no report, no folder, no temporary file);
# the terminal summary, and -q.
. "$ST_TESTS_ROOT/e2e/lib.sh"
in=$DATA/run/small.geojson
help=$("$STOCKTAKE" run --help 2>&1)
case $help in *--report*) ;; *) skip "run has no --report yet" ;; esac

# jq-like look-up with Debian's python: jget FILE EXPR (EXPR on 'r')
jget() { $PY -c "import json,sys; r=json.load(open(sys.argv[1])); print($2)" "$1"; }

# passed: no gate at all
expect_rc 0 "$STOCKTAKE" run -o "$TMP/a.gpkg" --report "$TMP/ra" "$in"
[ -f "$TMP/ra/report.json" ] && [ -f "$TMP/ra/report.html" ] || fail "no report"
[ "$(jget "$TMP/ra/report.json" "r['gate']['failed']")" = False ] || fail "gate.failed on a passing run"
expect_stderr "^gate: passed"
expect_stderr "read = buildings \+ set aside"
expect_stderr "written: $TMP/a.gpkg"
expect_stderr "$TMP/ra/report.html"
grep -q 'class="headline pass"' "$TMP/ra/report.html" || fail "headline does not say passed"

# -q: nothing on stderr
expect_rc 0 "$STOCKTAKE" run -q -o "$TMP/q.gpkg" --report "$TMP/rq" "$in"
[ -s "$TMP/stderr" ] && fail "-q printed: $(cat "$TMP/stderr")"

# failed: --fail-on error (the null geometry and the bowtie are errors)
expect_rc 1 "$STOCKTAKE" run -o "$TMP/b.gpkg" --report "$TMP/rb" --fail-on error "$in"
[ -f "$TMP/b.gpkg" ] || fail "a failed gate still writes the inventory"
[ -f "$TMP/rb/report.html" ] || fail "a failed gate still writes the report"
expect_stderr "^gate: FAILED"
expect_stderr "fail-on"
[ "$(jget "$TMP/rb/report.json" "r['gate']['failed']")" = True ] || fail "gate.failed false"
jget "$TMP/rb/report.json" "[g for g in r['gate']['results'] if not g['passed']]" | grep -q fail-on ||
    fail "report.json does not say which gate failed"
grep -q 'class="headline fail"' "$TMP/rb/report.html" || fail "headline does not say failed"
grep -q 'fail-on' "$TMP/rb/report.html" || fail "report.html does not say which gate failed"

# a gate statement in the rules, once the audit evaluates them
case $help in
*--districts*)
    printf 'gate\n  fail when share(error) > 10%%\nend\n' >"$TMP/gate.rules"
    expect_rc 1 "$STOCKTAKE" run -o "$TMP/c.gpkg" --report "$TMP/rc" -r "$TMP/gate.rules" "$in"
    # 2 of the 2 kept buildings... share of buildings with an error: the
    # report states the measured value and the limit
    jget "$TMP/rc/report.json" \
        "[(g['value'], g['limit']) for g in r['gate']['results'] if not g['passed']][0]" |
        grep -q ', 0.1)' || fail "gate result without its measured value and limit"
    grep -q 'off by' "$TMP/rc/report.html" || fail "report.html does not say by how much"
    ;;
esac

# reproducible: with the clock pinned, the same run gives the same report
SOURCE_DATE_EPOCH=1700000000 expect_rc 0 "$STOCKTAKE" run -q -o "$TMP/r.gpkg" --report "$TMP/rr" "$in"
mv "$TMP/rr" "$TMP/rr1"
SOURCE_DATE_EPOCH=1700000000 expect_rc 0 "$STOCKTAKE" run -q -o "$TMP/r.gpkg" --report "$TMP/rr" "$in"
cmp -s "$TMP/rr1/report.json" "$TMP/rr/report.json" || fail "report.json differs between identical runs"
cmp -s "$TMP/rr1/report.html" "$TMP/rr/report.html" || fail "report.html differs between identical runs"
grep -q '"finished": "2023-11-14T22:13:20Z"' "$TMP/rr/report.json" || fail "SOURCE_DATE_EPOCH not honoured"

# errors: exit 2 and nothing written
expect_rc 2 "$STOCKTAKE" run -q -o "$TMP/d.gpkg" --report "$TMP/rd" "$TMP/missing.geojson"
[ ! -e "$TMP/d.gpkg" ] || fail "inventory written after an input error"
[ ! -e "$TMP/rd" ] || fail "report folder made after an input error"
touch "$TMP/afile"
expect_rc 2 "$STOCKTAKE" run -q -o "$TMP/e.gpkg" --report "$TMP/afile" "$in"
expect_stderr "afile"
[ ! -e "$TMP/e.gpkg" ] || fail "inventory written although the report could not be"
expect_rc 2 "$STOCKTAKE" run -q -o "$TMP/f.gpkg" --report "$TMP/no/such/dir" "$in"
[ ! -e "$TMP/f.gpkg" ] || fail "inventory written although the report folder cannot be made"
ls -aR "$TMP" | grep -q '\.tmp-' && fail "temporary file left behind"
exit 0
