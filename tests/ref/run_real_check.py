"""Independent checks of one `stocktake run -r RULES -o OUT.gpkg INPUT` on a
real extract (Debian's /usr/bin/python3; GDAL's ogr, shapely 1.8; not our code).

usage: run_real_check.py RULES OUT.gpkg INPUT

Checks, each computed here from the input or the rule text:
  1. invalid footprints: shapely's is_valid over the input as GDAL reads it
     (in its own CRS) counts the same as the buildings that got one of our
     OGC validity findings (docs/findings.md, "Rings and OGC validity");
  2. exact duplicates: features whose shapely normalize()d geometry equals
     an earlier one's (a one-part MultiPolygon taken as its Polygon) count
     the same as set_aside rows whose reason is an exact duplicate;
  3. schema: every emitted value is in its field's code list or range, as
     the `field` lines of RULES' schema block state them;
  4. provenance: every field of every building has one of source, derived,
     default, drawn, unknown; `<field>_rule` is RULES:line whenever it is not
     unknown, and that line of RULES is the kind of statement that can set
     such a value (a map line "-> VALUE" or a map header "mixed as VALUE"
     for source, a derive "from" line for derived, the field's `field` or
     `unknown` line for unknown, which leaves the unknown value);
  5. unmapped: the run's `unmapped` table, for the fields filled by map
     blocks, equals what this script finds by applying RULES' map blocks
     itself (docs/rules.md "map": first filled source attribute, exact name
     then ASCII case-insensitive; trimmed; first matching line; whole value
     then its ';' parts; `nothing`; `mixed as`; blocks in file order, each
     only while its field is unknown), value by value with counts. Rows of
     derive fields (values a derive rule could not read as a number) are
     not reproduced here; they are only checked to belong to derive fields.
     The source values used are the output's copies of the source
     attributes, after checking that they equal the input's (GDAL) for
     every attribute a map block reads.
Prints one summary line; exits 1 with the reasons on any mismatch.
"""
import json
import re
import sys
import unicodedata
from collections import Counter

import shapely.wkb
from osgeo import ogr

ogr.UseExceptions()

VALIDITY_CODES = {
    "geom.unclosed-ring", "geom.too-few-points", "geom.self-intersection",
    "geom.ring-self-intersection", "geom.hole-outside-shell", "geom.nested-holes",
    "geom.disconnected-interior", "geom.nested-shells", "geom.duplicate-rings",
    "geom.invalid", "geom.geos-error",
}
PROVENANCE = {"source", "derived", "default", "drawn", "unknown"}
WS = " \t\r\n"   # what the rules trim (src/rules/text.c, docs/rules.md)

bad = []


def check(cond, *msg):
    if not cond:
        bad.append(" ".join(str(m) for m in msg))


# ---- the rule file ------------------------------------------------------

def strip_comment(line):
    out, quoted = [], False
    for ch in line:
        if ch == '"':
            quoted = not quoted
        if ch == "#" and not quoted:
            break
        out.append(ch)
    return "".join(out).strip()


def split_values(text):
    """Comma-separated values; a "quoted" value keeps its commas."""
    vals, cur, quoted = [], "", False
    for ch in text:
        if ch == '"':
            quoted = not quoted
            cur += ch
        elif ch == "," and not quoted:
            vals.append(cur.strip())
            cur = ""
        else:
            cur += ch
    vals.append(cur.strip())
    return [v[1:-1] if len(v) >= 2 and v[0] == v[-1] == '"' else v for v in vals if v]


def parse_rules(path):
    lines = open(path, encoding="utf-8").read().split("\n")
    schema, unknown, maps, derives = {}, {}, [], set()
    block = None
    for no, raw in enumerate(lines, 1):
        line = strip_comment(raw)
        if not line:
            continue
        words = line.split()
        if block is None:
            block = words[0]
            if block == "map":
                m = re.match(r"map\s+(\S+)\s+from\s+(.+?)(?:\s+ignoring\s+(case and accents|"
                             r"case|accents))?(?:\s+mixed\s+as\s+(\S+))?$", line)
                assert m, "cannot read map header at line %d" % no
                maps.append({"field": m.group(1), "sources": split_values(m.group(2)),
                             "fold": m.group(3) or "", "mixed": m.group(4),
                             "line": no, "keys": {}})
            elif block == "derive":
                derives.add(words[1])
            continue
        if words[0] == "end":
            block = None
        elif block == "schema" and words[0] == "field":
            kind = words[2]
            if kind == "codes":
                schema[words[1]] = ("codes", set(words[3:]))
            else:
                lo, hi = words[3].split("..")
                schema[words[1]] = (kind, (float(lo), float(hi)))
        elif block == "schema" and words[0] == "unknown":
            unknown[words[1]] = words[2]
        elif block == "map":
            lhs, target = line.rsplit("->", 1)
            target = target.strip()
            m = maps[-1]
            for v in split_values(lhs):
                # The starter pack has no regular-expression lines; their
                # PCRE2 semantics are not reproduced here.
                assert not v.startswith("/"), "regex line %d not reproduced by this test" % no
                assert all(ord(c) < 128 for c in v), "non-ASCII key at line %d" % no
                key = fold(v, m["fold"])
                m["keys"].setdefault(key, (None if target == "nothing" else target, no))
    return lines, schema, unknown, maps, derives


