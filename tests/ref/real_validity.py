# Reference verdicts for tests/unit/test_footprint_real.c: shapely's OGC
# validity (is_valid, on GEOS) for every building of the real extracts in
# ../shared/data/real (README.md there: north_macedonia has 1 invalid
# footprint, the others 0). Run with /usr/bin/python3 REALDIR.
#
# Output, one line per feature then one per extract:
#   F <slug> <index> <valid 0|1|-> <hex WKB in lon/lat WGS 84, or NULL>
#   N <slug> <features> <invalid>
# Geometries are reprojected to EPSG:4326 (bengaluru is in UTM 43N) before
# both the verdict and the dump, so both sides judge the same coordinates;
# hex WKB carries them bit for bit.
import sys
import warnings

import geopandas as gpd

warnings.filterwarnings("ignore")
EXTRACTS = [
    ("kronstadt", "kronstadt/buildings.geojson"),
    ("belem", "belem/buildings.shp"),
    ("bengaluru", "bengaluru/BuildingFootprintsOSM.gpkg"),
    ("banepa", "banepa/buildings.geojson"),
    ("fianarantsoa", "fianarantsoa/building.geojson"),
    ("north_macedonia", "north_macedonia/buildings.shp"),
]
root = sys.argv[1]
out = sys.stdout
for slug, path in EXTRACTS:
    df = gpd.read_file(f"{root}/{path}").to_crs(4326)
    invalid = 0
    for i, g in enumerate(df.geometry):
        if g is None:
            out.write(f"F {slug} {i} - NULL\n")
            continue
        ok = g.is_valid
        invalid += not ok
        out.write(f"F {slug} {i} {int(ok)} {g.wkb_hex}\n")
    out.write(f"N {slug} {len(df)} {invalid}\n")
