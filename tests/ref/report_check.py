"""Checks of a stocktake report against outside references (run by
tests/ref/test_report.sh with Debian's /usr/bin/python3).

  schema JSON SCHEMA     report.json validates against docs/report.schema.json
                         (python3-jsonschema, Draft 2020-12)
  recompute JSON GPKG    every number the report takes from the run is
                         recomputed from the output GeoPackage with sqlite3
                         and the files' SHA-256 with hashlib
  html HTML JSON         report.html is well-formed (html.parser, every
                         element closed in order), refers to nothing outside
                         itself, and its map has one shape per mapped district
  dom DOM JSON           the DOM Chromium dumped: the inline script ran to its
                         end and the map still has one shape per district
  png PNG                a PNG of the browser's width and some height

Exit 0 when the check holds; otherwise a message on stderr and exit 1.
"""
import hashlib
import json
import math
import sqlite3
import struct
import sys
from html.parser import HTMLParser


def fail(msg):
    sys.stderr.write("report_check: " + msg + "\n")
    sys.exit(1)


def load(path):
    with open(path, encoding="utf-8") as f:
        return json.load(f)


# ---- schema ------------------------------------------------------------------

def check_schema(report_path, schema_path):
    import jsonschema
    schema = load(schema_path)
    jsonschema.Draft202012Validator.check_schema(schema)
    errors = sorted(jsonschema.Draft202012Validator(schema).iter_errors(load(report_path)),
                    key=lambda e: list(e.path))
    if errors:
        fail("; ".join("%s: %s" % ("/".join(map(str, e.path)), e.message) for e in errors[:5]))


# ---- recompute from the GeoPackage ------------------------------------------------

AREA_EDGES = [0, 5, 10, 20, 50, 100, 200, 500, 1000, 2000, 5000, 10000]
STOREY_LO = [1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 16, 21, 31]
SEVERITY_RANK = {"note": 0, "warning": 1, "error": 2}


def columns(db, table):
    return [r[1] for r in db.execute('PRAGMA table_info("%s")' % table)]


def expect(what, ours, theirs):
    if ours != theirs:
        fail("%s: report says %r, the GeoPackage gives %r" % (what, ours, theirs))


def recompute_balance(rep, db):
    kept = dict(db.execute("SELECT layer, count(*) FROM buildings GROUP BY layer"))
    rep_ = dict(db.execute(
        "SELECT layer, count(*) FROM buildings WHERE status = 'repaired' GROUP BY layer"))
    aside = {}
    for layer, status, n in db.execute(
            "SELECT layer, status, count(*) FROM set_aside GROUP BY layer, status"):
        aside.setdefault(layer, {})[status] = n
    tot = {"read": 0, "buildings": 0, "set_aside": 0}
    for L in rep["balance"]["layers"]:
        name = L["name"]
        dup = aside.get(name, {}).get("duplicate", 0)
        rej = aside.get(name, {}).get("rejected", 0)
        expect("buildings of layer " + name, L["buildings"], kept.get(name, 0))
        expect("repaired of layer " + name, L["repaired"], rep_.get(name, 0))
        expect("duplicates of layer " + name, L["duplicate"], dup)
        expect("rejected of layer " + name, L["rejected"], rej)
        expect("read of layer " + name, L["read"], kept.get(name, 0) + dup + rej)
        tot["read"] += L["read"]
        tot["buildings"] += L["buildings"]
        tot["set_aside"] += L["set_aside"]
    for k, v in tot.items():
        expect("total " + k, rep["balance"]["total"][k], v)


def recompute_findings(rep, db):
    by_code, by_sev = {}, {"error": 0, "warning": 0, "note": 0}
    for code, sev, n in db.execute(
            "SELECT code, severity, count(*) FROM findings GROUP BY code, severity"):
        c = by_code.setdefault(code, [0, sev])
        c[0] += n
        if SEVERITY_RANK[sev] > SEVERITY_RANK[c[1]]:
            c[1] = sev
        by_sev[sev] += n
    ours = {c["code"]: [c["count"], c["severity"]] for c in rep["findings"]["by_code"]}
    expect("findings by code", ours, by_code)
    expect("findings by severity", rep["findings"]["by_severity"], by_sev)
    counts = [c["count"] for c in rep["findings"]["by_code"]]
    if counts != sorted(counts, reverse=True):
        fail("findings by code are not most frequent first")


def storeys_bin(text):
    try:
        v = float(text)
    except (TypeError, ValueError):
        return None
    if not (v >= 1) or v > 1e6:
        return None
    s = math.floor(v)
    k = 0
    while k + 1 < len(STOREY_LO) and s >= STOREY_LO[k + 1]:
        k += 1
    return k


