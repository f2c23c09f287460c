# Shared helpers for end-to-end and reference tests (sourced, POSIX sh).
# Each test: . "$ST_TESTS_ROOT/e2e/lib.sh"; uses $STOCKTAKE; calls fail.

set -u
ROOT=$(cd "$ST_TESTS_ROOT/.." && pwd)
DATA=$ST_TESTS_ROOT/data
REAL=$(cd "$ROOT/../shared/data/real" 2>/dev/null && pwd || echo "")
PY=/usr/bin/python3
TMP=$(mktemp -d)
trap 'rm -rf "$TMP"' EXIT

fail() { echo "FAIL: $*" >&2; exit 1; }
skip() { echo "SKIP: $*" >&2; exit 77; }

# expect_rc CODE CMD...: run CMD, fail unless it exits with CODE.
expect_rc() {
    want=$1; shift
    "$@" >"$TMP/stdout" 2>"$TMP/stderr"; got=$?
    [ "$got" -eq "$want" ] || { cat "$TMP/stderr" >&2; fail "'$*' exited $got, expected $want"; }
}

# expect_stderr PATTERN: the last expect_rc's stderr matches (grep -E).
expect_stderr() {
    grep -qE -e "$1" "$TMP/stderr" || { cat "$TMP/stderr" >&2; fail "stderr does not match /$1/"; }
}

# ogr_count FILE [LAYER]: feature count as GDAL's ogrinfo reports it.
ogr_count() {
    ogrinfo -ro -so -al "$@" 2>/dev/null | sed -n 's/^Feature Count: //p' | head -n 1
}

# sha FILE: content hash, to prove inputs were not modified.
sha() { sha256sum "$1" | cut -d' ' -f1; }
