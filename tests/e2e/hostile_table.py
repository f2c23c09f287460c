#!/usr/bin/python3
"""Summarise a hostile-suite log as the Markdown table of docs/reliability.md.

usage: H_LOG=/tmp/hostile.log make e2e; hostile_table.py /tmp/hostile.log

The log has one line per command: case, command, exit code, first message
line (tests/e2e/hostile.sh). The table has one row per case: the commands
run, their exit codes, and the first message.
"""
import collections
import sys

rows = collections.OrderedDict()
for line in open(sys.argv[1], encoding="utf-8", errors="replace"):
    parts = line.rstrip("\n").split("\t")
    if len(parts) < 4:
        continue
    case, cmd, rc, msg = parts[:4]
    cmd = cmd.replace("stocktake ", "")
    r = rows.setdefault(case, {"cmds": [], "msg": ""})
    r["cmds"].append(f"{cmd} {rc}")
    if not r["msg"] and msg:
        r["msg"] = msg
exits = collections.Counter()
for r in rows.values():
    for c in r["cmds"]:
        exits[c.rsplit(" ", 1)[1]] += 1
print(f"{len(rows)} cases, {sum(exits.values())} commands; exit codes: "
      + ", ".join(f"{k}: {v}" for k, v in sorted(exits.items())))
print()
print("| case | command: exit | first message |")
print("|---|---|---|")
for case, r in rows.items():
    msg = r["msg"].replace("|", "\\|")
    if len(msg) > 110:
        msg = msg[:107] + "..."
    print(f"| {case} | {', '.join(r['cmds'])} | {msg} |")
