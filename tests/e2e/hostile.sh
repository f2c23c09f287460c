# Helpers for the hostile-input suite, tests/e2e/test_hostile_*.sh
# (sourced after lib.sh; POSIX sh).
#
# Each case runs one stocktake command on a broken, absurd or malicious
# input and asserts what DESIGN.md promises whatever the input:
#   - it ends within 60 s (timeout; a hang fails the case);
#   - it is not killed by a signal and no sanitizer speaks (a crash fails);
#   - exit 2 comes with a message matching the case's pattern, which
#     names the offending file, and leaves the output folder $HOUT empty
#     (no output, no temporary file);
#   - where the run can go on (exit 0 or 1), the caller checks the finding;
#   - every input is byte-identical afterwards (sha256) and no file
#     appeared beside it (journals, temporaries).
# With H_LOG set, each case appends "name<TAB>exit<TAB>message" to it;
# docs/reliability.md's table of outcomes is made from that log.

HOUT=$TMP/out
mkdir -p "$HOUT"
H_INPUTS=""
H_NAME=""
H_CASES=0

# h_case NAME FILE...: start a case; FILEs are its inputs (hashed now).
h_case() {
    H_NAME=$1; shift
    H_INPUTS="$*"
    : >"$TMP/h_sums"
    for h_f in "$@"; do
        printf '%s %s\n' "$(sha "$h_f")" "$h_f" >>"$TMP/h_sums"
        ls -A "$(dirname "$h_f")" >"$TMP/h_dir_$(h_key "$h_f")"
    done
    rm -rf "$HOUT"; mkdir -p "$HOUT"
}

h_key() { printf '%s' "$(dirname "$1")" | cksum | cut -d' ' -f1; }

h_fail() { fail "[$H_NAME] $*"; }

# h_run WANT PATTERN CMD...: run CMD; WANT is 2 (must fail cleanly), go
# (must go on: exit 0 or 1) or any (0, 1 or 2: bit flips that may leave a
# readable file); PATTERN (grep -E) must match stderr on exit 2.
h_run() {
    h_want=$1; h_pat=$2; shift 2
    H_CASES=$((H_CASES + 1))
    timeout -k 5 60 "$@" >"$TMP/stdout" 2>"$TMP/stderr" </dev/null
    H_RC=$?
    [ "$H_RC" -ne 124 ] && [ "$H_RC" -ne 137 ] || h_fail "did not finish within 60 s: $*"
    [ "$H_RC" -lt 128 ] || { tail -n 20 "$TMP/stderr" >&2; h_fail "killed by signal $((H_RC - 128)): $*"; }
    if grep -aqE 'AddressSanitizer|LeakSanitizer|runtime error:|UndefinedBehaviorSanitizer' "$TMP/stderr"; then
        tail -n 30 "$TMP/stderr" >&2; h_fail "sanitizer report: $*"
    fi
    case $h_want in
        2) [ "$H_RC" -eq 2 ] || { cat "$TMP/stderr" >&2; h_fail "exit $H_RC, expected 2: $*"; } ;;
        go) [ "$H_RC" -le 1 ] || { cat "$TMP/stderr" >&2; h_fail "exit $H_RC, expected the run to go on: $*"; } ;;
        any) [ "$H_RC" -le 2 ] || h_fail "exit $H_RC: $*" ;;
    esac
    if [ "$H_RC" -eq 2 ]; then
        grep -aqE "$h_pat" "$TMP/stderr" || { cat "$TMP/stderr" >&2; h_fail "message does not match /$h_pat/"; }
        [ -z "$(ls -A "$HOUT")" ] || h_fail "output left after exit 2: $(ls -A "$HOUT")"
    fi
    h_inputs_unchanged
    if [ -n "${H_LOG:-}" ]; then
        h_msg=$(grep -a -m 1 -E 'error|stopped|refus|limit' "$TMP/stderr" | sed "s|$TMP/||g" | cut -c 1-160)
        printf '%s\t%s\t%s\t%s\n' "$H_NAME" "$(basename "$1") $2" "$H_RC" "$h_msg" >>"$H_LOG"
    fi
}

h_inputs_unchanged() {
    while read -r h_sum h_f; do
        [ "$(sha "$h_f")" = "$h_sum" ] || h_fail "input changed: $h_f"
    done <"$TMP/h_sums"
    for h_f in $H_INPUTS; do
        ls -A "$(dirname "$h_f")" | cmp -s - "$TMP/h_dir_$(h_key "$h_f")" ||
            h_fail "files appeared beside the input $h_f: $(ls -A "$(dirname "$h_f")")"
    done
}

# h_done: print the number of cases (the runner shows it on failure).
h_done() { echo "$H_CASES hostile cases passed"; }

# flip_bits FILE SEED COUNT OUT: copy FILE to OUT with COUNT bits flipped at
# positions drawn from SEED (deterministic), header bytes included.
flip_bits() {
    $PY - "$1" "$2" "$3" "$4" <<'PY'
import random, sys
data = bytearray(open(sys.argv[1], "rb").read())
rng = random.Random(int(sys.argv[2]))
for _ in range(int(sys.argv[3])):
    i = rng.randrange(len(data))
    data[i] ^= 1 << rng.randrange(8)
open(sys.argv[4], "wb").write(bytes(data))
PY
}

# truncate_to FILE PERCENT OUT: the first PERCENT % of FILE's bytes.
truncate_to() {
    n=$(wc -c <"$1")
    head -c $((n * $2 / 100)) "$1" >"$3"
}
