#!/bin/sh
# tests/e2e/test_hostile_csv.sh -- hostile CSV tables: the reference counts
# of `run --reference` and a defaults table named by a rule file (`lint`
# and `run -r`): a stray quote, an unclosed quote, invalid UTF-8, a NUL
# byte, 300 columns, a 5,000-byte cell, a count that is negative, not a
# number or past 2^64, a 100 MB sparse file, a FIFO, a folder, an empty
# file, shares that do not add up. Each case ends within 60 s, exits 2
# naming the table (file:line where there is one), writes nothing and leaves
# every input unchanged (tests/e2e/hostile.sh).
. "$ST_TESTS_ROOT/e2e/lib.sh"
. "$ST_TESTS_ROOT/e2e/hostile.sh"

LAYER=$ROOT/samples/buildings_osm.geojson
DISTRICTS=$ROOT/samples/districts.geojson
[ -f "$LAYER" ] && [ -f "$DISTRICTS" ] || skip "samples/ missing"
"$STOCKTAKE" run --help 2>&1 | grep -q -- '--reference' || skip "run has no --reference yet"
IN=$TMP/in
mkdir -p "$IN"

# bad_tables DIR: the hostile tables, one file each, in DIR.
$PY - "$IN" <<'PY'
import sys
d = sys.argv[1]
head = "district_id,buildings\n"
cases = {
    "stray_quote": head + 'QM01,4"75\n',
    "unclosed_quote": head + '"QM01,475\nQM02,554\n',
    "negative": head + "QM01,-5\n",
    "not_a_number": head + "QM01,many\n",
    "past_2p64": head + "QM01,99999999999999999999999\n",
    "columns_300": ",".join("c%d" % i for i in range(300)) + "\n",
    "cell_5000": head + "QM01," + "1" * 5000 + "\n",
    "empty": "",
}
for name, text in cases.items():
    open("%s/%s.csv" % (d, name), "w").write(text)
open(d + "/bad_utf8.csv", "wb").write(head.encode() + b"QM\xff01,475\n")
open(d + "/nul.csv", "wb").write(head.encode() + b"QM01\x00,475\n")
PY
truncate -s 100M "$IN/sparse.csv"
mkfifo "$IN/fifo.csv"
mkdir -p "$IN/folder.csv"

# ---- reference counts ------------------------------------------------------------------------
for name in stray_quote unclosed_quote negative not_a_number past_2p64 columns_300 cell_5000 \
            empty bad_utf8 nul; do
    h_case "reference CSV: $name" "$IN/$name.csv" "$LAYER" "$DISTRICTS"
    h_run 2 "$name.csv" "$STOCKTAKE" run -q --districts "$DISTRICTS" --reference "$IN/$name.csv" \
        -o "$HOUT/inv.gpkg" "$LAYER"
done
for name in sparse fifo folder; do
    h_case "reference CSV: $name" "$LAYER" "$DISTRICTS"
    h_run 2 "$name.csv" "$STOCKTAKE" run -q --districts "$DISTRICTS" --reference "$IN/$name.csv" \
        -o "$HOUT/inv.gpkg" "$LAYER"
done

# ---- defaults tables ---------------------------------------------------------------------------
SCHEMA='schema
  field material codes RC RM URM TMB UNK
  unknown material UNK
end'
$PY - "$IN" <<'PY'
import sys
d = sys.argv[1]
head = "scope,key,field,value,share\n"
open(d + "/shares.csv", "w").write(head + "district,A,material,URM,60\ndistrict,A,material,RM,30\n")
open(d + "/unknown_value.csv", "w").write(head + "district,A,material,RCC,100\n")
open(d + "/table_quote.csv", "w").write(head + 'district,"A,material,RC,100\n')
open(d + "/table_utf8.csv", "wb").write(head.encode() + b"district,\xc3\x28,material,RC,100\n")
PY
for name in shares unknown_value table_quote table_utf8 sparse fifo folder cell_5000; do
    printf '%s\ndefaults\n  table "%s.csv"\nend\n' "$SCHEMA" "$name" >"$IN/t_$name.rules"
    case $name in sparse|fifo|folder) h_case "defaults table: $name" "$IN/t_$name.rules" "$LAYER" ;;
        *) h_case "defaults table: $name" "$IN/t_$name.rules" "$IN/$name.csv" "$LAYER" ;; esac
    h_run 2 "$name.csv" "$STOCKTAKE" lint "$IN/t_$name.rules"
    h_run 2 "$name.csv" "$STOCKTAKE" run -q -r "$IN/t_$name.rules" -o "$HOUT/inv.gpkg" "$LAYER"
done
h_done
