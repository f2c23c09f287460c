"""Independent balance check of a run's outputs (Debian's /usr/bin/python3).

usage: balance.py OUT INPUT...
Reads every input with GDAL's ogr (not our readers) and the run's
buildings and set_aside layers, and asserts that every input feature
appears exactly once across the two, per layer: read = buildings +
set_aside, matched by (layer, source_id) where ids exist, else by count.
Prints one line per layer and exits 1 on any imbalance.
"""
import os
import sys
from osgeo import ogr

ogr.UseExceptions()


def layers_of(out):
    if out.endswith(".gpkg"):
        ds = ogr.Open(out)
        return ds, ds.GetLayerByName("buildings"), ds.GetLayerByName("set_aside")
    stem, ext = os.path.splitext(out)
    b = ogr.Open(out)
    s = ogr.Open(stem + ".set_aside" + ext)
    return (b, s), b.GetLayer(0), s.GetLayer(0)


def main():
    out, inputs = sys.argv[1], sys.argv[2:]
    keep, bl, sl = layers_of(out)
    seen = {}
    for lyr in (bl, sl):
        for f in lyr:
            key = (f.GetField("layer"), f.GetField("source_id"))
            seen[key] = seen.get(key, 0) + 1
    bad = 0
    total_out = bl.GetFeatureCount() + sl.GetFeatureCount()
    total_in = 0
    names = []
    for path in inputs:
        ds = ogr.Open(path)
        n = ds.GetLayer(0).GetFeatureCount()
        total_in += n
        # our layer name: the table of a GeoPackage, else the file stem
        if path.lower().endswith(".gpkg") or ".gpkg:" in path.lower():
            name = ds.GetLayer(0).GetName()
        else:
            name = os.path.splitext(os.path.basename(path))[0]
        k = 2
        base = name
        while name in names:
            name = "%s_%d" % (base, k)
            k += 1
        names.append(name)
        got = sum(v for (lay, _), v in seen.items() if lay == name)
        # features without an id (GeoJSON without "id") are counted only
        dup = [key for key, v in seen.items()
               if key[0] == name and key[1] is not None and v != 1]
        print("%s: read %d (GDAL) = out %d%s" % (name, n, got, "" if not dup else " repeated ids %r" % dup[:3]))
        if got != n or dup:
            bad += 1
    if total_in != total_out:
        print("total read %d != buildings + set_aside %d" % (total_in, total_out))
        bad += 1
    sys.exit(1 if bad else 0)


main()
