"""Print, one line each, the swapped-axes findings of a run's GeoJSON
outputs and the rows (kept or set aside) of the footprints they are about:
status, flags, area, geometry. Used by test_run_swapped.sh."""
import json
import sys

base = sys.argv[1]          # out (for out.geojson, out.findings.geojson, ...)
def feats(path):
    try:
        with open(path) as fh:
            return json.load(fh)["features"]
    except FileNotFoundError:
        return []
bids = set()
for f in feats(base + ".findings.geojson"):
    p = f["properties"]
    if p.get("code") == "geom.swapped-axes":
        bids.add(p.get("bid"))
        print("finding", json.dumps(p, sort_keys=True), json.dumps(f["geometry"]))
for name in (base + ".geojson", base + ".set_aside.geojson"):
    for f in feats(name):
        p = f["properties"]
        if p.get("bid") in bids:
            print("row", json.dumps(p, sort_keys=True), json.dumps(f["geometry"]))
print("swapped", len(bids))
