#!/usr/bin/python3
"""Outside reference for the neighbour stage (tests/unit/test_neighbours.c).

Reference: shapely (normalize(), intersection, area, STRtree) with geopandas
to read the layer, and pyproj.Geod (GeographicLib) for the geodesic area of
an intersection. Run with Debian's /usr/bin/python3.

Usage: neighbours_shapely.py LAYER NEAR_IOU OVERLAP_SHARE CONTAINED_SHARE MIN_M2

Prints tab-separated lines:
  F  osm_id name type valid wkt   every feature in file order (tabs and
                                  newlines in text replaced by spaces)
  X  count                        exact duplicates among valid features:
                                  members beyond the first of each group of
                                  equal normalize()d geometry
  G  index rep                    feature 'index' is in an exact group whose
                                  lowest index is 'rep' (groups of 2+ only)
  N  rep_a rep_b iou              near-duplicate pair: IoU >= NEAR_IOU
  P  rep_a rep_b share m2         partial overlap: IoU < NEAR_IOU,
                                  share >= OVERLAP_SHARE, m2 >= MIN_M2
  C  rep_a rep_b share m2         the same with share >= CONTAINED_SHARE
Pairs are between group representatives (lowest index of each exact group,
or the feature itself), rep_a < rep_b. share = intersection area / area of
the smaller footprint; IoU = intersection / union; both in square degrees.
"""
import sys

import geopandas
import shapely.wkt
from pyproj import Geod
from shapely.strtree import STRtree

GEOD = Geod(ellps="WGS84")


def clean(v):
    if v is None or (isinstance(v, float) and v != v):
        return ""
    return str(v).replace("\t", " ").replace("\n", " ").replace("\r", " ")


def ring_m2(ring):
    xs, ys = ring.coords.xy
    area, _ = GEOD.polygon_area_perimeter(list(xs)[:-1], list(ys)[:-1])
    return abs(area)


def polygonal_m2(g):
    if g.geom_type == "Polygon":
        a = ring_m2(g.exterior) - sum(ring_m2(r) for r in g.interiors)
        return max(a, 0.0)
    if g.geom_type in ("MultiPolygon", "GeometryCollection"):
        return sum(polygonal_m2(p) for p in g.geoms)
    return 0.0


def main():
    path = sys.argv[1]
    near, share_min, contained, min_m2 = (float(v) for v in sys.argv[2:6])
    df = geopandas.read_file(path)
    geoms = list(df.geometry)
    out = sys.stdout
    for i, row in df.iterrows():
        g = geoms[i]
        wkt = shapely.wkt.dumps(g, trim=True)
        # The C side reads this WKT: it must give back the same coordinates.
        assert shapely.wkt.loads(wkt).wkb == g.wkb, "WKT does not round-trip"
        valid = 1 if g.is_valid else 0
        out.write("F\t%s\t%s\t%s\t%d\t%s\n" % (clean(row["osm_id"]), clean(row["name"]),
                                             clean(row["type"]), valid, wkt))
    groups = {}
    for i, g in enumerate(geoms):
        if g.is_valid:
            groups.setdefault(g.normalize().wkb, []).append(i)
    out.write("X\t%d\n" % sum(len(m) - 1 for m in groups.values()))
    reps = []
    for members in groups.values():
        reps.append(members[0])
        if len(members) > 1:
            for i in members:
                out.write("G\t%d\t%d\n" % (i, members[0]))
    reps.sort()
    rep_geoms = [geoms[i] for i in reps]
    tree = STRtree(rep_geoms)
    where = {id(g): k for k, g in enumerate(rep_geoms)}
    for k, a in enumerate(rep_geoms):
        for b in tree.query(a):
            j = where[id(b)]
            if j <= k or not a.intersects(b):
                continue
            inter = a.intersection(b)
            ai = inter.area
            smaller = min(a.area, b.area)
            if smaller <= 0:
                continue
            share = ai / smaller
            iou = ai / (a.area + b.area - ai)
            ra, rb = reps[k], reps[j]
            if iou >= near:
                out.write("N\t%d\t%d\t%.6f\n" % (ra, rb, iou))
            elif share >= share_min:
                m2 = polygonal_m2(inter)
                if m2 >= min_m2:
                    kind = "C" if share >= contained else "P"
                    out.write("%s\t%d\t%d\t%.6f\t%.3f\n" % (kind, ra, rb, share, m2))


if __name__ == "__main__":
    main()
