#!/bin/sh
# tests/e2e/test_hostile_rules.sh -- hostile rule files through lint and
# run -r: include cycles (direct, through three files, a file including
# itself), includes deeper than the limit, includes of a FIFO, a device
# and a folder (a FIFO used to block the load for ever), a file over the
# size limit, NUL bytes and invalid UTF-8, an absurdly long token,
# parentheses nested 100,000 deep, more errors than the error limit, a
# regular expression that does not compile, and regular expressions with
# catastrophic backtracking run on hostile values (the run must go on, with
# a rule.match-limit finding). Each case ends within 60 s, exits 2 naming
# the file (or goes on), writes nothing, and leaves its inputs unchanged
# (tests/e2e/hostile.sh).
. "$ST_TESTS_ROOT/e2e/lib.sh"
. "$ST_TESTS_ROOT/e2e/hostile.sh"

IN=$TMP/in
mkdir -p "$IN"
BAL="$PY $ST_TESTS_ROOT/e2e/balance.py"
LAYER=$DATA/cli/marrowick.geojson
SCHEMA='schema
  field occupancy codes RES COM UNK
  unknown occupancy UNK
end'

# rules_case NAME PATTERN FILE...: lint and run -r must both exit 2.
rules_case() {
    h_name=$1; h_p=$2; shift 2
    h_case "$h_name" "$@" "$LAYER"
    h_run 2 "$h_p" "$STOCKTAKE" lint "$1"
    h_run 2 "$h_p" "$STOCKTAKE" run -q -r "$1" -o "$HOUT/inv.gpkg" "$LAYER"
}

# ---- includes -------------------------------------------------------------------------------
printf 'include "b.rules"\n' >"$IN/a.rules"
printf 'include "a.rules"\n' >"$IN/b.rules"
rules_case "rules include cycle a -> b -> a" "a.rules.*b.rules.*a.rules|cycle" "$IN/a.rules" "$IN/b.rules"
printf 'include "self.rules"\n' >"$IN/self.rules"
rules_case "rules file including itself" "self.rules" "$IN/self.rules"
printf 'include "y.rules"\n' >"$IN/x.rules"
printf 'include "z.rules"\n' >"$IN/y.rules"
printf 'include "x.rules"\n' >"$IN/z.rules"
rules_case "rules include cycle of three" "x.rules" "$IN/x.rules" "$IN/y.rules" "$IN/z.rules"
mkdir -p "$IN/deep"
i=0
while [ $i -lt 40 ]; do printf 'include "d%d.rules"\n' $((i + 1)) >"$IN/deep/d$i.rules"; i=$((i + 1)); done
printf '%s\n' "$SCHEMA" >"$IN/deep/d40.rules"
rules_case "rules includes 40 deep" "d[0-9]+.rules" "$IN/deep/d0.rules"
mkfifo "$IN/fifo.rules"
printf 'include "fifo.rules"\n' >"$IN/inc_fifo.rules"
rules_case "rules include of a FIFO" "inc_fifo.rules.*fifo.rules" "$IN/inc_fifo.rules"
h_case "rules file that is a FIFO" "$LAYER"
h_run 2 "fifo.rules" "$STOCKTAKE" lint "$IN/fifo.rules"
h_run 2 "fifo.rules" "$STOCKTAKE" run -q -r "$IN/fifo.rules" -o "$HOUT/inv.gpkg" "$LAYER"
printf 'include "/dev/zero"\n' >"$IN/inc_zero.rules"
rules_case "rules include of /dev/zero" "inc_zero.rules" "$IN/inc_zero.rules"
mkdir -p "$IN/folder.rules"
printf 'include "folder.rules"\n' >"$IN/inc_dir.rules"
rules_case "rules include of a folder" "inc_dir.rules" "$IN/inc_dir.rules"
printf 'include "nothere.rules"\n' >"$IN/inc_missing.rules"
rules_case "rules include of a missing file" "inc_missing.rules.*nothere.rules" "$IN/inc_missing.rules"

# ---- sizes and bytes ------------------------------------------------------------------------
$PY - "$IN" <<'PY'
import sys
d = sys.argv[1]
schema = "schema\n  field occupancy codes RES COM UNK\n  unknown occupancy UNK\nend\n"
open(d + "/big.rules", "w").write(schema + ("# " + "x" * 1000 + "\n") * 5000)
open(d + "/nul.rules", "wb").write(schema.encode() + b"map occupancy from building\n  house\x00 -> RES\nend\n")
open(d + "/utf8.rules", "wb").write(schema.encode() + b"map occupancy from building\n  caf\xe9 -> RES\nend\n")
open(d + "/token.rules", "w").write(schema + "map occupancy from " + "b" * 100000 + "\n  x -> RES\nend\n")
open(d + "/parens.rules", "w").write(schema.replace("UNK\nend", "UNK\n  field storeys integer 1..99\nend")
     + "derive storeys\n  from " + "(" * 100000 + "1" + ")" * 100000 + "\nend\n")
open(d + "/errors.rules", "w").write(schema + "".join("bogus%d line\n" % i for i in range(500)))
open(d + "/regex_bad.rules", "w").write(schema + "map occupancy from building\n  /(unclosed/ -> RES\nend\n")
PY
rules_case "rules file of 5 MB" "big.rules" "$IN/big.rules"
rules_case "rules file with a NUL byte" "nul.rules" "$IN/nul.rules"
rules_case "rules file with invalid UTF-8" "utf8.rules" "$IN/utf8.rules"
rules_case "rules token of 100,000 bytes" "token.rules" "$IN/token.rules"
rules_case "rules parentheses 100,000 deep" "parens.rules" "$IN/parens.rules"
rules_case "rules file with 500 errors" "errors.rules" "$IN/errors.rules"
rules_case "rules regex that does not compile" "regex_bad.rules" "$IN/regex_bad.rules"

# ---- catastrophic backtracking: the run goes on ----------------------------------------------
cat >"$IN/backtrack.rules" <<RULES
$SCHEMA
map occupancy from name
  /^(a+)+\$/           -> RES
  /^(a|a?)+\$/         -> RES
  /^(\\w+\\s?)*\$/      -> COM
end
RULES
$PY - "$IN/backtrack.geojson" <<'PY'
import json, sys
vals = ["a" * 64 + "!", "a" * 5000 + "!", "word " * 2000 + "!", "aaaa"]
feats = [{"type": "Feature", "properties": {"name": vals[i % 4]},
          "geometry": {"type": "Polygon", "coordinates": [[[i * 1e-3, 0], [i * 1e-3 + 5e-4, 0],
                       [i * 1e-3 + 5e-4, 5e-4], [i * 1e-3, 5e-4], [i * 1e-3, 0]]]}}
         for i in range(40)]
json.dump({"type": "FeatureCollection", "features": feats}, open(sys.argv[1], "w"))
PY
h_case "rules regexes with catastrophic backtracking" "$IN/backtrack.rules" "$IN/backtrack.geojson"
h_run go "" "$STOCKTAKE" lint "$IN/backtrack.rules"
h_run go "" "$STOCKTAKE" run -r "$IN/backtrack.rules" -o "$HOUT/inv.gpkg" "$IN/backtrack.geojson"
grep -q "rule.match-limit" "$TMP/stderr" || { cat "$TMP/stderr" >&2; h_fail "no rule.match-limit finding"; }
$BAL "$HOUT/inv.gpkg" "$IN/backtrack.geojson" >"$TMP/bal" 2>&1 || { cat "$TMP/bal" >&2; h_fail "balance"; }
h_done
