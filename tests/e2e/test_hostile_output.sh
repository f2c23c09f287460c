#!/bin/sh
# tests/e2e/test_hostile_output.sh -- hostile places to write and hostile
# resources, through run and convert: an output in a missing folder, in a
# read-only folder, on a full disk (a 64 KiB tmpfs in a private mount
# namespace), under a file-size limit (ulimit -f: SIGXFSZ used to kill the
# process and leave a half-written temporary file), an output that names an
# input or one of the sibling files a run writes (that used to overwrite
# the input), an output that is a folder, inputs that are FIFOs (that used
# to block for ever), and inputs that need more memory than --max-memory
# (a 100 GB sparse file, a dense layer, one huge feature). Each case ends
# within 60 s, exits 2 with a message naming the file, leaves no output or
# temporary file, leaves an older output and every input byte-identical
# (tests/e2e/hostile.sh).
. "$ST_TESTS_ROOT/e2e/lib.sh"
. "$ST_TESTS_ROOT/e2e/hostile.sh"

IN=$TMP/in
mkdir -p "$IN"
cp "$DATA/cli/marrowick.geojson" "$IN/town.geojson"
SRC=$IN/town.geojson
BIG=$IN/big.geojsonl
# A layer whose outputs pass 64 KiB: 2,000 small squares.
$PY - "$BIG" <<'PY'
import sys
with open(sys.argv[1], "w") as out:
    for i in range(2000):
        x, y = (i % 50) * 1e-4, (i // 50) * 1e-4
        out.write('{"type":"Feature","properties":{"n":%d,"name":"house %d"},"geometry":'
                  '{"type":"Polygon","coordinates":[[[%.4f,%.4f],[%.4f,%.4f],[%.4f,%.4f],'
                  '[%.4f,%.4f],[%.4f,%.4f]]]}}\n'
                  % (i, i, x, y, x + 5e-5, y, x + 5e-5, y + 5e-5, x, y + 5e-5, x, y))
PY
FORMATS="gpkg geojson geojsonl shp csv"
# run refuses a Shapefile inventory up front (its set_aside layer mixes
# geometry types); for .shp the run cases expect that message instead.
runpat() { if [ "$1" = shp ]; then echo "Shapefile holds one geometry type"; else echo "$2"; fi; }

# ---- a folder that does not exist; an output that is a folder; unknown type ----------
for ext in $FORMATS; do
    h_case "output in a missing folder (.$ext)" "$SRC"
    h_run 2 "$(runpat $ext nothere)" "$STOCKTAKE" run -q -o "$HOUT/nothere/inv.$ext" "$SRC"
    h_run 2 "nothere" "$STOCKTAKE" convert -q "$SRC" "$HOUT/nothere/out.$ext"
done
mkdir -p "$IN/folder.gpkg"
h_case "output that is a folder" "$SRC"
h_run 2 "folder.gpkg" "$STOCKTAKE" run -q -o "$IN/folder.gpkg" "$SRC"
h_run 2 "folder.gpkg" "$STOCKTAKE" convert -q "$SRC" "$IN/folder.gpkg"
h_case "output of an unknown type" "$SRC"
h_run 2 "inv.xyz" "$STOCKTAKE" run -q -o "$HOUT/inv.xyz" "$SRC"

# ---- an output that would overwrite an input ----------------------------------------------
h_case "run output = its input" "$SRC"
h_run 2 "town.geojson.*over this input" "$STOCKTAKE" run -q -o "$SRC" "$SRC"
h_run 2 "town.geojson.*over this input" "$STOCKTAKE" run -q -o "$IN/./town.geojson" "$SRC"
cp "$SRC" "$IN/inv.set_aside.geojson"
h_case "run sibling output = an input" "$IN/inv.set_aside.geojson"
h_run 2 "inv.set_aside.geojson.*over this input" "$STOCKTAKE" run -q -o "$IN/inv.geojson" "$IN/inv.set_aside.geojson"
[ ! -e "$IN/inv.geojson" ] || h_fail "an output appeared"
"$STOCKTAKE" convert -q "$SRC" "$IN/layer.gpkg" || fail "cannot make a GeoPackage"
h_case "run output = its GeoPackage input" "$IN/layer.gpkg"
h_run 2 "layer.gpkg.*over this input" "$STOCKTAKE" run -q -o "$IN/layer.gpkg" "$IN/layer.gpkg:town"
h_case "convert output = its input" "$SRC"
h_run 2 "town.geojson" "$STOCKTAKE" convert -q "$SRC" "$SRC"

# ---- an older output survives a failed run --------------------------------------------------
"$STOCKTAKE" run -q -o "$IN/old.gpkg" "$SRC" || fail "cannot make an older output"
printf '{"type":"FeatureCollection","features":[' >"$IN/cut.geojson"
h_case "failed run over an older output" "$IN/cut.geojson" "$IN/old.gpkg"
h_run 2 "cut.geojson" "$STOCKTAKE" run -q -o "$IN/old.gpkg" "$IN/cut.geojson"

# ---- a read-only folder -----------------------------------------------------------------------
# As root, permissions do not stop a write: a read-only tmpfs in a private
# mount namespace does (and vanishes with the process).
ns_ok=0
unshare -m sh -c "mount -t tmpfs -o size=64k tmpfs '$HOUT'" 2>/dev/null && ns_ok=1
# in_mount OPTS CMD...: run CMD with $HOUT mounted as a tmpfs with OPTS;
# what is left in it afterwards goes to $TMP/left. A script, so that
# timeout can run it.
cat >"$TMP/in_mount" <<EOS
#!/bin/sh
opts=\$1; shift
exec unshare -m sh -c 'mount -t tmpfs -o "\$1" tmpfs "\$2" || exit 99; shift 2
    "\$@"; rc=\$?; ls -A "$HOUT" >"$TMP/left"; exit \$rc' sh "\$opts" "$HOUT" "\$@"
EOS
chmod +x "$TMP/in_mount"
in_mount="$TMP/in_mount"
left_nothing() {
    [ ! -s "$TMP/left" ] || h_fail "left in the output folder: $(cat "$TMP/left")"
}
if [ "$(id -u)" -eq 0 ] && [ $ns_ok -eq 1 ]; then
    for ext in $FORMATS; do
        h_case "output in a read-only folder (.$ext)" "$SRC"
        h_run 2 "$(runpat $ext "inv.$ext|Read-only")" "$in_mount" ro,size=64k "$STOCKTAKE" run -q -o "$HOUT/inv.$ext" "$SRC"
        h_run 2 "out.$ext|Read-only" "$in_mount" ro,size=64k "$STOCKTAKE" convert -q "$SRC" "$HOUT/out.$ext"
        h_case "output on a full disk (.$ext)" "$BIG"
        h_run 2 "$(runpat $ext "inv.*$ext|space")" "$in_mount" size=64k "$STOCKTAKE" run -q -o "$HOUT/inv.$ext" "$BIG"
        left_nothing
        h_run 2 "out.*$ext|space" "$in_mount" size=64k "$STOCKTAKE" convert -q "$BIG" "$HOUT/out.$ext"
        left_nothing
    done
elif [ "$(id -u)" -ne 0 ]; then
    mkdir -p "$IN/ro"; chmod 555 "$IN/ro"
    h_case "output in a read-only folder" "$SRC"
    h_run 2 "inv.gpkg|ermission" "$STOCKTAKE" run -q -o "$IN/ro/inv.gpkg" "$SRC"
    chmod 755 "$IN/ro"
else
    echo "note: no private mount namespace here; read-only and full-disk cases skipped" >&2
fi

# ---- a file-size limit: writes fail with EFBIG, the temporary file goes ------------------
for ext in $FORMATS; do
    h_case "output under ulimit -f 64 KiB (.$ext)" "$BIG"
    h_run 2 "$(runpat $ext "inv.*$ext")" sh -c 'ulimit -f 128; exec "$@"' sh "$STOCKTAKE" run -q -o "$HOUT/inv.$ext" "$BIG"
    h_run 2 "out.*$ext" sh -c 'ulimit -f 128; exec "$@"' sh "$STOCKTAKE" convert -q "$BIG" "$HOUT/out.$ext"
done

# ---- inputs that are FIFOs (nobody writes them) -----------------------------------------------
for ext in geojson geojsonl gpkg shp; do
    mkfifo "$IN/pipe.$ext"
    h_case "input that is a FIFO (.$ext)"
    h_run 2 "pipe.$ext.*regular" "$STOCKTAKE" inspect -q "$IN/pipe.$ext"
    h_run 2 "pipe.$ext.*regular" "$STOCKTAKE" convert -q "$IN/pipe.$ext" "$HOUT/out.gpkg"
    h_run 2 "pipe.$ext.*regular" "$STOCKTAKE" run -q -o "$HOUT/inv.gpkg" "$IN/pipe.$ext"
done

# ---- memory ---------------------------------------------------------------------------------
# (not hashed: 100 GB of zeros; its size and time are compared instead)
truncate -s 100G "$IN/sparse.geojson"
before=$(ls -l --time-style=+%s.%N "$IN/sparse.geojson")
h_case "input of 100 GB (sparse) under the default memory limit"
h_run 2 "memory.*limit" "$STOCKTAKE" run -q -o "$HOUT/inv.gpkg" "$IN/sparse.geojson"
[ "$(ls -l --time-style=+%s.%N "$IN/sparse.geojson")" = "$before" ] || h_fail "the sparse input changed"
rm -f "$IN/sparse.geojson"
h_case "layer denser than its size says, --max-memory 66M" "$BIG"
h_run 2 "big.geojsonl: feature [0-9]+.*memory" "$STOCKTAKE" run -q --max-memory 66M -o "$HOUT/inv.gpkg" "$BIG"
h_case "inputs over --max-memory before reading" "$BIG"
h_run 2 "memory.*limit of 10 MiB" "$STOCKTAKE" run -q --max-memory 10M -o "$HOUT/inv.gpkg" "$BIG"
$PY - "$IN/huge_feature.geojson" <<'PY'
import json, sys
ring = [[i * 1e-6, 0] for i in range(200000)] + [[0, 1e-3], [0, 0]]
json.dump({"type": "FeatureCollection", "features": [{"type": "Feature", "properties": {},
           "geometry": {"type": "Polygon", "coordinates": [ring]}}]}, open(sys.argv[1], "w"))
PY
h_case "convert of one feature over --max-memory" "$IN/huge_feature.geojson"
h_run 2 "huge_feature.geojson: feature 0.*memory" "$STOCKTAKE" convert -q --max-memory 5M "$IN/huge_feature.geojson" "$HOUT/out.gpkg"
h_case "--max-memory that is not a size" "$SRC"
h_run 2 "max-memory" "$STOCKTAKE" run -q --max-memory lots -o "$HOUT/inv.gpkg" "$SRC"
h_done
