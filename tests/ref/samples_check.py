#!/usr/bin/python3
"""
tests/ref/samples_check.py -- checks the invented demo town (samples/, or a
folder made by bench/gen_town.py) against outside references: GEOS through
shapely (validity and its reasons, overlaps, shared walls) and PROJ through
pyproj (geodesic area and perimeter on WGS 84, a local azimuthal projection
for distances in metres). None of the generator's own code is used, so a
fault the generator claims but did not make is caught here.

Input:   argv[1] = folder with buildings_osm.geojson[l], districts.geojson,
         reference_counts.csv, faults.csv, manifest.json and, unless made
         with --no-cadastre / --no-truth, buildings_cadastre.geojson[l] and
         buildings_truth.csv
Output:  one line per failed check on stderr and a summary on stdout;
         exit 0 when all pass, 1 otherwise, 77 when shapely/pyproj are missing.

The expected GEOS reasons are those REFERENCES.md section 3.2 lists for
GEOS 3.11.1 ("Self-intersection", "Ring Self-intersection", "Hole lies
outside shell", "Too few points in geometry component"). Thresholds: fragment
< 6 m2 and oversize > 50,000 m2 (the design's footprint thresholds), sliver
= Polsby-Popper 4*pi*A/P^2 < 0.1 (REFERENCES.md section 7: "common practice,
no source").
"""

import csv
import json
import math
import os
import sys
import warnings

try:
    from pyproj import Geod, Transformer
    from shapely.geometry import shape
    from shapely.ops import transform, unary_union
    from shapely.strtree import STRtree
    from shapely.validation import explain_validity
except ImportError as e:            # pragma: no cover - environment
    print("SKIP: needs shapely and pyproj on /usr/bin/python3: %s" % e)
    sys.exit(77)

GEOD = Geod(ellps="WGS84")
FAILS = []
CHECKS = [0]


def check(cond, msg):
    CHECKS[0] += 1
    if not cond:
        FAILS.append(msg)
        if len(FAILS) <= 60:
            print("FAIL: " + msg, file=sys.stderr)


def load_layer(path):
    """Features of a FeatureCollection (.geojson) or of one-per-line
    .geojsonl; None when neither file exists."""
    if os.path.exists(path + ".geojsonl"):
        with open(path + ".geojsonl", encoding="utf-8") as f:
            return [json.loads(line) for line in f]
    if not os.path.exists(path + ".geojson"):
        return None
    with open(path + ".geojson", encoding="utf-8") as f:
        return json.load(f)["features"]


def polys_of(geom):
    """Coordinates of each polygon of a Polygon/MultiPolygon member."""
    if geom["type"] == "Polygon":
        return [geom["coordinates"]]
    return geom["coordinates"]


def geodesic(g):
    area, perim = GEOD.geometry_area_perimeter(g)
    return abs(area), perim


def shell_cycle(ring):
    """A closed ring without its closing position."""
    return [tuple(p) for p in ring[:-1]]


def same_cycle(a, b):
    """b is a rotation of a (same direction)."""
    if len(a) != len(b):
        return False
    for k in range(len(b)):
        if b[k:] + b[:k] == a:
            return True
    return False


def strtree_pairs(geoms):
    """Index pairs (i < j) whose envelopes meet, for shapely 1.8 and 2.x."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")    # shapely 1.8 announces 2.0 changes
        tree = STRtree(geoms)
    pos = {id(g): i for i, g in enumerate(geoms)}
    for i, g in enumerate(geoms):
        for hit in tree.query(g):
            j = pos[id(hit)] if not isinstance(hit, (int,)) and \
                not hasattr(hit, "dtype") else int(hit)
            if j > i:
                yield i, j


def district_finder(dgeoms):
    """Function: geometry -> indices of districts whose envelope meets it."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        tree = STRtree(dgeoms)
    pos = {id(g): k for k, g in enumerate(dgeoms)}

    def near(g):
        out = []
        for hit in tree.query(g):
            out.append(int(hit) if isinstance(hit, int) or
                       hasattr(hit, "dtype") else pos[id(hit)])
        return out
    return near


class Layer:
    def __init__(self, name, feats, faults, to_m):
        self.name = name
        self.feats = feats
        self.faults = faults          # index -> (fault, of_index or None)
        self.to_m = to_m
        self._m = {}

    def metric(self, i):
        """Shapely geometry in local metres (azimuthal equidistant)."""
        if i not in self._m:
            self._m[i] = transform(self.to_m, shape(self.feats[i]["geometry"]))
        return self._m[i]


