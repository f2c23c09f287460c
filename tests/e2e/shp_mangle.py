#!/usr/bin/python3
"""Make broken copies of a Shapefile for tests/e2e/test_hostile_shp.sh.

usage: shp_mangle.py SRC_STEM CASE DST_STEM

Copies SRC_STEM.{shp,shx,dbf,prj,cpg} to DST_STEM.* and breaks them as
CASE says. Offsets follow the ESRI Shapefile Technical Description (ESRI
White Paper J-7855, July 1998: 100-byte headers, big-endian record
headers, little-endian content) and the dBASE III header layout (record
count at byte 4, header length at 8, record length at 10).
"""
import os
import shutil
import struct
import sys

src, case, dst = sys.argv[1], sys.argv[2], sys.argv[3]
for ext in ("shp", "shx", "dbf", "prj", "cpg"):
    if os.path.exists(f"{src}.{ext}"):
        shutil.copyfile(f"{src}.{ext}", f"{dst}.{ext}")


def patch(ext, offset, fmt, *values):
    with open(f"{dst}.{ext}", "r+b") as fp:
        fp.seek(offset)
        fp.write(struct.pack(fmt, *values))


def first_record():
    """Offset of the first polygon record's content in the .shp."""
    return 100 + 8


c = first_record()
if case == "magic_shp":            # file code 9994 -> 1234
    patch("shp", 0, ">i", 1234)
elif case == "magic_shx":
    patch("shx", 0, ">i", 0x7F454C46)
elif case == "magic_dbf":          # dBASE version byte
    patch("dbf", 0, "B", 0xFF)
elif case == "parts_2p31":         # numParts = 2^31 (negative as int32)
    patch("shp", c + 36, "<I", 2**31)
elif case == "parts_2p31_minus1":
    patch("shp", c + 36, "<i", 2**31 - 1)
elif case == "points_huge":        # numPoints = 2^31 - 1
    patch("shp", c + 40, "<i", 2**31 - 1)
elif case == "part_index_out":     # first part starts past the points
    patch("shp", c + 44, "<i", 1_000_000)
elif case == "content_len_huge":   # record header content length
    patch("shp", 100 + 4, ">i", 2**31 - 1)
elif case == "file_len_huge":      # main header file length (16-bit words)
    patch("shp", 24, ">i", 2**31 - 1)
elif case == "shx_offset_out":     # index points far past the end
    patch("shx", 100, ">i", 2**30)
elif case == "shape_type_bad":
    patch("shp", c, "<i", 77)
elif case == "dbf_count_huge":     # 2^31 - 1 records declared
    patch("dbf", 4, "<I", 2**31 - 1)
elif case == "dbf_header_len_bad":
    patch("dbf", 8, "<H", 0xFFFF)
elif case == "dbf_record_len_zero":
    patch("dbf", 10, "<H", 0)
elif case == "dbf_fewer_records":  # a .dbf with two records less than the .shp
    with open(f"{dst}.dbf", "r+b") as fp:
        head = fp.read(12)
        n, hlen, rlen = struct.unpack("<IHH", head[4:12])
        fp.seek(4)
        fp.write(struct.pack("<I", n - 2))
        fp.truncate(hlen + (n - 2) * rlen)
        fp.seek(hlen + (n - 2) * rlen)
        fp.write(b"\x1a")
elif case == "coord_nan":          # first vertex x = NaN
    parts = struct.unpack("<i", open(f"{dst}.shp", "rb").read()[c + 36:c + 40])[0]
    patch("shp", c + 44 + 4 * parts, "<d", float("nan"))
elif case == "coord_huge":
    parts = struct.unpack("<i", open(f"{dst}.shp", "rb").read()[c + 36:c + 40])[0]
    patch("shp", c + 44 + 4 * parts, "<d", 1e308)
elif case == "dbf_invalid_utf8":   # 0xFF bytes inside the first record's text
    with open(f"{dst}.dbf", "r+b") as fp:
        hlen = struct.unpack("<H", fp.read(12)[8:10])[0]
        fp.seek(hlen + 1)
        fp.write(b"\xff\xfe\xc0\x80")
elif case == "prj_garbage":
    open(f"{dst}.prj", "wb").write(bytes(range(256)) * 4)
elif case == "prj_huge":
    open(f"{dst}.prj", "wb").write(b'GEOGCS["' + b"x" * (2 << 20) + b'"]')
elif case == "cpg_unknown":
    open(f"{dst}.cpg", "wb").write(b"KLINGON-9")
elif case == "no_shx":
    os.remove(f"{dst}.shx")
elif case == "no_dbf":
    os.remove(f"{dst}.dbf")
else:
    raise SystemExit(f"unknown case {case}")
