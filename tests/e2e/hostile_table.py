#!/usr/bin/python3
"""Summarise a hostile-suite log as the Markdown table of docs/reliability.md.

usage: H_LOG=/tmp/hostile.log make e2e; hostile_table.py /tmp/hostile.log

The log has one line per command: case, command, exit code, first message
line (tests/e2e/hostile.sh). The table has one row per case, the runs of
one kind (truncations "to N%", bit flips "(seed N)") folded into one row:
how many cases, the exit codes of their commands, a first message.
"""
import collections
import re
import sys

FOLD = re.compile(r" to \d+%| \(seed \d+\)")
rows = collections.OrderedDict()
for line in open(sys.argv[1], encoding="utf-8", errors="replace"):
    parts = line.rstrip("\n").split("\t")
    if len(parts) < 4:
        continue
    case, cmd, rc, msg = parts[:4]
    key = FOLD.sub(" (folded)", case)
    r = rows.setdefault(key, {"cases": set(), "exits": collections.Counter(), "msg": ""})
    r["cases"].add(case)
    r["exits"][(cmd.replace("stocktake ", ""), rc)] += 1
    if not r["msg"] and msg:
        r["msg"] = msg
total = collections.Counter()
ncases = 0
for r in rows.values():
    ncases += len(r["cases"])
    for (_, rc), n in r["exits"].items():
        total[rc] += n
print(f"{ncases} cases, {sum(total.values())} commands; exit codes: "
      + ", ".join(f"{k}: {v}" for k, v in sorted(total.items())))
print()
print("| case | cases | command: exit (× times) | first message |")
print("|---|---:|---|---|")
for key, r in rows.items():
    exits = ", ".join(f"{c} {rc}" + (f" ×{n}" if n > 1 else "")
                      for (c, rc), n in r["exits"].items())
    msg = r["msg"].replace("|", "\\|")
    if len(msg) > 100:
        msg = msg[:97] + "..."
    print(f"| {key.replace(' (folded)', ' (all)')} | {len(r['cases'])} | {exits} | {msg} |")
