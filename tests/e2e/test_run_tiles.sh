#!/bin/sh
# scripts/run-tiles.sh on one machine: the demo (both footprint layers,
# the demo rules, districts with region keys, reference counts, defaults
# drawn with a seed) split into the web-mercator tiles of zoom 15 (at least
# 4; 9 today), three tiles at a time on GNU parallel, then merged, equals a
# single 'stocktake run' of the same options feature by feature (buildings,
# set_aside, findings, districts, report). Also: the temporary parts folder
# is gone afterwards; a failing tile, a bad run option and a missing input
# each end the script with exit 2 and a message and leave no output; a job
# stopped by a failing tile finishes with --resume, running only the tiles
# not yet done.
. "$ST_TESTS_ROOT/e2e/lib.sh"
parallel --version 2>/dev/null | grep -q '^GNU parallel' || skip "no GNU parallel (scripts/deps.sh)"
S=$ROOT/samples
OSM=$S/buildings_osm.geojson
CAD=$S/buildings_cadastre.geojson
[ -f "$OSM" ] || skip "no demo samples"
RT=$ROOT/scripts/run-tiles.sh
export SOURCE_DATE_EPOCH=1700000000
# the options of scripts/demo.sh's run
set -- -r "$ROOT/rules/demo.rules" --districts "$S/districts.geojson" \
    --district-key district_id --region-key region_id \
    --reference "$S/reference_counts.csv" --fill draw --seed 73
Z=15

# same SINGLE MERGED [SINGLE_REPORT MERGED_REPORT]: equal feature by
# feature: tests/e2e/compare_inventories.py when present, else the rows of
# the inventory's tables as sqlite3 prints them (geometry blobs in hex).
same() {
    if [ -f "$ST_TESTS_ROOT/e2e/compare_inventories.py" ]; then
        $PY "$ST_TESTS_ROOT/e2e/compare_inventories.py" "$@" >"$TMP/compare" 2>&1 ||
            { cat "$TMP/compare" >&2; return 1; }
        return 0
    fi
    for t in buildings set_aside findings districts; do
        sqlite3 "$1" ".mode quote" "SELECT * FROM \"$t\" ORDER BY 1" >"$TMP/rows.a" &&
            sqlite3 "$2" ".mode quote" "SELECT * FROM \"$t\" ORDER BY 1" >"$TMP/rows.b" ||
            return 1
        [ -s "$TMP/rows.a" ] || [ "$t" = districts ] || { echo "no rows in $t" >&2; return 1; }
        cmp -s "$TMP/rows.a" "$TMP/rows.b" ||
            { diff "$TMP/rows.a" "$TMP/rows.b" | head -n 20 >&2; echo "table $t differs" >&2; return 1; }
    done
}

ntiles=$("$STOCKTAKE" tiles -z $Z "$OSM" "$CAD" | wc -l)
[ "$ntiles" -ge 4 ] || fail "zoom $Z gives $ntiles tiles, not at least 4"

# the single run; exit 1 (gate failed, outputs written) is a result too
"$STOCKTAKE" run -q "$@" -o "$TMP/single.gpkg" --report "$TMP/single_report" "$OSM" "$CAD" \
    >"$TMP/stdout" 2>"$TMP/stderr"
single_rc=$?
[ "$single_rc" -le 1 ] || { cat "$TMP/stderr" >&2; fail "single run exited $single_rc"; }

# the same job by tiles, 3 at a time; parts in a temporary folder
mkdir "$TMP/m"
STOCKTAKE=$STOCKTAKE sh "$RT" -z $Z -P 3 -o "$TMP/m/merged.gpkg" --report "$TMP/m/report" \
    "$OSM" "$CAD" -- "$@" >"$TMP/stdout" 2>"$TMP/stderr"
rc=$?
[ "$rc" -eq "$single_rc" ] ||
    { cat "$TMP/stderr" >&2; fail "run-tiles exited $rc, the single run $single_rc"; }
grep -q "$ntiles tiles at zoom $Z" "$TMP/stderr" || { cat "$TMP/stderr" >&2; fail "no tile count"; }
same "$TMP/single.gpkg" "$TMP/m/merged.gpkg" "$TMP/single_report" "$TMP/m/report" ||
    fail "the tiles' merge differs from the single run"
[ -s "$TMP/m/report/report.json" ] || fail "no merged report"
expect_balanced "$TMP/m/merged.gpkg" "$OSM" "$CAD"
[ "$(ls -A "$TMP/m")" = "$(printf 'merged.gpkg\nreport')" ] ||
    { ls -A "$TMP/m" >&2; fail "the parts folder or other files are left beside OUT"; }

