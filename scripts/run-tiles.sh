#!/bin/sh
# scripts/run-tiles.sh -- run one stocktake job tile by tile on GNU parallel
# and merge the parts into the inventory a single run would give
# (docs/scale.md).
#
# Usage:   scripts/run-tiles.sh [OPTIONS] -z ZOOM -o OUT INPUT... [-- RUN-OPTIONS...]
#
#   -z, --zoom ZOOM       split the job into the web-mercator tiles of ZOOM
#                         that hold footprints ('stocktake tiles', which
#                         also writes the layer facts every tile takes with
#                         'run --facts': a GeoPackage input is then read
#                         through its R-tree for each tile's window only)
#   -o, --output OUT      the merged inventory (OUT.gpkg, .geojson, ...)
#   --report DIR          the merged report (DIR/report.json, report.html)
#   -P, --jobs N          tiles run at once on each host (default: one per
#                         CPU core, GNU parallel's default)
#   -t, --tile-threads N  threads of each tile's run (default 1)
#   --halo METRES         the halo each tile reads (stocktake run --halo)
#   --parts DIR           write the parts, the tile list, the layer facts
#                         (facts.txt) and the job log in
#                         DIR and keep them (default: a temporary folder
#                         beside OUT, removed at the end)
#   --keep-parts          keep the temporary parts folder and say where
#   --resume              with --parts: run only the tiles the job log does
#                         not show done (after a failure or an interruption)
#   --retries N           try a failing tile up to N times
#   -S, --sshlogin LOGIN  run tiles on LOGIN too (GNU parallel's --sshlogin;
#                         repeatable; ':' is this machine)
#   --slf, --sshloginfile FILE   the same from a file (GNU parallel's)
#   -q, --quiet           no messages of its own, merge with -q
#   -h, --help            this text
#
#   RUN-OPTIONS, everything after '--', go to every tile's 'stocktake run'
#   and to 'stocktake merge' unchanged (-r, --districts, --district-key,
#   --region-key, --reference, --fill, --seed, --crs, --max-memory,
#   --fail-on ...); --crs goes to 'stocktake tiles' too. -o, --report,
#   --tile, --bbox, --halo and --facts are this script's to give.
#
# Input:   $STOCKTAKE, the binary (default: 'stocktake' on PATH, else
#          build/stocktake beside this script); $PARALLEL, more options for
#          GNU parallel (its own convention, e.g. PARALLEL='--delay 1').
#          With --sshlogin every host runs the same command in this folder
#          ($PWD): the binary, the inputs, the rules and the parts folder
#          must be at the same paths there (a shared file system).
# Output:  OUT (and DIR with --report) from 'stocktake merge'; on stderr the
#          tile count, each failing tile's messages tagged with the tile,
#          and merge's summary.
# Errors:  exit 2 with a message when the options are wrong, GNU parallel
#          or the binary is missing, the inputs hold no footprint with
#          coordinates, a tile fails (the others are stopped at once) or
#          the merge fails: OUT is then not written. Exit 1 when the merge
#          wrote OUT but the quality gate failed (as 'stocktake run').
# Limits:  every part's name goes on merge's command line: about 30 bytes a
#          tile, so some tens of thousands of tiles at most (ARG_MAX); beyond
#          that, run 'stocktake merge ... PARTS' by hand: merge takes a folder
#          for the parts in it.
set -eu

me=run-tiles
usage() {
    sed -n '/^# Usage:/,/^set -eu/p' "$0" | sed -e '$d' -e 's/^# \{0,1\}//'
}
die() { echo "$me: $*" >&2; exit 2; }
say() { [ "$quiet" = 1 ] || echo "$me: $*" >&2; }

# q WORD: WORD quoted for the shell (to keep lists of words in strings).
q() { printf "'%s'" "$(printf '%s' "$1" | sed "s/'/'\\\\''/g")"; }

# whole N MIN: N is a whole number >= MIN.
whole() {
    case $1 in '' | *[!0-9]*) return 1 ;; esac
    [ "$1" -ge "$2" ]
}

zoom=""; out=""; report=""; jobs=""; threads=1; halo=""; parts=""; keep=0
resume=0; retries=""; quiet=0
logins=""      # quoted: -S LOGIN / --slf FILE for parallel
inputs=""      # quoted INPUT words
runopts=""     # quoted RUN-OPTIONS words
crs=""
ninputs=0

