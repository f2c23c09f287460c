#!/usr/bin/python3
"""Nothing lost: check a `stocktake run` output against its inputs with GDAL.

usage: balance.py [--no-values] OUT INPUT...

OUT is the -o path of the run (OUT.gpkg with layers buildings and set_aside,
or OUT.geojson/.geojsonl beside OUT.set_aside.<ext>). INPUTs are the run's
inputs in the order given to it (a .gpkg:layer spec names one table).
Outside reference: GDAL's OGR Python bindings (python3-gdal) read both the
inputs and the outputs; nothing of stocktake is used to count.

Asserts, per input layer (outputs are matched to inputs by bid: bids are
given in read order, layer after layer):
  read (GDAL's feature count of the input) = buildings + set_aside;
  every bid 1..N appears exactly once over both output layers;
  every non-null source_id appears once within its layer;
  every source attribute value GDAL reads from the input comes back
  unchanged on the output row of the same feature (numbers compared as
  numbers, text exactly; invalid UTF-8 is allowed to become U+FFFD).
--no-values skips the last check: for bit-flipped inputs, where GDAL's own
reading of a damaged value (a DBF number "(  2" read as 0) is no reference.
Exit 0 and one summary line on success; 1 and the first difference else.
"""
import json
import math
import os
import sys

from osgeo import gdal, ogr

gdal.UseExceptions()
ogr.UseExceptions()


def open_input(spec):
    path, layer = spec, None
    if not os.path.exists(spec) and ":" in spec:
        path, layer = spec.rsplit(":", 1)
    ds = gdal.OpenEx(path, gdal.OF_VECTOR | gdal.OF_READONLY)
    lyr = ds.GetLayerByName(layer) if layer else ds.GetLayer(0)
    return ds, lyr


def rows_of(lyr):
    defn = lyr.GetLayerDefn()
    names = [defn.GetFieldDefn(i).GetName() for i in range(defn.GetFieldCount())]
    lyr.ResetReading()
    for f in lyr:
        # by index: OGR's by-name lookup scans the field list in Python
        yield {n: (f.GetField(i) if f.IsFieldSetAndNotNull(i) else None)
               for i, n in enumerate(names)}


def output_layers(out):
    if out.lower().endswith(".gpkg"):
        ds = gdal.OpenEx(out, gdal.OF_VECTOR | gdal.OF_READONLY)
        return [ds], [ds.GetLayerByName("buildings"), ds.GetLayerByName("set_aside")]
    stem, ext = os.path.splitext(out)
    a = gdal.OpenEx(out, gdal.OF_VECTOR | gdal.OF_READONLY)
    b = gdal.OpenEx(stem + ".set_aside" + ext, gdal.OF_VECTOR | gdal.OF_READONLY)
    return [a, b], [a.GetLayer(0), b.GetLayer(0)]


def same_value(a, b):
    if a is None or b is None:
        return (a is None or a == "") and (b is None or b == "")
    if a in (2**63 - 1, -2**63):
        return True     # GDAL clamps integers beyond 64 bits (it warns so)
    if isinstance(a, (int, float)) or isinstance(b, (int, float)):
        try:
            x, y = float(a), float(b)
        except (TypeError, ValueError):
            return str(a) == str(b)
        return x == y or (math.isnan(x) and math.isnan(y)) or math.isclose(x, y, rel_tol=1e-12)
    a, b = str(a), str(b)
    if a == b:
        return True
    if a[:1] in "[{" and b[:1] in "[{":       # nested JSON: GDAL adds spaces
        try:
            return json.loads(a) == json.loads(b)
        except ValueError:
            pass
    # GDAL hands invalid bytes over as lone surrogates; stocktake writes
    # U+FFFD for each byte Python's own decoder also rejects.
    raw = a.encode("utf-8", "surrogateescape")
    return b == raw.decode("utf-8", "replace")


def main():
    args = sys.argv[1:]
    values = not (args and args[0] == "--no-values")
    if not values:
        args = args[1:]
    out, inputs = args[0], args[1:]
    keep, (kept, aside) = output_layers(out)
    by_bid = {}
    for status, lyr in (("buildings", kept), ("set_aside", aside)):
        for r in rows_of(lyr):
            bid = int(r["bid"])
            if bid in by_bid:
                raise SystemExit(f"bid {bid} appears twice (in {by_bid[bid][0]} and {status})")
            by_bid[bid] = (status, r)
    bid = 0
    report = []
    for spec in inputs:
        ds, lyr = open_input(spec)
        src = list(rows_of(lyr))
        counts = {"buildings": 0, "set_aside": 0}
        ids = set()
        layer_name = None
        for i, srow in enumerate(src):
            bid += 1
            if bid not in by_bid:
                raise SystemExit(f"{spec}: feature {i} (bid {bid}) is in no output layer")
            status, orow = by_bid[bid]
            counts[status] += 1
            if layer_name is None:
                layer_name = orow["layer"]
            elif orow["layer"] != layer_name:
                raise SystemExit(f"{spec}: bid {bid} is in layer {orow['layer']}, expected {layer_name}")
            sid = orow.get("source_id")
            if sid not in (None, ""):
                if sid in ids:
                    raise SystemExit(f"{spec}: source_id {sid} appears twice")
                ids.add(sid)
            for k, v in (srow.items() if values else ()):
                ok = [c for c in (k, "src_" + k) if c in orow]
                if not ok and k == "id":
                    ok = ["source_id"]      # GDAL shows a GeoJSON string "id" as a field
                if not ok:
                    raise SystemExit(f"{spec}: attribute {k!r} missing from the output")
                if not same_value(v, orow[ok[-1]]):
                    raise SystemExit(f"{spec}: feature {i} attribute {k!r}: "
                                     f"input {v!r}, output {orow[ok[-1]]!r}")
        n = len(src)
        if n != counts["buildings"] + counts["set_aside"]:
            raise SystemExit(f"{spec}: read {n} != buildings {counts['buildings']} + "
                             f"set_aside {counts['set_aside']}")
        report.append(f"{os.path.basename(spec)}: {n} = {counts['buildings']} + {counts['set_aside']}")
    if bid != len(by_bid):
        raise SystemExit(f"the outputs hold {len(by_bid)} features, the inputs {bid}")
    print("balance ok: " + "; ".join(report))


if __name__ == "__main__":
    main()
