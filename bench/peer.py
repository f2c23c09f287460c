#!/usr/bin/python3
"""
bench/peer.py -- the comparison a user would make: the whole job of
`stocktake run -r bench/bench.rules --districts ... --reference ...`
scripted the way a competent analyst would script it with geopandas.

Input:   peer.py BUILDINGS DISTRICTS REFERENCE_CSV OUT.gpkg
         BUILDINGS  any layer fiona reads (.gpkg, .geojson, .geojsonl)
         DISTRICTS  district polygons keyed by district_id, parent region_id
         REFERENCE  CSV district_id,buildings,... (expected counts)
Output:  OUT.gpkg with layers buildings (kept, source attributes, schema
         fields and their provenance, findings), set_aside (duplicates and
         rejected, with the reason) and districts (counts, completeness
         against the reference). On stderr, one line per stage in the form
         of `stocktake run --timings` (stage, wall s, cpu s, footprints/s,
         peak MB) so bench/compare.sh can set the two side by side.
Errors:  an unreadable input raises (exit 1); bad usage exits 2.
Limits:  everything is held in memory, as geopandas does.

Runs with /usr/bin/python3 and Debian's python3-geopandas (0.12, fiona
engine, rtree spatial index), python3-shapely (1.8) and python3-pyproj.
What it does, stage by stage, mirrors bench/bench.rules:
  validity      is_valid, explain_validity for the reason, make_valid for
                the invalid ones (polygonal parts kept); null, empty and
                non-polygonal geometries rejected
  measures      geodesic area and perimeter on WGS 84 (pyproj Geod); area
                under 6 m2 is a fragment (kept, flagged)
  neighbours    exact duplicates by normalised WKB; a self-join on the
                spatial index for near-duplicates (IoU >= 0.9, set aside)
                and overlaps (>= 25 % of the smaller footprint, >= 1 m2;
                >= 99 %: contained), areas in the UTM zone of the layer
  place         representative point within district (spatial join)
  rules         occupancy and material mapped by table and regular
                expression (case and accents folded, ';' lists, mixed as
                MIX), storeys and height parsed from messy text, checks
  defaults      material learned per district (mode, from 20 observed),
                region and everywhere defaults, provenance per field
  audit         buildings per district against the reference counts
  write         GeoPackage through fiona
Determinism: no randomness; ties go to the first feature read.
"""

import re
import resource
import sys
import time
import unicodedata

import geopandas as gpd
import numpy as np
import pandas as pd
from pyproj import Geod
from shapely.geometry import MultiPolygon, Polygon
from shapely.validation import explain_validity, make_valid

# ---------------------------------------------------------------------------
# timings, in the form of `stocktake run --timings`
# ---------------------------------------------------------------------------

class Stages:
    def __init__(self):
        self.start = self.t = (time.perf_counter(), time.process_time())
        self.n = 0

    def done(self, stage, n=None):
        now = (time.perf_counter(), time.process_time())
        self._line(stage, self.t, now, self.n if n is None else n)
        self.t = now

    def total(self):
        self._line("total", self.start, (time.perf_counter(), time.process_time()), self.n)

    @staticmethod
    def _line(stage, a, b, n):
        wall, cpu = b[0] - a[0], b[1] - a[1]
        peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
        print("%-12s %10.3f %10.3f %14.0f %12.1f" % (stage, wall, cpu, n / wall if wall > 0 else 0,
                                                    peak_mb), file=sys.stderr, flush=True)


# ---------------------------------------------------------------------------
# the rule pack, as Python tables (bench/bench.rules)
# ---------------------------------------------------------------------------

def fold(v):
    """Trim, lower case, strip accents."""
    v = unicodedata.normalize("NFKD", v.strip().lower())
    return "".join(c for c in v if not unicodedata.combining(c))


