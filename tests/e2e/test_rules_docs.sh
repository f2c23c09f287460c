#!/bin/sh
# The rule examples in the docs run: every ```rules block of docs/*.md that
# starts with "# complete example" lints clean, and the tutorial's error
# messages are the ones lint prints for the variants the text describes.
. "$ST_TESTS_ROOT/e2e/lib.sh"
n=0
for doc in "$ROOT"/docs/*.md; do
    $PY - "$doc" "$TMP" <<'PY' || fail "cannot extract examples from $doc"
import re, sys, os
doc, tmp = sys.argv[1], sys.argv[2]
text = open(doc, encoding="utf-8").read()
for i, b in enumerate(re.findall(r"```rules\n(.*?)```", text, re.S)):
    if b.startswith("# complete example"):
        d = os.path.join(tmp, "%s-%d" % (os.path.basename(doc), i))
        os.makedirs(d)
        open(os.path.join(d, "example.rules"), "w", encoding="utf-8").write(b)
PY
done
for d in "$TMP"/*.md-*; do
    [ -d "$d" ] || continue
    n=$((n + 1))
    expect_rc 0 "$STOCKTAKE" lint "$d/example.rules"
    expect_stderr "lint: 1 file, 0 errors, 0 warnings"
done
[ "$n" -ge 1 ] || fail "no complete example found in docs/"

# The tutorial's three broken variants give the messages it quotes.
t=$(ls -d "$TMP"/tutorial.md-* | head -n 1)
mkdir "$TMP/v1" "$TMP/v2" "$TMP/v3"
sed '0,/-> EDU$/s//-> EDUC/' "$t/example.rules" >"$TMP/v1/marrowby.rules"
sed 's/^  garage, shed, abri/  Ecole                                  -> EDU\n&/' "$t/example.rules" >"$TMP/v2/marrowby.rules"
sed 's/TMB 20%, RC 10%/TMB 10%, RC 10%/' "$t/example.rules" >"$TMP/v3/marrowby.rules"
for v in 1 2 3; do
    (cd "$TMP/v$v" && "$STOCKTAKE" lint marrowby.rules) 2>"$TMP/v$v.err"
done
for v in 1 2 3; do
    head -n 1 "$TMP/v$v.err" >"$TMP/line"
    grep -qF -f "$TMP/line" "$ROOT/docs/tutorial.md" || fail "tutorial does not quote: $(cat "$TMP/line")"
done
exit 0
