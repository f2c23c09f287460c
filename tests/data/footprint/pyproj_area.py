# Reference values for tests/unit/test_footprint.c: geodesic area and
# perimeter of each footprint in geodesic_cases.txt with pyproj's
# Geod(ellps="WGS84").geometry_area_perimeter. Run with /usr/bin/python3.
# Rings are oriented first (shell counter-clockwise, holes clockwise):
# pyproj sums signed ring areas (REFERENCES.md section 2, row 12b).
# Prints "name area perimeter" per case (area in m2, perimeter in m).
import sys
from pyproj import Geod
from shapely import wkt
from shapely.geometry import MultiPolygon
from shapely.geometry.polygon import orient

geod = Geod(ellps="WGS84")
for line in open(sys.argv[1]):
    line = line.strip()
    if not line or line.startswith("#"):
        continue
    name, text = [f.strip() for f in line.split(" | ")]
    g = wkt.loads(text)
    if g.geom_type == "Polygon":
        g = orient(g, 1.0)
    else:
        g = MultiPolygon([orient(p, 1.0) for p in g.geoms])
    area, perimeter = geod.geometry_area_perimeter(g)
    # The sign follows the ring's direction on the ellipsoid; across the
    # antimeridian a planar orient() gets that direction backwards, so the
    # magnitude is the reference.
    print(f"{name} {abs(area)!r} {perimeter!r}")
