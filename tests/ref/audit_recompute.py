"""Recompute stocktake's audit from its output GeoPackage, independently of
the C code, and compare it with the `districts` layer.

Reference: Python's own sqlite3 module reads the GeoPackage tables; shapely
(on GEOS) places every kept building's representative point in the district
polygons as written to the `districts` layer; the csv module reads the
reference counts. Everything is summed here from the per-building rows:

  buildings, repaired        rows of `buildings` per district, by status
  duplicate, rejected        rows of `set_aside` per district, by status
  footprint_m2               sum of area_m2 (written with 2 decimals)
  floor_m2, floor_known      sum of area_m2 * storeys where storeys_from is
                             not 'unknown'
  <field>_<provenance>       share of the district's buildings
  findings_<severity>        `findings` rows whose bid is in the district
                             (bids in no layer count for "none")
  expected, ratio, reference the reference CSV (key, count columns), with
                             the thresholds given on the command line

usage: audit_recompute.py OUT.gpkg REFERENCE.csv UNDER OVER
Exit 0 when every figure matches; prints one line per mismatch.
"""
import csv
import sqlite3
import struct
import sys
from collections import defaultdict

from shapely import wkb
from shapely.prepared import prep

path, ref_path, under, over = sys.argv[1], sys.argv[2], float(sys.argv[3]), float(sys.argv[4])
db = sqlite3.connect(path)
PROV = ["source", "derived", "default", "drawn", "unknown"]


def gpkg_geom(blob):
    """Geometry of a GeoPackage binary blob (GeoPackage 1.2, clause 2.1.3)."""
    if blob is None:
        return None
    flags = blob[3]
    env = (flags >> 1) & 7
    size = 8 + {0: 0, 1: 32, 2: 48, 3: 48, 4: 64}[env]
    if flags & 0x10:
        return None
    return wkb.loads(bytes(blob[size:]))


def columns(table):
    return [r[1] for r in db.execute(f"PRAGMA table_info({table})")]


bcols = columns("buildings")
fields = [c[:-5] for c in bcols if c.endswith("_from")]
bad = []

# ---- independent placement of buildings in the written district polygons ----
districts = []
for key, blob in db.execute("SELECT district, geom FROM districts ORDER BY fid"):
    g = gpkg_geom(blob)
    districts.append((key, prep(g) if g is not None else None, g))
placed_bad = 0
rows = list(db.execute("SELECT bid, status, area_m2, district, geom"
                       + "".join(f', "{f}", "{f}_from"' for f in fields)
                       + " FROM buildings"))
for r in rows:
    g = gpkg_geom(r[4])
    p = g.representative_point()
    want = "none"
    for key, pg, _ in districts:   # layer order: the first covering wins
        if pg is not None and pg.covers(p):
            want = key
            break
    if want != r[3]:
        placed_bad += 1
        if placed_bad <= 5:
            bad.append(f"bid {r[0]}: written district {r[3]}, shapely places it in {want}")

# ---- sums per district --------------------------------------------------------
agg = defaultdict(lambda: defaultdict(float))
for r in rows:
    d = agg[r[3]]
    d["buildings"] += 1
    d["repaired"] += r[1] == "repaired"
    d["footprint_m2"] += r[2]
    vals = r[5:]
    for i, f in enumerate(fields):
        d[f"{f}_{vals[2 * i + 1]}"] += 1
    if "storeys" in fields:
        i = fields.index("storeys")
        v, frm = vals[2 * i], vals[2 * i + 1]
        if frm != "unknown" and v not in (None, ""):
            d["floor_m2"] += r[2] * float(v)
            d["floor_known"] += 1
            d["floor_tol"] += 0.005 * float(v)   # area_m2 is written to 2 decimals
where = {}
for bid, dist in db.execute("SELECT bid, district FROM buildings"):
    where[bid] = dist
for bid, status, dist in db.execute("SELECT bid, status, district FROM set_aside"):
    where[bid] = dist
    agg[dist][status] += 1
for bid, sev in db.execute("SELECT bid, severity FROM findings"):
    agg[where.get(bid, "none")][f"findings_{sev}"] += 1

ref = {}
with open(ref_path, newline="", encoding="utf-8-sig") as fh:
    rd = csv.reader(fh)
    next(rd)
    for row in rd:
        if row:
            ref[row[0].strip()] = int(row[1])

# ---- compare with the districts layer -------------------------------------------
dcols = columns("districts")
written = {r[dcols.index("district")]: dict(zip(dcols, r))
           for r in db.execute("SELECT * FROM districts")}
for key in set(agg) - set(written):
    bad.append(f"district {key} has buildings but no row in the districts layer")
for key, w in written.items():
    a = agg[key]
    n = a["buildings"]
    def same(name, want, tol=0.0):
        got = w[name]
        if got is None and want is None:
            return
        if got is None or want is None or abs(got - want) > tol:
            bad.append(f"{key}.{name}: written {got}, recomputed {want}")
    for name in ("buildings", "repaired", "duplicate", "rejected", "floor_known",
                 "findings_error", "findings_warning", "findings_note"):
        same(name, a[name])
    # area_m2 and the sums are written to 2 decimals
    same("footprint_m2", a["footprint_m2"], 0.005 * n + 0.005 + 1e-9)
    same("floor_m2", a["floor_m2"], a["floor_tol"] + 0.005 + 1e-9)
    for f in fields:
        for p in PROV:
            same(f"{f}_{p}", a[f"{f}_{p}"] / n if n else None, 0.00005 + 1e-12)
    exp = ref.get(key)
    same("expected", exp)
    ratio = n / exp if exp else None
    same("ratio", ratio, 0.00005 + 1e-12)
    if key == "none" or exp is None:
        state = None
    elif key not in [d[0] for d in districts if d[2] is not None] and w["geom"] is None:
        state = "absent"
    elif exp == 0:
        state = "over" if n else "ok"
    else:
        state = "under" if ratio < under else "over" if ratio > over else "ok"
    if w["reference"] != state:
        bad.append(f"{key}.reference: written {w['reference']}, recomputed {state}")
for key in ref:
    if key not in written:
        bad.append(f"reference district {key} is missing from the districts layer")

# ---- the balance: every feature once ----------------------------------------------
nb = db.execute("SELECT count(*) FROM buildings").fetchone()[0]
ns = db.execute("SELECT count(*) FROM set_aside").fetchone()[0]
tot = sum(w["buildings"] + w["duplicate"] + w["rejected"] for w in written.values())
if tot != nb + ns:
    bad.append(f"districts layer counts {tot} features, the layers hold {nb + ns}")

under_keys = sorted(k for k, w in written.items() if w["reference"] == "under")
print(f"{len(written)} district rows, {nb} buildings, {ns} set aside, {len(fields)} fields; "
      f"under-mapped: {', '.join(under_keys) or 'none'}; {len(bad)} mismatches")
for b in bad[:20]:
    print("  " + b)
sys.exit(1 if bad else 0)