def check_fault(lay, i, fault, of):
    f = lay.feats[i]
    g = f["geometry"]
    where = "%s feature %d (%s)" % (lay.name, i, fault)
    if fault == "null_geometry":
        check(g is None, where + ": geometry not null")
        return
    if fault == "empty_geometry":
        check(g is not None and g["coordinates"] == [], where + ": not empty")
        return
    if fault == "point":
        check(g["type"] == "Point", where + ": not a Point")
        return
    if fault == "swapped":
        ok = all(abs(p[1]) > 90 and abs(p[0]) <= 90
                 for poly in polys_of(g) for r in poly for p in r)
        check(ok, where + ": latitude not out of range")
        return
    if fault == "z":
        ok = all(len(p) == 3 for poly in polys_of(g) for r in poly for p in r)
        check(ok, where + ": positions without Z")
        return
    shell = polys_of(g)[0][0]
    if fault == "unclosed":
        check(shell[0] != shell[-1], where + ": ring is closed")
        return
    if fault == "too_few_points":
        distinct = {tuple(p) for p in shell}
        check(len(shell) < 4 and len(distinct) < 3, where + ": enough points")
        try:
            reason = explain_validity(shape(g))
            check(reason.startswith("Too few points"), where + ": " + reason)
        except ValueError:
            pass    # shapely refuses to build it: too few points as well
        return
    if fault == "spike":
        # GEOS names a cut line "Self-intersection" at the tip or "Ring
        # Self-intersection" at its base, by noding order (both seen with
        # GEOS 3.11); the spike itself is the out-and-back A,T,A
        reason = explain_validity(shape(g))
        check("Self-intersection" in reason, where + ": GEOS says " + reason)
        back = any(shell[k] == shell[k + 2] for k in range(len(shell) - 2))
        check(back, where + ": no out-and-back vertex")
        return
    if fault in ("bowtie", "self_touch", "hole_outside"):
        want = {"bowtie": "Self-intersection",
                "self_touch": "Ring Self-intersection",
                "hole_outside": "Hole lies outside shell"}[fault]
        reason = explain_validity(shape(g))
        check(reason.startswith(want), where + ": GEOS says " + reason)
        return
    if fault == "repeated_vertex":
        rep = any(shell[k] == shell[k + 1] for k in range(len(shell) - 1))
        check(rep, where + ": no repeated consecutive vertex")
        check(shape(g).is_valid, where + ": not valid apart from the repeat")
        return
    area, perim = geodesic(shape(g))
    if fault == "fragment":
        check(area < 6.0, where + ": area %.2f m2 not < 6" % area)
        return
    if fault == "oversize":
        check(area > 50000.0, where + ": area %.0f m2 not > 50,000" % area)
        return
    if fault == "sliver":
        pp = 4 * math.pi * area / (perim * perim)
        check(pp < 0.1, where + ": Polsby-Popper %.3f not < 0.1" % pp)
        return
    check(of is not None, where + ": no original given")
    if of is None:
        return
    og = lay.feats[of]["geometry"]
    oshell = polys_of(og)[0][0]
    if fault == "dup_exact":
        check(polys_of(g) == polys_of(og), where + ": not the same coordinates")
    elif fault == "dup_rotated":
        a, b = shell_cycle(oshell), shell_cycle(shell)
        check(a != b and same_cycle(a, b), where + ": not a rotated start")
    elif fault == "dup_reversed":
        a, b = shell_cycle(oshell), shell_cycle(shell[::-1])
        check(same_cycle(a, b), where + ": not the reversed ring")
    elif fault == "near_dup":
        d = lay.metric(i).hausdorff_distance(lay.metric(of))
        check(0.25 <= d <= 1.05, where + ": Hausdorff %.2f m" % d)
    elif fault == "overlap":
        inter = lay.metric(i).intersection(lay.metric(of)).area
        outside = lay.metric(i).difference(lay.metric(of)).area
        check(inter > 0.5 and outside > 0.5,
              where + ": overlap %.2f m2, outside %.2f m2" % (inter, outside))
    else:
        check(False, where + ": unknown fault")


def check_clean(lay, i, bbox):
    """A feature with no listed fault must be a plain valid footprint."""
    g = lay.feats[i]["geometry"]
    where = "%s feature %d (no listed fault)" % (lay.name, i)
    if g is None or g["type"] not in ("Polygon", "MultiPolygon") or \
            not g["coordinates"]:
        check(False, where + ": geometry %r" % (g and g["type"]))
        return False
    for poly in polys_of(g):
        for r in poly:
            if len(r) < 4 or r[0] != r[-1] or \
                    any(len(p) != 2 for p in r) or \
                    any(r[k] == r[k + 1] for k in range(len(r) - 1)):
                check(False, where + ": ring not closed, short, 3-D or "
                      "with repeated vertices")
                return False
            for x, y in r:
                if not (bbox[0] <= x <= bbox[2] and bbox[1] <= y <= bbox[3]):
                    check(False, where + ": position outside the town")
                    return False
    s = shape(g)
    check(s.is_valid, where + ": " + explain_validity(s))
    area, perim = geodesic(s)
    check(6.0 <= area <= 50000.0, where + ": area %.1f m2" % area)
    pp = 4 * math.pi * area / (perim * perim)
    check(pp >= 0.1, where + ": Polsby-Popper %.3f" % pp)
    return True