def recompute_distributions(rep, db):
    d = rep["distributions"]
    if d is None:
        fail("no distributions in the report")
    # The GeoPackage keeps area_m2 to 0.01 m2 (docs/output.md): a building
    # within 0.005 m2 of a bin edge may lie in either bin.
    def area_bin(a):
        b = 0
        while b + 1 < len(AREA_EDGES) and a >= AREA_EDGES[b + 1]:
            b += 1
        return b
    sure, maybe = [0] * len(AREA_EDGES), [0] * len(AREA_EDGES)
    n = 0
    for (a,) in db.execute("SELECT area_m2 FROM buildings"):
        a = a if a is not None and math.isfinite(a) else 0
        lo, hi = area_bin(a - 0.005), area_bin(a + 0.005)
        if lo == hi:
            sure[lo] += 1
        else:
            maybe[lo] += 1
            maybe[hi] += 1
        n += 1
    expect("buildings in distributions", d["buildings"], n)
    ours = [x["count"] for x in d["footprint_area_m2"]]
    expect("buildings over the area bins", sum(ours), n)
    for b, c in enumerate(ours):
        if not sure[b] <= c <= sure[b] + maybe[b]:
            fail("area bin %d: report %d, GeoPackage %d (+%d at the edge)" % (b, c, sure[b], maybe[b]))
    cols = columns(db, "buildings")
    if "storeys" not in cols or "storeys_from" not in cols:
        expect("storeys distribution", d["storeys"], None)
        return
    obs, ass, unk = [0] * len(STOREY_LO), [0] * len(STOREY_LO), 0
    for text, src in db.execute("SELECT storeys, storeys_from FROM buildings"):
        k = storeys_bin(text) if src not in (None, "unknown") else None
        if k is None:
            unk += 1
        elif src in ("source", "derived"):
            obs[k] += 1
        else:
            ass[k] += 1
    expect("storeys observed", [x["observed"] for x in d["storeys"]["bins"]], obs)
    expect("storeys assumed", [x["assumed"] for x in d["storeys"]["bins"]], ass)
    expect("storeys unknown", d["storeys"]["unknown"], unk)


def recompute_districts(rep, db):
    if not rep["districts"]:
        return
    cols = columns(db, "buildings")
    fields = [f["name"] for f in rep["fields"]]
    per = {}
    for row in db.execute("SELECT district, area_m2, status, %s FROM buildings" % ", ".join(
            ['"%s_from"' % f for f in fields] or ["NULL"])):
        key = row[0] if row[0] is not None else "none"
        p = per.setdefault(key, {"buildings": 0, "area": 0.0, "repaired": 0,
                                 "fields": {f: {} for f in fields}})
        p["buildings"] += 1
        p["area"] += row[1] or 0
        p["repaired"] += row[2] == "repaired"
        for f, src in zip(fields, row[3:]):
            src = src or "unknown"
            p["fields"][f][src] = p["fields"][f].get(src, 0) + 1
    aside = {}
    if "district" in columns(db, "set_aside"):
        for key, status, n in db.execute(
                "SELECT coalesce(district, 'none'), status, count(*) FROM set_aside GROUP BY 1, 2"):
            aside.setdefault(key, {})[status] = n
    total = 0
    for d in rep["districts"]:
        if aside:
            got = aside.get(d["key"], {})
            expect("duplicates in district " + d["key"], d["duplicate"], got.get("duplicate", 0))
            expect("rejected in district " + d["key"], d["rejected"], got.get("rejected", 0))
        p = per.pop(d["key"], {"buildings": 0, "area": 0.0, "repaired": 0,
                               "fields": {f: {} for f in fields}})
        expect("buildings of district " + d["key"], d["buildings"], p["buildings"])
        expect("repaired in district " + d["key"], d["repaired"], p["repaired"])
        # each area_m2 in the GeoPackage is rounded to 0.01 m2
        if abs(d["footprint_m2"] - p["area"]) > 0.005 * (p["buildings"] + 1) + 1e-9 * p["area"]:
            fail("footprint area of %s: report %r, GeoPackage %r" % (d["key"], d["footprint_m2"],
                                                                    p["area"]))
        for f in fields:
            got = {k: v for k, v in d["fields"][f].items() if v}
            expect("provenance of %s in %s" % (f, d["key"]), got, p["fields"][f])
        ref = d["reference"]
        if ref["expected"] is not None and ref["expected"] > 0:
            if abs(ref["ratio"] - d["buildings"] / ref["expected"]) > 1e-6:
                fail("ratio of %s is not buildings / expected" % d["key"])
        total += d["buildings"]
    if per:
        fail("districts in the GeoPackage but not in the report: %s" % sorted(per))
    expect("buildings over all districts", total, rep["balance"]["total"]["buildings"])


def recompute_fields(rep, db):
    for f in rep["fields"]:
        got = dict(db.execute('SELECT coalesce("%s_from", \'unknown\'), count(*) FROM buildings '
                              'GROUP BY 1' % f["name"]))
        ours = {k: v for k, v in f["by_provenance"].items() if v}
        expect("provenance of field " + f["name"], ours, got)


