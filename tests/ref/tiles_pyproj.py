#!/usr/bin/python3
"""Tile addresses of `stocktake tiles` against pyproj's web-mercator
projection (EPSG:3857, the tile scheme's own definition): random points
in both hemispheres and on both sides of the antimeridian's meridian, one GeoJSON layer of points per run; at each zoom
the set of tiles stocktake lists must equal the tiles pyproj's metres give
(x = floor((X + R) / 2R * 2^z), y = floor((R - Y) / 2R * 2^z), R =
20037508.342789244 m, half the projection's extent).

usage: tiles_pyproj.py STOCKTAKE WORKDIR"""
import json
import math
import random
import subprocess
import sys

from pyproj import Transformer

R = 20037508.342789244


def main(st, work):
    rnd = random.Random(20261202)
    # Longitudes beyond +-85 degrees: `tiles` also lists the tiles of a
    # footprint's swapped box when the footprint stage would take it for
    # one with swapped axes (its centre outside the layer's robust extent,
    # the swapped centre inside); with |lon| > 85 a swapped centre is never
    # a latitude, so every tile listed is a point's own.
    pts = [(rnd.choice((-1, 1)) * rnd.uniform(85.5, 180), rnd.uniform(-85, 85))
           for _ in range(400)]
    pts += [(rnd.uniform(-126.35, -126.10), rnd.uniform(-47.97, -47.85)) for _ in range(400)]
    path = work + "/points.geojson"
    feats = [{"type": "Feature", "properties": {}, "geometry": {"type": "Point", "coordinates": p}}
             for p in pts]
    json.dump({"type": "FeatureCollection", "features": feats}, open(path, "w"))
    tr = Transformer.from_crs("EPSG:4326", "EPSG:3857", always_xy=True)
    merc = [tr.transform(lon, lat) for lon, lat in pts]
    bad = 0
    for z in (0, 1, 4, 9, 12, 16, 20):
        n = 2 ** z
        want = {"%d/%d/%d" % (z, math.floor((x + R) / (2 * R) * n), math.floor((R - y) / (2 * R) * n))
                for x, y in merc}
        out = subprocess.run([st, "tiles", "-z", str(z), path], capture_output=True, text=True,
                             check=True).stdout.split()
        got = set(out)
        if got != want or len(out) != len(got):
            bad += 1
            print("zoom %d: %d tiles against pyproj's %d; only stocktake: %s; only pyproj: %s" % (
                z, len(got), len(want), sorted(got - want)[:5], sorted(want - got)[:5]))
        else:
            print("zoom %d: %d tiles, equal to pyproj's" % (z, len(got)))
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1], sys.argv[2]))