# Letters of U+00C0..U+017F that do not decompose into a base letter and
# combining marks, as docs/rules.md ("Matching text") strips them.
SPECIAL = {"\u00c6": "AE", "\u00e6": "ae", "\u00df": "ss", "\u00de": "TH", "\u00fe": "th",
           "\u00d0": "D", "\u00f0": "d", "\u00d8": "O", "\u00f8": "o", "\u0152": "OE",
           "\u0153": "oe", "\u0141": "L", "\u0142": "l", "\u0110": "D", "\u0111": "d",
           "\u0126": "H", "\u0127": "h", "\u0131": "i", "\u0138": "k", "\u013f": "L",
           "\u0140": "l", "\u0149": "n", "\u014a": "N", "\u014b": "n", "\u0166": "T",
           "\u0167": "t", "\u0132": "IJ", "\u0133": "ij", "\u017f": "s"}


def strip_accents(s):
    """docs/rules.md's accent stripping as far as it can decide a match
    against ASCII keys: letters of Latin-1 Supplement and Latin Extended-A
    to their base letters (unicodedata's decomposition, plus SPECIAL), and
    combining marks U+0300..U+036F dropped. Greek and Cyrillic stay
    non-ASCII either way; precomposed letters elsewhere are kept, as ours."""
    out = []
    for c in s:
        if c in SPECIAL:
            out.append(SPECIAL[c])
        elif "\u00c0" <= c <= "\u017f" and c not in "\u00d7\u00f7":
            out.append("".join(d for d in unicodedata.normalize("NFD", c)
                               if not "\u0300" <= d <= "\u036f"))
        elif not "\u0300" <= c <= "\u036f":
            out.append(c)
    return "".join(out)


def fold(s, how):
    """Our folding as far as it can decide a match against ASCII keys (the
    test asserts the keys are ASCII): ASCII A-Z, and the letters of its
    tables that fold to ASCII (U+0130 -> i, U+017F -> s); any other
    non-ASCII letter folds to non-ASCII and cannot match either way."""
    if "accents" in how:
        s = strip_accents(s)
    if "case" not in how:
        return s
    return "".join(chr(ord(c) + 32) if "A" <= c <= "Z" else "i" if c == "\u0130"
                   else "s" if c == "\u017f" else c for c in s)


def cut(value):
    """The unmapped list keeps 200 bytes of a value, cut at a character."""
    b = value.encode("utf-8")
    if len(b) <= 200:
        return value
    n = 200
    while n > 0 and (b[n] & 0xC0) == 0x80:
        n -= 1
    return b[:n].decode("utf-8")


# ---- applying the map blocks ------------------------------------------------

NOTHING, UNMATCHED, MIXED = "nothing", "unmatched", "mixed"


def find(m, s):
    hit = m["keys"].get(fold(s, m["fold"]))
    return hit   # (target or None, line) or None


def apply_map(m, whole):
    hit = find(m, whole)
    if hit is None and ";" in whole:
        chosen, nothing = None, False
        for part in whole.split(";"):
            part = part.strip(WS)
            if not part:
                continue
            h = find(m, part)
            if h is not None and h[0] is None:
                nothing = True
            elif h is not None and chosen is None:
                chosen = h
                if not m["mixed"]:
                    return chosen[0]
            elif h is not None and h[0] != chosen[0]:
                return MIXED
        if chosen is not None:
            return chosen[0]
        return NOTHING if nothing else UNMATCHED
    if hit is None:
        return UNMATCHED
    return NOTHING if hit[0] is None else hit[0]


def resolve(name, layer_fields):
    if name in layer_fields:
        return name
    for f in layer_fields:
        if f.lower() == name.lower():
            return f
    return None


