#!/bin/sh
# stocktake lint: the starter pack lints clean (exit 0); a broken file exits
# 2 with file:line:col, the source line and a caret; warnings alone exit 0;
# diagnostics come in the order of the text; usage errors exit 2.
. "$ST_TESTS_ROOT/e2e/lib.sh"

expect_rc 0 "$STOCKTAKE" lint "$ROOT/rules/starter.rules"
grep -qx "lint: 1 file, 0 errors, 0 warnings" "$TMP/stderr" || fail "starter summary: $(cat "$TMP/stderr")"
# the demo town's pack lints clean too
expect_rc 0 "$STOCKTAKE" lint "$ROOT/rules/demo.rules"
grep -qx "lint: 1 file, 0 errors, 0 warnings" "$TMP/stderr" || fail "demo summary: $(cat "$TMP/stderr")"

cat >"$TMP/broken.rules" <<'RULES'
schema
  field occupancy codes RES COM UNK
  field storeys integer 1..120
end
derive storys
  from building:levels
end
map occupancy from building
  house -> RESS
  /^(shop/ -> COM
end
RULES
expect_rc 2 "$STOCKTAKE" lint "$TMP/broken.rules"
cat >"$TMP/want" <<EOF2
$TMP/broken.rules:5:8: error: unknown field 'storys' (did you mean 'storeys'?)
  derive storys
         ^~~~~~
$TMP/broken.rules:9:12: error: 'RESS' is not a code of field 'occupancy' (did you mean 'RES'?)
    house -> RESS
             ^~~~
$TMP/broken.rules:10:10: error: regular expression does not compile: missing closing parenthesis (at offset 6)
    /^(shop/ -> COM
           ^
lint: 1 file, 3 errors, 0 warnings
EOF2
diff "$TMP/want" "$TMP/stderr" >"$TMP/diff" || { cat "$TMP/diff" >&2; fail "broken file: unexpected diagnostics"; }

# A syntax error: the parser names the block left open.
printf 'schema\n  field a text\n' >"$TMP/open.rules"
expect_rc 2 "$STOCKTAKE" lint "$TMP/open.rules"
expect_stderr "open.rules:2:15: error: expected 'end' to close 'schema' opened at 1:1"
expect_stderr '^  +\^$'

# Warnings only: exit 0.
printf 'schema\n  field a codes X Y\nend\nmap a from b\n  x -> X\n  x -> Y\nend\n' >"$TMP/warn.rules"
expect_rc 0 "$STOCKTAKE" lint "$TMP/warn.rules"
expect_stderr "warn.rules:6:3: warning: unreachable: 'x' is already matched at line 5"
expect_stderr "lint: 1 file, 0 errors, 1 warning$"

# Several files as one set: the second uses the first's schema.
printf 'map a from b\n  x -> X\nend\n' >"$TMP/uses.rules"
expect_rc 0 "$STOCKTAKE" lint "$TMP/warn.rules" "$TMP/uses.rules"
expect_stderr "lint: 2 files, 0 errors, 1 warning$"
expect_rc 2 "$STOCKTAKE" lint "$TMP/uses.rules"
expect_stderr "unknown field 'a' \\(no schema declares any field\\)"

# --quiet prints the summary only.
expect_rc 2 "$STOCKTAKE" lint --quiet "$TMP/broken.rules"
[ "$(wc -l <"$TMP/stderr")" -eq 1 ] || fail "--quiet printed more than the summary"

expect_rc 2 "$STOCKTAKE" lint
expect_stderr "no rule file given"
expect_rc 2 "$STOCKTAKE" lint "$TMP/nonexistent.rules"
expect_stderr "nonexistent.rules: error: cannot read rule file"
expect_rc 0 "$STOCKTAKE" lint --help
exit 0