need() { [ "$2" -ge 2 ] || die "$1 needs a value (see --help)"; }
while [ $# -gt 0 ]; do
    case $1 in
        -h | --help) usage; exit 0 ;;
        -z | --zoom) need "$1" $#; zoom=$2; shift 2 ;;
        -o | --output) need "$1" $#; out=$2; shift 2 ;;
        --report) need "$1" $#; report=$2; shift 2 ;;
        -P | --jobs) need "$1" $#; jobs=$2; shift 2 ;;
        -t | --tile-threads) need "$1" $#; threads=$2; shift 2 ;;
        --halo) need "$1" $#; halo=$2; shift 2 ;;
        --parts) need "$1" $#; parts=$2; shift 2 ;;
        --keep-parts) keep=1; shift ;;
        --resume) resume=1; shift ;;
        --retries) need "$1" $#; retries=$2; shift 2 ;;
        -S | --sshlogin) need "$1" $#; logins="$logins --sshlogin $(q "$2")"; shift 2 ;;
        --slf | --sshloginfile) need "$1" $#; logins="$logins --sshloginfile $(q "$2")"; shift 2 ;;
        -q | --quiet) quiet=1; shift ;;
        --) shift
            while [ $# -gt 0 ]; do
                case $1 in
                    -o | --output | --report | --tile | --bbox | --halo | --facts)
                        die "give $1 to $me itself, not after '--' (see --help)" ;;
                    --crs) need "$1" $#; crs=$2 ;;
                esac
                runopts="$runopts $(q "$1")"
                shift
            done ;;
        -?*) die "unknown option '$1' (see --help)" ;;
        *) inputs="$inputs $(q "$1")"; ninputs=$((ninputs + 1)); shift ;;
    esac
done

whole "$zoom" 0 || die "give the zoom of the tiles with -z (a whole number, e.g. 14)"
[ -n "$out" ] || die "say where to write the inventory with -o OUT"
[ "$ninputs" -gt 0 ] || die "give at least one input layer"
[ -z "$jobs" ] || whole "$jobs" 1 || die "-P takes a number of tiles at once, not '$jobs'"
whole "$threads" 1 || die "-t takes a number of threads, not '$threads'"
[ -z "$retries" ] || whole "$retries" 1 || die "--retries takes a whole number, not '$retries'"
[ "$resume" = 0 ] || [ -n "$parts" ] || die "--resume needs the --parts folder of the earlier attempt"

# GNU parallel (moreutils ships another program of the same name)
parallel --version 2>/dev/null | grep -q '^GNU parallel' ||
    die "GNU parallel is missing (Debian: apt-get install parallel; scripts/deps.sh)"

if [ -n "${STOCKTAKE:-}" ]; then
    st=$STOCKTAKE
elif command -v stocktake >/dev/null 2>&1; then
    st=stocktake            # looked up on each host's PATH
else
    st=$(cd "$(dirname "$0")/.." && pwd)/build/stocktake
fi
case $st in */*) [ -x "$st" ] || die "no stocktake binary at $st (make, or set STOCKTAKE)" ;;
    *) command -v "$st" >/dev/null 2>&1 || die "no '$st' on PATH (set STOCKTAKE)" ;; esac
case $st in /*) ;; */*) st=$(cd "$(dirname "$st")" && pwd)/$(basename "$st") ;; esac

# The parts folder, as an absolute path (the same on every host).
tmp=""
if [ -n "$parts" ]; then
    mkdir -p "$parts" || die "cannot make the parts folder $parts"
else
    outdir=$(dirname "$out")
    [ -d "$outdir" ] || die "no folder $outdir for $out"
    parts=$(mktemp -d "$outdir/.$(basename "$out").parts.XXXXXX") ||
        die "cannot make a parts folder in $outdir"
    tmp=$parts
fi
parts=$(cd "$parts" && pwd)
[ -n "$tmp" ] && tmp=$parts
# shellcheck disable=SC2317  # called by the trap
finish() {
    if [ -n "$tmp" ]; then
        if [ "$keep" = 1 ]; then
            say "parts kept in $tmp"
        else
            rm -rf "$tmp"
        fi
    fi
}
trap finish EXIT
trap 'exit 130' INT
trap 'exit 143' TERM