def expected_unmapped(maps, layer_fields, rows, column_of):
    counts = Counter()
    for row in rows:
        done = set()
        for m in maps:
            if m["field"] in done:
                continue
            value = None
            for src in m["sources"]:
                f = resolve(src, layer_fields)
                v = row.get(column_of.get(f)) if f else None
                v = v.strip(WS) if v is not None else None
                if v:
                    value = v
                    break
            if value is None:
                continue
            got = apply_map(m, value)
            if got == UNMATCHED:
                counts[(m["field"], cut(value))] += 1
            elif got != NOTHING:
                done.add(m["field"])
    return counts


# ---- reading with GDAL ------------------------------------------------------

def text(v):
    return None if v is None else str(v)


def canon(v):
    """Nested JSON (an OSM relation list) compared by content: GDAL
    reformats it with spaces, we keep it compact."""
    if v and v[0] in "[{":
        try:
            return json.dumps(json.loads(v), sort_keys=True, separators=(",", ":"),
                              ensure_ascii=False)
        except ValueError:
            pass
    return v


def main():
    rules, out, src = sys.argv[1:4]
    lines, schema, unknown, maps, derives = parse_rules(rules)
    fields = list(schema)
    stmts = [strip_comment(x) for x in lines]

    # input, as GDAL reads it
    ds_in = ogr.Open(src)
    lin = ds_in.GetLayer(0)
    defn = lin.GetLayerDefn()
    layer_fields = [defn.GetFieldDefn(i).GetName() for i in range(defn.GetFieldCount())]
    map_attrs = {resolve(s, layer_fields) for m in maps for s in m["sources"]} - {None}
    invalid, seen, dups, n_in = 0, Counter(), 0, 0
    in_values = {a: Counter() for a in map_attrs}
    attr_index = {a: defn.GetFieldIndex(a) for a in map_attrs}
    # Every feature exactly once, also where the input has no feature ids:
    # the tuple of its text attributes (compared as GDAL reads them on both
    # sides) appears in buildings + set_aside as often as in the input.
    text_fields = [defn.GetFieldDefn(i).GetName() for i in range(defn.GetFieldCount())
                   if defn.GetFieldDefn(i).GetType() == ogr.OFTString]
    text_index = [defn.GetFieldIndex(a) for a in text_fields]
    in_tuples = Counter()
    for f in lin:
        n_in += 1
        in_tuples[tuple(canon(f.GetField(i)) if f.IsFieldSetAndNotNull(i) else None
                        for i in text_index)] += 1
        for a in map_attrs:
            i = attr_index[a]
            v = text(f.GetField(i)) if f.IsFieldSetAndNotNull(i) else None
            if v is not None and v.strip(WS):
                in_values[a][v.strip(WS)] += 1
        g = f.GetGeometryRef()
        if g is None or g.IsEmpty():
            continue
        try:
            shp = shapely.wkb.loads(bytes(g.ExportToWkb()))
        except Exception:       # GEOS cannot build it (unclosed, too few points)
            invalid += 1
            continue
        invalid += not shp.is_valid
        # a one-part MultiPolygon is the same footprint as its Polygon
        if shp.geom_type == "MultiPolygon" and len(shp.geoms) == 1:
            shp = shp.geoms[0]
        key = shp.normalize().wkb
        dups += seen[key] > 0
        seen[key] += 1

    # output, as GDAL reads it
    ds = ogr.Open(out)
    bl, sl, fl = (ds.GetLayerByName(n) for n in ("buildings", "set_aside", "findings"))
    cols_b = [bl.GetLayerDefn().GetFieldDefn(i).GetName()
              for i in range(bl.GetLayerDefn().GetFieldCount())]
    # a source attribute is written under its name, or as src_<name> where
    # it clashes with one of our columns (DESIGN.md, inventory.h)
    ours = {"bid", "layer", "source_id", "status", "area_m2", "perimeter_m", "flags",
            "district", "reason", "duplicate_of", "fid", "geom"}
    ours |= {s + x for s in fields for x in ("", "_from", "_rule")}
    column_of = {a: "src_" + a if a in ours else a for a in layer_fields}
    # GDAL turns a GeoJSON feature's "id" member into a field "id"; we keep
    # it as source_id
    if "id" in layer_fields and column_of["id"] not in cols_b and src.lower().endswith("json"):
        column_of["id"] = "source_id"
    out_values = {a: Counter() for a in map_attrs}
    out_tuples = Counter()
    rows = []
    rule_re = re.compile(r"^(.*):(\d+)$")
    for f in bl:
        row = {c: text(f.GetField(i)) for i, c in enumerate(cols_b)}
        rows.append(row)
        for fd in fields:
            v, frm, rule = row.get(fd), row.get(fd + "_from"), row.get(fd + "_rule")
            where = "bid %s field %s" % (row["bid"], fd)
            check(frm in PROVENANCE, where, "provenance", frm)
            kind, spec = schema[fd]
            if v is not None:
                if kind == "codes":
                    check(v in spec, where, "value", v, "not a code of", fd)
                else:
                    ok = re.fullmatch(r"-?\d+" if kind == "integer" else r"-?\d+(\.\d+)?([eE][-+]?\d+)?", v)
                    check(ok and spec[0] <= float(v) <= spec[1], where, "value", v, "outside", spec)
            if frm == "unknown":
                check(v == unknown.get(fd), where, "unknown value", v)
            else:
                check(v is not None, where, "no value with provenance", frm)
            m = rule_re.match(rule or "")
            check(frm == "unknown" or m, where, "rule", rule, "is not file:line")
            if not m:
                continue
            check(m.group(1) == rules, where, "rule file", m.group(1))
            no = int(m.group(2))
            check(1 <= no <= len(lines), where, "rule line", no)
            stmt = stmts[no - 1] if 1 <= no <= len(lines) else ""
            if frm == "source":
                check(re.search(r"->\s*%s$" % re.escape(v or ""), stmt) or
                      (stmt.startswith("map %s " % fd) and stmt.endswith("mixed as %s" % v)),
                      where, "source rule line", no, repr(stmt), "does not give", v)
            elif frm == "derived":
                check(stmt.startswith("from"), where, "derive rule line", no, repr(stmt))
            elif frm in ("default", "drawn"):
                check(re.match(r"(in\s+(district|region)\s|everywhere|learn\s|table\s)", stmt),
                      where, "defaults rule line", no, repr(stmt))
            elif frm == "unknown":
                check(re.match(r"(field|unknown)\s+%s\s" % re.escape(fd), stmt),
                      where, "unknown rule line", no, repr(stmt))
        out_tuples[tuple(canon(row.get(column_of[a])) for a in text_fields)] += 1
        for a in map_attrs:
            v = row.get(column_of[a])
            if v is not None and v.strip(WS):
                out_values[a][v.strip(WS)] += 1
    cols_s = [sl.GetLayerDefn().GetFieldDefn(i).GetName()
              for i in range(sl.GetLayerDefn().GetFieldCount())]
    exact = 0
    for f in sl:
        row = {c: text(f.GetField(i)) for i, c in enumerate(cols_s)}
        exact += row["status"] == "duplicate" and (row["reason"] or "").startswith("exact duplicate")
        out_tuples[tuple(canon(row.get(column_of[a])) for a in text_fields)] += 1
        for a in map_attrs:
            v = row.get(column_of[a])
            if v is not None and v.strip(WS):
                out_values[a][v.strip(WS)] += 1
    ours_invalid = len({f.GetField("bid") for f in fl if f.GetField("code") in VALIDITY_CODES})

    check(in_tuples == out_tuples, "features by their text attributes: missing",
          list((in_tuples - out_tuples).items())[:2], "extra", list((out_tuples - in_tuples).items())[:2])
    check(ours_invalid == invalid, "invalid: ours", ours_invalid, "shapely", invalid)
    check(exact == dups, "exact duplicates set aside: ours", exact, "shapely normalize()", dups)
    for a in map_attrs:
        check(in_values[a] == out_values[a], "values of", a, "differ between input and output:",
              (in_values[a] - out_values[a]).most_common(3), (out_values[a] - in_values[a]).most_common(3))

    map_fields = {m["field"] for m in maps}
    table = Counter()
    for f in ds.GetLayerByName("unmapped"):
        fd, v, c = f.GetField("field"), f.GetField("value"), f.GetField("count")
        if fd in map_fields:
            check((fd, v) not in table, "unmapped row repeated", fd, v)
            table[(fd, v)] += c
        else:
            check(fd in derives, "unmapped row of", fd, "which no map or derive block fills")
    want = expected_unmapped(maps, layer_fields, rows, column_of)
    check(table == want, "unmapped differs: only ours", sorted((table - want).items())[:5],
          "only here", sorted((want - table).items())[:5])

    print("%s: %d read, %d buildings; invalid %d (shapely %d); exact duplicates %d "
          "(shapely %d); %d distinct unmapped map values (%d here)"
          % (src, n_in, len(rows), ours_invalid, invalid, exact, dups, len(table), len(want)))
    if bad:
        for b in bad[:30]:
            print("  " + b, file=sys.stderr)
        print("  (%d problems)" % len(bad), file=sys.stderr)
        sys.exit(1)


main()