def check_layer(lay, bbox):
    clean = []
    for i in range(len(lay.feats)):
        if i in lay.faults:
            fault, of = lay.faults[i]
            check_fault(lay, i, fault, of)
        elif check_clean(lay, i, bbox):
            clean.append(i)
    # clean footprints never overlap each other (terraces only touch)
    geoms = [lay.metric(i) for i in clean]
    overlaps = 0
    for a, b in strtree_pairs(geoms):
        if geoms[a].intersection(geoms[b]).area > 0.01:
            overlaps += 1
            check(False, "%s features %d and %d overlap" % (
                lay.name, clean[a], clean[b]))
    return clean, overlaps


def read_faults(path):
    out = {"osm": {}, "cadastre": {}}
    with open(path, encoding="utf-8", newline="") as f:
        rows = list(csv.DictReader(f))
    for r in rows:
        of = int(r["of_index"]) if r["of_index"] else None
        check(int(r["index"]) not in out[r["layer"]],
              "faults.csv lists %s %s twice" % (r["layer"], r["index"]))
        out[r["layer"]][int(r["index"])] = (r["fault"], of)
    return out


def main(folder):
    p = lambda name: os.path.join(folder, name)
    with open(p("manifest.json"), encoding="utf-8") as f:
        man = json.load(f)
    to_m = Transformer.from_crs(
        "EPSG:4326",
        "+proj=aeqd +lat_0=%r +lon_0=%r +datum=WGS84 +units=m" % (
            man["town"]["centre_lat"], man["town"]["centre_lon"]),
        always_xy=True).transform
    faults = read_faults(p("faults.csv"))

    # districts: a valid tiling, keyed, with 2-3 parent regions
    dfeats = load_layer(p("districts"))
    check(len(dfeats) == man["districts"], "district count")
    ids = [d["properties"]["district_id"] for d in dfeats]
    check(len(set(ids)) == len(ids), "district ids not unique")
    dgeoms = [transform(to_m, shape(d["geometry"])) for d in dfeats]
    for k, g in enumerate(dgeoms):
        check(g.is_valid, "district %s: %s" % (ids[k], explain_validity(g)))
    total = sum(g.area for g in dgeoms)
    union = unary_union(dgeoms).area
    check(abs(total - union) < 1e-6 * total + 1.0,
          "districts overlap: sum %.1f m2, union %.1f m2" % (total, union))
    regions = {d["properties"]["region_id"] for d in dfeats}
    if man["districts"] == 10:
        check(len(regions) == 3, "demo regions: %s" % sorted(regions))
    lons = [p_[0] for d in dfeats for p_ in d["geometry"]["coordinates"][0]]
    lats = [p_[1] for d in dfeats for p_ in d["geometry"]["coordinates"][0]]
    bbox = (min(lons), min(lats), max(lons), max(lats))

    # reference counts
    with open(p("reference_counts.csv"), encoding="utf-8", newline="") as f:
        rows = list(csv.reader(f))
    check(rows[0] == ["district_id", "buildings", "census_year", "method"],
          "reference header %r" % rows[0])
    ref = {r[0]: int(r[1]) for r in rows[1:]}
    check(sorted(ref) == sorted(ids), "reference ids differ from districts")

    # layers
    osm = Layer("buildings_osm", load_layer(p("buildings_osm")),
                faults["osm"], to_m)
    layers = [(osm, "buildings_osm")]
    cad = None
    cfeats = load_layer(p("buildings_cadastre"))
    check((cfeats is None) == ("buildings_cadastre" not in man["layers"]),
          "cadastre layer and manifest disagree")
    if cfeats is not None:
        cad = Layer("buildings_cadastre", cfeats, faults["cadastre"], to_m)
        layers.append((cad, "buildings_cadastre"))
        check(len(cad.feats) == man["layers"]["buildings_cadastre"]
              ["features"], "cadastre feature count")
    check(len(osm.feats) == man["n"] == man["layers"]["buildings_osm"]
          ["features"], "osm feature count")
    for lay, key in layers:
        listed = {}
        for fault, _ in lay.faults.values():
            listed[fault] = listed.get(fault, 0) + 1
        want = {k: v for k, v in man["layers"][key]["faults"].items() if v}
        check(listed == want, "%s: faults.csv %r != manifest %r" % (
            key, listed, want))
    osm_clean, _ = check_layer(osm, bbox)
    if cad is not None:
        check_layer(cad, bbox)
    check(sum(1 for i in osm.faults) > 0.05 * len(osm.feats),
          "fewer faults than the stated rates give")
    kinds, walls = {}, 0
    if os.path.exists(p("buildings_truth.csv")):
        kinds, walls = check_truth(p, osm, cad, osm_clean, ids, dgeoms, man,
                                   ref)
    print("samples_check: %d checks, %d failed (%d osm, %d cadastre features,"
          " %d shared walls, both layers %r)" % (
              CHECKS[0], len(FAILS), len(osm.feats),
              len(cad.feats) if cad else 0, walls, kinds))
    return 1 if FAILS else 0