# 1. The tiles, one Z/X/Y a line, and the layer facts of the inputs.
eval "set -- $inputs"
if [ -n "$crs" ]; then set -- --crs "$crs" "$@"; fi
rc=0
"$st" tiles -z "$zoom" --facts "$parts/facts.txt" "$@" >"$parts/tiles.txt" || rc=$?
[ "$rc" -eq 0 ] || die "'stocktake tiles' could not list the tiles (exit $rc); nothing written"
ntiles=$(wc -l <"$parts/tiles.txt" | tr -d ' ')
[ "$ntiles" -gt 0 ] ||
    die "no footprint of the inputs has coordinates to place in a tile; use 'stocktake run'"
say "$ntiles tiles at zoom $zoom; parts in $parts"

# 2. One part a tile: Z/X/Y to PARTS/Z-X-Y.gpkg. parallel -q quotes each
# word of the command (paths with spaces), replacement strings still work.
eval "set -- $inputs"
eval "set -- $runopts -j $(q "$threads") -q -o $(q "$parts")/'{= s:/:-:g =}.gpkg' \"\$@\""
if [ -n "$halo" ]; then set -- --halo "$halo" "$@"; fi
set -- "$st" run --tile '{}' --facts "$parts/facts.txt" "$@"
popts="--will-cite --halt now,fail=1 --joblog $(q "$parts/joblog") --tagstring {}"
[ -n "$jobs" ] && popts="$popts --jobs $(q "$jobs")"
[ -n "$retries" ] && popts="$popts --retries $(q "$retries")"
[ "$resume" = 1 ] && popts="$popts --resume-failed"
if [ -n "$logins" ]; then
    popts="$popts $logins --workdir $(q "$PWD")"
    # GNU parallel runs a remote job with the shell named by PARALLEL_SHELL,
    # else by the remote SHELL; where SHELL is unset (CI, cron, some batch
    # systems) the job does not run at all yet reports success.
    export PARALLEL_SHELL="${PARALLEL_SHELL:-/bin/sh}"
fi
[ "$quiet" = 0 ] && [ -t 2 ] && popts="$popts --bar"
rc=0
eval "parallel $popts -q \"\$@\" :::: $(q "$parts/tiles.txt")" || rc=$?
if [ "$rc" -ne 0 ]; then
    # the job log: Seq Host Starttime JobRuntime Send Receive Exitval Signal
    # Command, a line per attempt (the last counts); a tile stopped by a
    # signal was stopped because another failed
    failed=$(awk -F'\t' 'NR > 1 { code[$1] = $8 == 0 ? $7 : 0 }
                         END { for (s in code) if (code[s] != 0) print s ":" code[s] }' \
                 "$parts/joblog" | sort -n |
        while IFS=: read -r seq code; do
            printf ' %s (exit %s)' "$(sed -n "${seq}p" "$parts/tiles.txt")" "$code"
        done)
    [ -n "$failed" ] || failed=" (none recorded: GNU parallel exit $rc)"
    [ -n "$tmp" ] && [ "$keep" = 0 ] && hint="" ||
        hint="; rerun the rest with --parts $parts --resume"
    die "a tile failed, the others were stopped; nothing written. Failed:$failed" \
        "(messages above, each line tagged with its tile)$hint"
fi

# 3. Merge every tile's part, in the order of the list.
set --
while IFS= read -r t; do
    p=$parts/$(printf '%s' "$t" | tr / -).gpkg
    [ -f "$p" ] || die "tile $t left no part $p; nothing written"
    set -- "$@" "$p"
done <"$parts/tiles.txt"
eval "set -- $runopts \"\$@\""
if [ -n "$report" ]; then set -- --report "$report" "$@"; fi
if [ "$quiet" = 1 ]; then set -- -q "$@"; fi
say "merging $ntiles parts into $out"
rc=0
"$st" merge -o "$out" "$@" || rc=$?
case $rc in
    0) exit 0 ;;
    1) say "merged into $out; the quality gate failed (exit 1, as stocktake run)"; exit 1 ;;
    *) die "'stocktake merge' failed (exit $rc); nothing written" ;;
esac