def recompute_files(rep):
    for f in rep["run"]["files"]:
        h = hashlib.sha256()
        with open(f["path"], "rb") as fp:
            for block in iter(lambda: fp.read(1 << 16), b""):
                h.update(block)
        expect("sha256 of " + f["path"], f["sha256"], h.hexdigest())


def check_recompute(report_path, gpkg_path):
    rep = load(report_path)
    db = sqlite3.connect("file:%s?mode=ro" % gpkg_path, uri=True)
    recompute_balance(rep, db)
    recompute_findings(rep, db)
    recompute_distributions(rep, db)
    recompute_fields(rep, db)
    recompute_districts(rep, db)
    recompute_files(rep)
    if not rep["run"]["files"]:
        fail("no input file hashed")


# ---- HTML ---------------------------------------------------------------------------

VOID = {"area", "base", "br", "col", "embed", "hr", "img", "input", "link", "meta", "source",
        "track", "wbr"}
FORBIDDEN_TAGS = {"link", "img", "iframe", "object", "embed", "frame", "base"}


def external(value):
    v = value.strip().lower()
    return v.startswith(("http:", "https:", "//", "ftp:", "data:", "file:")) or "://" in v


class Page(HTMLParser):
    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack, self.problems = [], []
        self.map_shapes, self.in_map, self.script_ok, self.scripts = 0, 0, None, 0
        self.headline = None

    def check_attrs(self, tag, attrs):
        for name, value in attrs:
            if value is None:
                continue
            if name in ("src", "href", "xlink:href", "action", "poster", "srcset") and external(value):
                self.problems.append("external reference %s=%r on <%s>" % (name, value, tag))
            if "url(" in value and "url(#" not in value.replace(" ", ""):
                self.problems.append("url() to outside in <%s>" % tag)
        if tag in FORBIDDEN_TAGS:
            self.problems.append("<%s> element" % tag)
        if tag == "script" and any(n == "src" for n, _ in attrs):
            self.problems.append("<script src>")

    def shape(self, tag, attrs):
        a = dict(attrs)
        if tag == "svg" and a.get("id") == "districtmap":
            self.in_map = len(self.stack) + 1
        if tag == "path" and self.in_map and "district" in (a.get("class") or "").split():
            self.map_shapes += 1
        if tag == "html":
            self.script_ok = a.get("data-script")
        if tag == "script":
            self.scripts += 1
        if tag == "section" and a.get("id") == "headline":
            self.headline = a.get("class")

    def handle_starttag(self, tag, attrs):
        self.check_attrs(tag, attrs)
        self.shape(tag, attrs)
        if tag not in VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        self.check_attrs(tag, attrs)
        self.shape(tag, attrs)

    def handle_endtag(self, tag):
        if tag in VOID:
            return
        if not self.stack or self.stack[-1] != tag:
            self.problems.append("</%s> closes <%s>" % (tag, self.stack[-1] if self.stack else "nothing"))
            return
        if self.in_map and len(self.stack) == self.in_map:
            self.in_map = 0
        self.stack.pop()


def parse_page(path):
    p = Page()
    with open(path, encoding="utf-8") as f:
        p.feed(f.read())
    p.close()
    return p


def mapped_districts(rep):
    return sum(1 for d in rep["districts"] if d["mapped"])


def check_html(html_path, report_path):
    rep = load(report_path)
    p = parse_page(html_path)
    if p.stack:
        p.problems.append("unclosed elements: %s" % p.stack)
    if p.problems:
        fail("; ".join(p.problems[:5]))
    expect("district shapes in report.html", p.map_shapes, mapped_districts(rep))
    expect("one inline script", p.scripts, 1)
    expect("headline verdict", p.headline, "headline " + ("fail" if rep["gate"]["failed"] else "pass"))


def check_dom(dom_path, report_path):
    rep = load(report_path)
    p = parse_page(dom_path)
    expect("the page script ran through (data-script on <html>)", p.script_ok, "ok")
    expect("district shapes in the browser's DOM", p.map_shapes, mapped_districts(rep))


def check_png(path, width):
    with open(path, "rb") as f:
        head = f.read(24)
    if head[:8] != b"\x89PNG\r\n\x1a\n":
        fail("%s is not a PNG" % path)
    w, h = struct.unpack(">II", head[16:24])
    if w != int(width) or h < 400:
        fail("screenshot is %dx%d" % (w, h))


def main(argv):
    cmd = argv[1] if len(argv) > 1 else ""
    if cmd == "schema" and len(argv) == 4:
        check_schema(argv[2], argv[3])
    elif cmd == "recompute" and len(argv) == 4:
        check_recompute(argv[2], argv[3])
    elif cmd == "html" and len(argv) == 4:
        check_html(argv[2], argv[3])
    elif cmd == "dom" and len(argv) == 4:
        check_dom(argv[2], argv[3])
    elif cmd == "png" and len(argv) == 4:
        check_png(argv[2], argv[3])
    else:
        fail("usage: see the module docstring")


if __name__ == "__main__":
    main(sys.argv)
