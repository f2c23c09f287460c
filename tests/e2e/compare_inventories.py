#!/usr/bin/python3
"""Compare two inventories feature by feature: a single run's and a merge
of the parts of the same job (docs/scale.md). Every row of buildings,
set_aside, findings, districts and unmapped, every column (fid and
geometry blob included), in order; run_info but for the rows that name the
command and the time; and, given the report folders, report.json but for
the run's command line, times and output paths.

usage: compare_inventories.py SINGLE.gpkg MERGED.gpkg [SINGLE_DIR MERGED_DIR]
exit 0 when equal, 1 with the first differences printed, 2 on bad use.
"""
import json
import sqlite3
import sys

TABLES = ["buildings", "set_aside", "findings", "districts", "unmapped"]
VOLATILE_INFO = {"command", "finished"}
VOLATILE_RUN = {"command_line", "started", "finished", "outputs"}


def rows(path, table):
    con = sqlite3.connect("file:%s?mode=ro" % path, uri=True)
    try:
        have = {r[0] for r in con.execute("SELECT name FROM sqlite_master")}
        if table not in have:
            return None, None
        cur = con.execute('SELECT * FROM "%s" ORDER BY 1' % table)
        cols = [d[0] for d in cur.description]
        return cols, cur.fetchall()
    finally:
        con.close()


def compare_table(a, b, table, problems):
    ca, ra = rows(a, table)
    cb, rb = rows(b, table)
    if ca != cb:
        problems.append("%s: columns differ: %s against %s" % (table, ca, cb))
        return 0
    if ra is None:
        return 0
    if len(ra) != len(rb):
        problems.append("%s: %d rows against %d" % (table, len(ra), len(rb)))
    shown = 0
    for i, (x, y) in enumerate(zip(ra, rb)):
        if x != y and shown < 5:
            diff = [c for c, u, v in zip(ca, x, y) if u != v]
            problems.append("%s row %d (first column %r): differs in %s" % (table, i + 1, x[0], diff))
            shown += 1
    return len(ra)


def compare_info(a, b, problems):
    _, ra = rows(a, "run_info")
    _, rb = rows(b, "run_info")
    def keep(r):
        return sorted(tuple(x[1:]) for x in r if x[1] not in VOLATILE_INFO)
    if keep(ra) != keep(rb):
        problems.append("run_info differs: %s against %s" % (keep(ra), keep(rb)))


def compare_report(da, db, problems):
    ja = json.load(open(da + "/report.json"))
    jb = json.load(open(db + "/report.json"))
    for j in (ja, jb):
        for k in VOLATILE_RUN:
            j.get("run", {}).pop(k, None)
    for k in sorted(set(ja) | set(jb)):
        if ja.get(k) != jb.get(k):
            problems.append("report.json: '%s' differs" % k)


def main(argv):
    if len(argv) not in (3, 5):
        print(__doc__, file=sys.stderr)
        return 2
    problems = []
    counts = {t: compare_table(argv[1], argv[2], t, problems) for t in TABLES}
    compare_info(argv[1], argv[2], problems)
    if len(argv) == 5:
        compare_report(argv[3], argv[4], problems)
    if problems:
        print("\n".join(problems))
        return 1
    print("equal: " + ", ".join("%s %d rows" % (t, n) for t, n in counts.items()))
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