OCCUPANCY = {}
for code, words in (
        ("RES", ["house", "detached", "residential", "terrace", "terraced_house", "apartments",
                 "casa", "casa adosada", "vivienda", "vivienda precaria", "hut", "barraca",
                 "edificio"]),
        ("COM", ["commercial", "retail", "shop", "office", "oficinas", "comercio", "comercial"]),
        ("IND", ["industrial", "warehouse", "factory", "nave industrial", "galpao"]),
        ("EDU", ["school", "escuela", "escola", "college"]),
        ("HLT", ["hospital", "clinic", "clinica", "posto de saude"]),
        ("REL", ["church", "chapel", "iglesia", "igreja"]),
        ("GOV", ["public", "civic", "government", "townhall", "ayuntamiento"]),
        ("ANC", ["garage", "garagem", "shed", "cobertizo", "roof"]),
        ("MIX", ["mixed", "mixed use"])):
    for w in words:
        OCCUPANCY[w] = code
OCCUPANCY["yes"] = None                       # says nothing
OCCUPANCY_RE = [(re.compile(r"^resid"), "RES"), (re.compile(r"^apart"), "RES"),
                (re.compile(r"^comm?er"), "COM"), (re.compile(r"^indust"), "IND")]
AMENITY = {"school": "EDU", "college": "EDU", "hospital": "HLT", "clinic": "HLT",
           "doctors": "HLT", "place_of_worship": "REL", "townhall": "GOV", "police": "GOV",
           "fire_station": "GOV", "marketplace": "COM", "library": "GOV"}
MATERIAL = {}
for code, words in (("RC", ["concrete", "reinforced_concrete", "hormigon", "concreto",
                            "betao armado"]),
                    ("RM", ["blocks", "bloque", "cement_block"]),
                    ("URM", ["brick", "ladrillo", "stone", "pedra", "masonry", "mamposteria",
                             "unreinforced masonry"]),
                    ("STL", ["steel", "acero"]),
                    ("TMB", ["wood", "timber", "madera", "madeira"]),
                    ("ADB", ["adobe", "earth", "taipa", "bahareque"])):
    for w in words:
        MATERIAL[w] = code

MISSING = object()


def lookup(table, regexes, v):
    v = fold(v)
    if v in table:
        return table[v]
    for rx, code in regexes:
        if rx.search(v):
            return code
    return MISSING


def map_value(table, regexes, mixed, v):
    """Whole value, else its ';' parts: first part that maps, or `mixed`
    when parts map to different codes. MISSING = unmapped."""
    got = lookup(table, regexes, v)
    if got is not MISSING or ";" not in v:
        return got
    codes = [c for c in (lookup(table, regexes, p) for p in v.split(";"))
             if c is not MISSING and c is not None]
    if not codes:
        return MISSING
    return mixed if mixed and len(set(codes)) > 1 else codes[0]


def map_column(series, table, regexes, mixed):
    uniq = series.dropna().unique()
    m = {u: map_value(table, regexes, mixed, u) for u in uniq}
    mapped = series.map(m)
    unmapped = series[mapped.map(lambda x: x is MISSING)].value_counts()
    return mapped.map(lambda x: None if x is MISSING else x), unmapped


WORDS = {w: i + 1 for i, w in enumerate(
    "one two three four five six seven eight nine ten eleven twelve thirteen fourteen "
    "fifteen sixteen seventeen eighteen nineteen twenty".split())}
