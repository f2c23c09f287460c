"""Independent placement of buildings in districts with geopandas, compared
building by building with stocktake's `district` column.

Reference: geopandas.sjoin (GeoPandas 0.12 on shapely 1.8 / GEOS) of each
kept building's representative point (GEOS PointOnSurface, the point
stocktake uses) against the district polygons, both in lon/lat WGS 84
(geopandas/pyproj reprojection). Invalid district polygons are repaired
with shapely's make_valid (GEOS MakeValid), as stocktake does. sjoin with
predicate "intersects" lists every district whose closed polygon holds the
point; stocktake's border rule keeps the lowest district index (the order
of the district layer's features), so the same rule is applied to sjoin's
candidates here.

usage: place_sjoin.py BUILDINGS DISTRICTS KEY OUTPUT [EXPECT_SHARE]
  OUTPUT is stocktake's buildings layer (.geojson or .gpkg); its `bid` is
  the 1-based feature index of the single input layer.
  EXPECT_SHARE: the published share of buildings inside a district (README
  of the real data), checked to 0.1 percentage point.
Exit 0 when every building matches.
"""
import sys
import warnings

import geopandas as gpd
from shapely.validation import make_valid

warnings.filterwarnings("ignore")

buildings_path, districts_path, key, output = sys.argv[1:5]
expect = float(sys.argv[5]) if len(sys.argv) > 5 else None

src = gpd.read_file(buildings_path)
if src.crs is not None and src.crs.to_epsg() != 4326:
    src = src.to_crs(4326)
dist = gpd.read_file(districts_path)
if dist.crs is not None and dist.crs.to_epsg() != 4326:
    dist = dist.to_crs(4326)
dist["geometry"] = [g if g.is_valid else make_valid(g) for g in dist.geometry]
dist["order"] = range(len(dist))

if output.endswith(".gpkg"):
    ours = gpd.read_file(output, layer="buildings")
else:
    ours = gpd.read_file(output)
ours = ours[["bid", "status", "district"]]

kept = src.iloc[[int(b) - 1 for b in ours["bid"]]].copy()
repaired = set(ours.loc[ours["status"] == "repaired", "bid"].astype(int))
geoms = []
for bid, g in zip(ours["bid"].astype(int), kept.geometry):
    geoms.append(make_valid(g) if bid in repaired and not g.is_valid else g)
kept["geometry"] = gpd.GeoSeries(geoms, index=kept.index, crs=kept.crs).representative_point()
kept["bid"] = list(ours["bid"].astype(int))

joined = gpd.sjoin(kept[["bid", "geometry"]], dist[["order", key, "geometry"]],
                   how="left", predicate="intersects")
joined = joined.sort_values(["bid", "order"]).drop_duplicates("bid", keep="first")
theirs = dict(zip(joined["bid"], joined[key]))

bad = 0
shared_border = 0
inside = 0
counts = joined.groupby("bid").size()
for bid, district in zip(ours["bid"].astype(int), ours["district"]):
    want = theirs.get(bid)
    want = "none" if want is None or (isinstance(want, float) and want != want) else str(want)
    if want != "none":
        inside += 1
    if str(district) != want:
        bad += 1
        if bad <= 10:
            print(f"bid {bid}: stocktake {district}, geopandas {want}")
multi = gpd.sjoin(kept[["bid", "geometry"]], dist[["order", "geometry"]],
                  how="inner", predicate="intersects").groupby("bid").size()
shared_border = int((multi > 1).sum())
share = 100.0 * inside / len(ours) if len(ours) else 0.0
print(f"{len(ours)} buildings, {inside} in a district ({share:.1f}%), "
      f"{shared_border} on a shared border, {bad} disagreements")
if expect is not None and abs(share - expect) > 0.1:
    print(f"share in a district {share:.2f}% differs from the published {expect}%")
    bad += 1
sys.exit(1 if bad or len(ours) == 0 else 0)