def check_truth(p, osm, cad, osm_clean, ids, dgeoms, man, ref):
    """Checks that need buildings_truth.csv: the same building in both
    layers, shared walls, each building in its district, completeness and
    tag fill by district."""

    # the same building drawn in both layers
    with open(p("buildings_truth.csv"), encoding="utf-8", newline="") as f:
        truth = list(csv.DictReader(f))
    both = [(int(t["osm_index"]), int(t["cadastre_index"])) for t in truth
            if t["osm_index"] and t["cadastre_index"]]
    check(cad is None or len(both) > 100,
          "few buildings in both layers: %d" % len(both))
    # drawn identically, redrawn (vertices within 0.15 m) or shifted up to
    # 1.5 m: the Hausdorff distance between the two drawings says which
    kinds = {"identical": 0, "redrawn": 0, "shifted": 0}
    for oi, ci in both:
        if oi in osm.faults or ci in cad.faults:
            continue
        go, gc = osm.metric(oi), cad.metric(ci)
        d = go.hausdorff_distance(gc)
        check(d <= 1.55, "osm %d / cadastre %d: %.2f m apart" % (oi, ci, d))
        kinds["identical" if d < 0.02 else
              "redrawn" if d < 0.25 else "shifted"] += 1
    check(cad is None or min(kinds.values()) > 20,
          "cross-layer drawings %r" % kinds)

    # terraced rows: neighbours share a wall and do not overlap
    walls = 0
    clean_set = set(osm_clean)
    for a, b in zip(truth, truth[1:]):
        if not a["terrace_row"] or a["terrace_row"] != b["terrace_row"]:
            continue
        if not (a["osm_index"] and b["osm_index"]):
            continue
        ia, ib = int(a["osm_index"]), int(b["osm_index"])
        if ia not in clean_set or ib not in clean_set:
            continue
        ga, gb = osm.metric(ia), osm.metric(ib)
        inter = ga.intersection(gb)
        check(inter.area < 0.01 and inter.length > 5.0,
              "terraced osm %d/%d: shared wall %.2f m, overlap %.3f m2" % (
                  ia, ib, inter.length, inter.area))
        walls += 1
    check(walls > 100, "few shared walls seen: %d" % walls)

    # each clean footprint wholly inside one district is that district's in
    # the truth; completeness and tag fill by district, as a run would see
    truth_by_osm = {int(t["osm_index"]): t for t in truth if t["osm_index"]}
    per_d = {i: 0 for i in ids}
    levels_d = {i: 0 for i in ids}
    near = district_finder(dgeoms)
    for i in osm_clean:
        g = osm.metric(i)
        cand = near(g)
        inside = [ids[k] for k in cand if dgeoms[k].contains(g)]
        pt = g.representative_point()
        owner = [ids[k] for k in cand if dgeoms[k].contains(pt)]
        if len(owner) == 1:
            per_d[owner[0]] += 1
            if "building:levels" in osm.feats[i]["properties"]:
                levels_d[owner[0]] += 1
        if len(inside) == 1 and i in truth_by_osm:
            check(truth_by_osm[i]["district_id"] == inside[0],
                  "osm %d lies in %s, truth says %s" % (
                      i, inside[0], truth_by_osm[i]["district_id"]))
    if "district_table" in man:
        for row in man["district_table"]:
            d = row["district_id"]
            share = per_d[d] / float(ref[d])
            if row["undermapped"]:
                check(share < 0.3, "%s under-mapped but %.0f %% complete" % (
                    d, 100 * share))
            else:
                check(share > 0.75, "%s only %.0f %% complete" % (
                    d, 100 * share))
        fill = {d: levels_d[d] / float(per_d[d]) for d in ids if per_d[d]}
        check(max(fill.values()) >= 0.7 and min(fill.values()) <= 0.06,
              "storeys fill by district %r" % fill)

    return kinds, walls


if __name__ == "__main__":
    sys.exit(main(sys.argv[1]))