NUM = re.compile(r"\d+(?:\.\d+)?")
GROUND_PLUS = re.compile(r"\b[RG]\+(\d+)\b", re.I)
HEIGHT = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*(m|ft|')?\s*$", re.I)


def parse_storeys(v):
    """building:levels accepting words and ground-plus: R+2 is 3; '3-4' and
    '3;4' are 4; 4.5 is 5; 1..120 or nothing."""
    g = GROUND_PLUS.search(v)
    if g:
        n = int(g.group(1)) + 1
    elif fold(v) in WORDS:
        n = WORDS[fold(v)]
    else:
        nums = [float(x) for x in NUM.findall(v)]
        if not nums:
            return None
        n = int(np.ceil(max(nums) - 1e-9))
    return n if 1 <= n <= 120 else None


def parse_height(v):
    m = HEIGHT.match(v)
    if not m:
        return None
    h = float(m.group(1)) * (0.3048 if m.group(2) and m.group(2).lower() in ("ft", "'") else 1)
    return h if 0 <= h <= 1000 else None


# ---------------------------------------------------------------------------
# the stages
# ---------------------------------------------------------------------------

def polygonal(g):
    """The polygonal part of a make_valid result, or None."""
    if g is None or g.is_empty:
        return None
    if isinstance(g, (Polygon, MultiPolygon)):
        return g
    polys = []
    for p in getattr(g, "geoms", []):
        if isinstance(p, Polygon):
            polys.append(p)
        elif isinstance(p, MultiPolygon):
            polys.extend(p.geoms)
    return MultiPolygon(polys) if polys else None


def check_geometry(b):
    n = len(b)
    status = np.array(["ok"] * n, dtype=object)
    reason = np.array([None] * n, dtype=object)
    geom = b.geometry.values.copy()
    is_null = b.geometry.isna().values
    is_empty = np.array([g is None or g.is_empty for g in geom])
    types = b.geometry.geom_type.values
    wrong = ~np.isin(types, ["Polygon", "MultiPolygon"]) & ~is_empty
    status[is_null | is_empty | wrong] = "rejected"
    reason[is_null] = "null geometry"
    reason[is_empty & ~is_null] = "empty geometry"
    reason[wrong & ~is_null] = "not a polygon"
    check = status == "ok"
    valid = np.ones(n, dtype=bool)
    valid[check] = b.geometry[check].is_valid.values
    for i in np.flatnonzero(check & ~valid):
        reason[i] = explain_validity(geom[i])
        fixed = polygonal(make_valid(geom[i]))
        if fixed is None:
            status[i] = "rejected"
        else:
            status[i] = "repaired"
            geom[i] = fixed
    b = b.set_geometry(gpd.GeoSeries(geom, index=b.index, crs=b.crs))
    b["status"], b["reason"] = status, reason
    return b


def measure(b):
    geod = Geod(ellps="WGS84")
    kept = b["status"].isin(["ok", "repaired"]).values
    area = np.full(len(b), np.nan)
    perim = np.full(len(b), np.nan)
    for i in np.flatnonzero(kept):
        a, p = geod.geometry_area_perimeter(b.geometry.values[i])
        area[i], perim[i] = abs(a), p
    b["area_m2"], b["perimeter_m"] = area, perim
    findings = pd.Series([""] * len(b), index=b.index)
    findings[area < 6] += "shape.fragment;"
    compact = 4 * np.pi * area / np.where(perim > 0, perim ** 2, np.nan)
    findings[compact < 0.12] += "shape.sliver;"
    findings[b["reason"].notna() & (b["status"] == "repaired")] += "repair.applied;"
    b["findings"] = findings
    return b


def neighbours(b, attrs):
    kept_idx = np.flatnonzero(b["status"].isin(["ok", "repaired"]).values)
    filled = b[attrs].notna().sum(axis=1).values
    # exact duplicates: normalised WKB
    keys = pd.Series([b.geometry.values[i].normalize().wkb for i in kept_idx], index=kept_idx)
    order = pd.DataFrame({"key": keys.values, "filled": filled[kept_idx], "i": kept_idx})
    order = order.sort_values(["key", "filled", "i"], ascending=[True, False, True], kind="stable")
    first = order.groupby("key", sort=False)["i"].transform("first")
    dup = order[order["i"] != first]
    status = b["status"].values.copy()
    reason = b["reason"].values.copy()
    status[dup["i"].values] = "duplicate"
    for i, k in zip(dup["i"].values, first[dup.index].values):
        reason[i] = "exact duplicate of %d" % k
    # near-duplicates and overlaps: self-join on the spatial index, in metres
    live = kept_idx[status[kept_idx] != "duplicate"]
    g = b.geometry.iloc[live]
    gm = g.to_crs(g.estimate_utm_crs())
    left, right = gm.sindex.query_bulk(gm, predicate="intersects")
    sel = left < right
    left, right = left[sel], right[sel]
    geoms = gm.values
    inter = np.array([geoms[i].intersection(geoms[j]).area for i, j in zip(left, right)])
    ai, aj = gm.area.values[left], gm.area.values[right]
    smaller = np.minimum(ai, aj)
    iou = inter / np.maximum(ai + aj - inter, 1e-12)
    share = inter / np.maximum(smaller, 1e-12)
    findings = b["findings"].values.copy()
    for k in np.flatnonzero(iou >= 0.9):
        i, j = live[left[k]], live[right[k]]
        if status[i] == "duplicate" or status[j] == "duplicate":
            continue
        loser, keeper = (j, i) if filled[i] >= filled[j] else (i, j)
        status[loser] = "duplicate"
        reason[loser] = "near duplicate of %d" % keeper
        findings[keeper] += "dup.near;"
    over = (iou < 0.9) & (share >= 0.25) & (inter >= 1.0)
    for k in np.flatnonzero(over):
        i, j = live[left[k]], live[right[k]]
        code = "overlap.contained;" if share[k] >= 0.99 else "overlap.partial;"
        findings[i] += code
        findings[j] += code
    b["status"], b["reason"], b["findings"] = status, reason, findings
    return b


def place(b, districts):
    kept = b["status"].isin(["ok", "repaired"])
    pts = gpd.GeoDataFrame(geometry=b.geometry[kept].representative_point(), crs=b.crs)
    j = gpd.sjoin(pts, districts[["district_id", "region_id", "geometry"]], how="left",
                  predicate="within")
    j = j[~j.index.duplicated(keep="first")]
    b["district_id"] = j["district_id"].reindex(b.index)
    b["region_id"] = j["region_id"].reindex(b.index)
    b.loc[kept & b["district_id"].isna(), "findings"] += "place.outside;"
    return b


def column(b, name):
    return b[name] if name in b.columns else pd.Series([None] * len(b), index=b.index,
                                                        dtype=object)


def apply_rules(b):
    kept = b["status"].isin(["ok", "repaired"])
    occ, un_occ = map_column(column(b, "building").where(kept), OCCUPANCY, OCCUPANCY_RE, "MIX")
    amen, _ = map_column(column(b, "amenity").where(kept), AMENITY, [], None)
    occ = occ.where(occ.notna(), amen)
    mat, un_mat = map_column(column(b, "building:material").where(kept), MATERIAL, [], "MIX")
    lv = column(b, "building:levels").where(kept).dropna()
    storeys = lv.map({u: parse_storeys(u) for u in lv.unique()}).reindex(b.index)
    hv = column(b, "height").where(kept).dropna()
    height = hv.map({u: parse_height(u) for u in hv.unique()}).reindex(b.index).astype(float)
    b["occupancy"], b["occupancy_from"] = occ, np.where(occ.notna(), "source", "unknown")
    b["material"], b["material_from"] = mat, np.where(mat.notna(), "source", "unknown")
    b["height_m"] = height
    b["height_m_from"] = np.where(height.notna(), "derived", "unknown")
    from_h = np.maximum(1, np.round(height / 3.0))
    st = storeys.astype(float).where(storeys.notna(), from_h)
    b["storeys"], b["storeys_from"] = st, np.where(st.notna(), "derived", "unknown")
    res = b["occupancy"] == "RES"
    b.loc[kept & res & (b["storeys"] > 30), "findings"] += "rule.check;"
    b.loc[kept & res & (b["area_m2"] > 20000), "findings"] += "rule.check;"
    return b, pd.concat([un_occ, un_mat])


def apply_defaults(b):
    kept = b["status"].isin(["ok", "repaired"])
    res = b["occupancy"] == "RES"
    # learn material per district from 20 observed buildings: the mode
    obs = b[kept & b["material"].notna() & b["district_id"].notna()]
    counts = obs.groupby(["district_id", "material"]).size().reset_index(name="n")
    counts = counts.sort_values(["district_id", "n", "material"], ascending=[True, False, True])
    total = counts.groupby("district_id")["n"].sum()
    mode = counts.drop_duplicates("district_id").set_index("district_id")["material"]
    mode = mode[total[mode.index] >= 20]
    todo = kept & b["material"].isna()
    learned = b["district_id"].map(mode)
    fill = todo & learned.notna()
    b.loc[fill, "material"], b.loc[fill, "material_from"] = learned[fill], "default"
    fill = kept & b["material"].isna() & (b["region_id"] == "R01") & res
    b.loc[fill, "material"], b.loc[fill, "material_from"] = "URM", "default"
    fill = kept & b["material"].isna()
    b.loc[fill, "material"], b.loc[fill, "material_from"] = "RM", "default"
    fill = kept & b["storeys"].isna()
    b.loc[fill, "storeys"] = np.where(res[fill], 2, 1)
    b.loc[fill, "storeys_from"] = "default"
    b.loc[kept & b["occupancy"].isna(), "occupancy"] = "UNK"
    return b


def audit(b, districts, reference):
    kept = b[b["status"].isin(["ok", "repaired"])]
    found = kept.groupby("district_id").size()
    d = districts.copy()
    d["buildings"] = d["district_id"].map(found).fillna(0).astype(int)
    ref = reference.set_index("district_id")["buildings"]
    d["reference"] = d["district_id"].map(ref)
    d["completeness"] = d["buildings"] / d["reference"]
    for f in ("occupancy", "material", "storeys"):
        known = kept[kept[f + "_from"].isin(["source", "derived"])].groupby("district_id").size()
        d["observed_" + f] = d["district_id"].map(known).fillna(0) / d["buildings"].clip(lower=1)
    return d


def write(b, d, out):
    kept = b["status"].isin(["ok", "repaired"])
    b = b.copy()
    b.columns = [c.replace(":", "_") if isinstance(c, str) else c for c in b.columns]
    for c in b.columns:
        if c != "geometry" and b[c].dtype == object:
            b[c] = b[c].astype("string").astype(object).where(b[c].notna(), None)
    b[kept].to_file(out, layer="buildings", driver="GPKG")
    b[~kept].to_file(out, layer="set_aside", driver="GPKG")
    d.to_file(out, layer="districts", driver="GPKG")


def main(argv):
    if len(argv) != 5:
        print("usage: peer.py BUILDINGS DISTRICTS REFERENCE_CSV OUT.gpkg", file=sys.stderr)
        return 2
    src, dpath, rpath, out = argv[1:]
    t = Stages()
    b = gpd.read_file(src)
    districts = gpd.read_file(dpath)
    reference = pd.read_csv(rpath, dtype={"district_id": str})
    attrs = [c for c in b.columns if c != "geometry"]
    b = b.reset_index(drop=True)
    t.n = len(b)
    t.done("read")
    b = check_geometry(b)
    b = measure(b)
    t.done("footprint")
    b = neighbours(b, attrs)
    t.done("neighbours")
    b = place(b, districts)
    t.done("place")
    b, unmapped = apply_rules(b)
    t.done("rules")
    b = apply_defaults(b)
    t.done("defaults")
    d = audit(b, districts, reference)
    t.done("audit")
    write(b, d, out)
    t.done("write")
    t.total()
    kept = b["status"].isin(["ok", "repaired"]).sum()
    print("peer: read %d = buildings %d + set aside %d (duplicate %d, rejected %d); "
          "repaired %d; %d distinct unmapped values" %
          (len(b), kept, len(b) - kept, (b["status"] == "duplicate").sum(),
           (b["status"] == "rejected").sum(), (b["status"] == "repaired").sum(),
           len(unmapped)), file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