# The --sshlogin path: two "hosts" reached through a stand-in ssh that runs
# GNU parallel's remote command here (no cluster in the tests; this checks
# the quoting of the remote command and its working folder, given relative
# input paths; not ssh itself).
cat >"$TMP/ssh" <<'END'
#!/bin/sh
while [ $# -gt 0 ]; do case $1 in -l | -p | -o | -i) shift 2 ;; -*) shift ;; *) break ;; esac; done
echo "$1" >>"${0%/*}/ssh.hosts"
shift
[ "${1:-}" = -- ] && shift
exec sh -c "$*"
END
chmod +x "$TMP/ssh"
mkdir "$TMP/s"
# SHELL unset, as under CI and cron: GNU parallel's remote wrapper would
# otherwise skip every job and report success.
(cd "$ROOT" && PARALLEL="--ssh $TMP/ssh" STOCKTAKE=$STOCKTAKE env -u SHELL sh "$RT" -z $Z \
    -S 2/host-a -S 1/host-b -o "$TMP/s/merged.gpkg" samples/buildings_osm.geojson \
    samples/buildings_cadastre.geojson -- "$@") >"$TMP/stdout" 2>"$TMP/stderr"
rc=$?
[ "$rc" -eq "$single_rc" ] || { cat "$TMP/stderr" >&2; fail "run-tiles -S exited $rc"; }
[ "$(sort -u "$TMP/ssh.hosts" | tr '\n' ' ')" = "host-a host-b " ] ||
    fail "run-tiles -S did not use both logins: $(sort -u "$TMP/ssh.hosts")"
# run_info records the inputs as given: compare with a single run given
# the same relative paths
(cd "$ROOT" && "$STOCKTAKE" run -q "$@" -o "$TMP/s/single.gpkg" samples/buildings_osm.geojson \
    samples/buildings_cadastre.geojson) >"$TMP/stdout" 2>"$TMP/stderr"
[ $? -eq "$single_rc" ] || { cat "$TMP/stderr" >&2; fail "single run from $ROOT"; }
same "$TMP/s/single.gpkg" "$TMP/s/merged.gpkg" || fail "the merge of the -S run differs"

# scripts/slurm-tiles.sbatch: its array tasks (two tiles a task) run one
# after the other by hand with SLURM_ARRAY_TASK_ID set, then its merge
# (Slurm itself is not in the tests).
SB=$ROOT/scripts/slurm-tiles.sbatch
mkdir "$TMP/sp"
"$STOCKTAKE" tiles -z $Z --facts "$TMP/sp/facts.txt" "$OSM" "$CAD" >"$TMP/sp/tiles.txt" ||
    fail "stocktake tiles"
# a stand-in binary notes each call: the tasks pass the facts on
cat >"$TMP/noting" <<EOF
#!/bin/sh
echo "\$*" >>"$TMP/calls"
exec "$STOCKTAKE" "\$@"
EOF
chmod +x "$TMP/noting"
task=1
while [ $(( (task - 1) * 2 )) -lt "$ntiles" ]; do
    SLURM_ARRAY_TASK_ID=$task TILES_PER_TASK=2 STOCKTAKE=$TMP/noting \
        sh "$SB" run "$TMP/sp" "$@" "$OSM" "$CAD" >"$TMP/stdout" 2>"$TMP/stderr" ||
        { cat "$TMP/stderr" >&2; fail "slurm task $task failed"; }
    task=$((task + 1))
done
grep -q "tile .* done: $TMP/sp/" "$TMP/stdout" || fail "a slurm task says nothing of its tiles"
[ "$(grep -c -- "--facts $TMP/sp/facts.txt" "$TMP/calls")" -eq "$ntiles" ] ||
    fail "the slurm tasks did not all pass --facts: $(cat "$TMP/calls")"
expect_rc 2 env SLURM_ARRAY_TASK_ID=$task TILES_PER_TASK=2 sh "$SB" run "$TMP/sp" "$OSM"
expect_stderr "no line"
STOCKTAKE=$STOCKTAKE sh "$SB" merge "$TMP/sp" -q -o "$TMP/sp/merged.gpkg" "$@" \
    >"$TMP/stdout" 2>"$TMP/stderr"
rc=$?
[ "$rc" -eq "$single_rc" ] || { cat "$TMP/stderr" >&2; fail "slurm merge exited $rc"; }
same "$TMP/single.gpkg" "$TMP/sp/merged.gpkg" || fail "the slurm tasks' merge differs"

# A tile fails (a stand-in binary refuses the second tile): exit 2, the
# tile named, the others stopped, no output, no parts folder left.
bad_tile=$("$STOCKTAKE" tiles -z $Z "$OSM" "$CAD" | sed -n 2p)
cat >"$TMP/flaky" <<EOF
#!/bin/sh
case " \$* " in *" --tile $bad_tile "*) echo "flaky: no tile $bad_tile today" >&2; exit 2 ;; esac
exec "$STOCKTAKE" "\$@"
EOF
chmod +x "$TMP/flaky"
mkdir "$TMP/f"
STOCKTAKE=$TMP/flaky sh "$RT" -z $Z -P 3 -o "$TMP/f/out.gpkg" "$OSM" "$CAD" -- "$@" \
    >"$TMP/stdout" 2>"$TMP/stderr"
rc=$?
[ "$rc" -eq 2 ] || { cat "$TMP/stderr" >&2; fail "a failing tile: exit $rc, not 2"; }
expect_stderr "a tile failed.*Failed: $bad_tile \(exit 2\)"
expect_stderr "$bad_tile.*flaky: no tile"
[ -z "$(ls -A "$TMP/f")" ] || { ls -A "$TMP/f" >&2; fail "a failing tile left files"; }

# The same with --parts: the parts of the tiles done stay, and --resume
# (with the real binary) runs the others only, each tile once, then merges.
STOCKTAKE=$TMP/flaky sh "$RT" -z $Z -P 3 -o "$TMP/f/out.gpkg" --parts "$TMP/parts" \
    "$OSM" "$CAD" -- "$@" >"$TMP/stdout" 2>"$TMP/stderr"
rc=$?
[ "$rc" -eq 2 ] || { cat "$TMP/stderr" >&2; fail "a failing tile with --parts: exit $rc"; }
expect_stderr "--parts $TMP/parts --resume"
[ ! -e "$TMP/f/out.gpkg" ] || fail "a failing tile wrote the output"
# the failure stopped the job: no tile started after it (at most the 3
# running beside it could have ended first), and no temporary part is left
n=$(find "$TMP/parts" -name '*.gpkg' | wc -l)
[ "$n" -le 3 ] || fail "$n parts written after a tile failed: the job went on"
[ "$(find "$TMP/parts" -type f ! -name '*.gpkg' ! -name joblog ! -name tiles.txt \
    ! -name facts.txt | wc -l)" -eq 0 ] || { ls -A "$TMP/parts" >&2; fail "the stopped tiles left files"; }
grep -q '^stocktake-facts 1$' "$TMP/parts/facts.txt" || fail "no layer facts in the parts folder"
STOCKTAKE=$STOCKTAKE sh "$RT" -z $Z -P 3 -o "$TMP/f/out.gpkg" --parts "$TMP/parts" --resume \
    "$OSM" "$CAD" -- "$@" >"$TMP/stdout" 2>"$TMP/stderr"
rc=$?
[ "$rc" -eq "$single_rc" ] || { cat "$TMP/stderr" >&2; fail "--resume exited $rc"; }
# every tile succeeded exactly once over the two attempts (job log column 7)
awk -F'\t' 'NR > 1 && $7 == 0 { ok[$1]++ } END { for (s in ok) if (ok[s] != 1) exit 1;
    print length(ok) }' "$TMP/parts/joblog" >"$TMP/done" || fail "--resume ran a tile twice"
[ "$(cat "$TMP/done")" -eq "$ntiles" ] || fail "--resume: $(cat "$TMP/done") of $ntiles tiles done"
same "$TMP/single.gpkg" "$TMP/f/out.gpkg" || fail "the resumed job differs from the single run"
[ "$(find "$TMP/parts" -name '*.gpkg' | wc -l)" -eq "$ntiles" ] || fail "--parts did not keep the parts"

# A bad run option fails every tile: exit 2, stocktake's message, no output.
mkdir "$TMP/o"
expect_rc 2 sh "$RT" -z $Z -P 3 -o "$TMP/o/out.gpkg" "$OSM" "$CAD" -- "$@" --fill sometimes
expect_stderr "--fill takes most-likely or draw"
expect_stderr "a tile failed"
[ -z "$(ls -A "$TMP/o")" ] || fail "a bad option left files"

# A missing input: listing the tiles fails, nothing runs, no output.
expect_rc 2 sh "$RT" -z $Z -o "$TMP/o/out.gpkg" "$OSM" "$TMP/o/none.geojson" -- "$@"
expect_stderr "none.geojson"
expect_stderr "could not list the tiles"
[ -z "$(ls -A "$TMP/o")" ] || fail "a missing input left files"

# The script's own usage errors.
expect_rc 2 sh "$RT" -o "$TMP/o/out.gpkg" "$OSM"
expect_stderr "give the zoom"
expect_rc 2 sh "$RT" -z $Z -o "$TMP/o/out.gpkg" "$OSM" -- --report "$TMP/r"
expect_stderr "give --report to run-tiles itself"
expect_rc 0 sh "$RT" --help
grep -q "RUN-OPTIONS" "$TMP/stdout" || fail "--help does not describe RUN-OPTIONS"
exit 0
