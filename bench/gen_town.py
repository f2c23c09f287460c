#!/usr/bin/python3
"""
bench/gen_town.py -- seeded generator of Quellamar, an INVENTED harbour town
on the invented island of Tamberune, for stocktake's demo and benchmarks.

Input:   options only. --seed S --n N --districts K --out DIR
         [--format geojson|geojsonl] [--no-cadastre] [--no-truth]
         [--omit FAULT,...];
         or --table MANIFEST [--table-kind faults|districts|facts] to print
         one of samples/README.md's tables from an earlier run's manifest.
Output:  in DIR (names fixed, extension by --format):
           buildings_osm.EXT       crowd-mapped footprints, OpenStreetMap-style
                                   tags, exactly N features, faults at the
                                   rates in CROWD_FAULTS
           buildings_cadastre.EXT  a smaller municipal layer with local field
                                   names, covering the districts flagged
                                   'cadastre', partly the same buildings
           districts.geojson       K district polygons tiling the town, keyed
                                   by district_id, parent region_id
           reference_counts.csv    district_id,buildings,census_year,method
           faults.csv              every injected fault: layer, feature index,
                                   source id, fault, index of the original
           buildings_truth.csv     one row per true building (not --no-truth)
           manifest.json           what was generated, with exact counts
Errors:  bad options: message on stderr, exit 2. I/O errors: exit 1.
Limits:  features are written as they are made, one block (at most a few
         dozen buildings) at a time; memory grows only with the block
         lattice (about N/8 small tuples): about 30 MB for N = 1,000,000.

Determinism: one random.Random(seed) drives everything, and only its
random() method is used (its output is fixed across Python 3 versions);
integers, choices and shuffles are derived here from random(). The same
--seed, --n, --districts and options give byte-identical files.

Geometry is made in local metres (x east, y north, origin at the town's
south-west corner) and turned into lon/lat with constant degrees-per-metre
at the town centre -- a flat approximation, good to about 0.5 % in area
across a 30 km benchmark town and far better across the demo town. Fault
sizes keep a margin to the thresholds they test (fragments < 4.5 m2 against
6 m2, oversize > 55,000 m2 against 50,000 m2).

Standard library only: runs with /usr/bin/python3 (3.9 or later).
"""

import argparse
import bisect
import json
import math
import os
import random
import sys

VERSION = 1

# ---------------------------------------------------------------------------
# Where the invented town lies: open South Pacific ocean, some 2,500 km from
# the nearest land. No real town, island or coast is there.
# ---------------------------------------------------------------------------
TOWN = "Quellamar"
ISLAND = "Tamberune"
CENTRE_LAT = -47.9125
CENTRE_LON = -126.2375


def metres_per_degree(lat_deg):
    """Metres per degree of latitude and of longitude at 'lat_deg' (the
    usual series for the WGS 84 ellipsoid)."""
    p = math.radians(lat_deg)
    m_lat = (111132.92 - 559.82 * math.cos(2 * p) + 1.175 * math.cos(4 * p)
             - 0.0023 * math.cos(6 * p))
    m_lon = (111412.84 * math.cos(p) - 93.5 * math.cos(3 * p)
             + 0.118 * math.cos(5 * p))
    return m_lat, m_lon


M_PER_DEG_LAT, M_PER_DEG_LON = metres_per_degree(CENTRE_LAT)

# Block lattice: a block is 100 m x 50 m (five 20 m parcels by two 25 m
# parcels); streets are 12 m wide.
BLOCK_W = 100.0
BLOCK_D = 50.0
STREET = 12.0
PITCH_X = BLOCK_W + STREET
PITCH_Y = BLOCK_D + STREET
ASPECT = 1.4              # town width / height

# Share of a district's block capacity the quota aims at; the rest is a
# reserve so that exactly N crowd features can always be made.
FILL = 0.78

# ---------------------------------------------------------------------------
# Faults, as a share of the mapped buildings of a layer. A building gets at
# most one fault, so the ground truth stays unambiguous. Faults marked
# 'extra' add a feature after the building's own one.
# ---------------------------------------------------------------------------
CROWD_FAULTS = (
    ("bowtie", 0.004),            # two vertices swapped: self-intersection
    ("self_touch", 0.002),        # ring touches itself, enclosing a notch
    ("hole_outside", 0.001),      # a hole drawn outside its shell
    ("unclosed", 0.002),          # last position differs from the first
    ("too_few_points", 0.0015),   # ring A,B,A
    ("repeated_vertex", 0.015),   # a vertex repeated consecutively
    ("spike", 0.003),             # out-and-back cut line from an edge
    ("dup_exact", 0.008),         # extra: the same ring again
    ("dup_rotated", 0.004),       # extra: same ring, other start vertex
    ("dup_reversed", 0.003),      # extra: same ring, opposite direction
    ("near_dup", 0.008),          # extra: copy shifted 0.3-1.0 m
    ("overlap", 0.008),           # extra: part drawn overlapping it
    ("sliver", 0.004),            # extra: 0.35-0.6 m wide strip by a wall
    ("fragment", 0.010),          # extra: < 4.5 m2 scrap beside it
    ("oversize", 0.001),          # extra: > 55,000 m2 'building'
    ("null_geometry", 0.002),     # "geometry": null
    ("empty_geometry", 0.001),    # Polygon/MultiPolygon with no coordinates
    ("point", 0.002),             # a Point where the polygon belongs
    ("swapped", 0.001),           # latitude and longitude swapped
    ("z", 0.002),                 # positions with a third (Z) value
)
CADASTRE_FAULTS = (
    ("repeated_vertex", 0.030),
    ("dup_exact", 0.005),
    ("bowtie", 0.003),
    ("sliver", 0.005),
    ("null_geometry", 0.005),
    ("unclosed", 0.002),
)
EXTRA_FAULTS = ("dup_exact", "dup_rotated", "dup_reversed", "near_dup",
                "overlap", "sliver", "fragment", "oversize")
FAULT_TEXT = {
    "bowtie": "self-intersecting (bowtie) ring",
    "self_touch": "ring touching itself (notch enclosing an inverted hole)",
    "hole_outside": "hole outside the shell",
    "unclosed": "unclosed ring",
    "too_few_points": "too few points (ring A,B,A)",
    "repeated_vertex": "repeated consecutive vertices",
    "spike": "spike (out-and-back cut line)",
    "dup_exact": "exact duplicate (extra feature)",
    "dup_rotated": "duplicate, start vertex rotated (extra)",
    "dup_reversed": "duplicate, direction reversed (extra)",
    "near_dup": "near-duplicate, shifted 0.3-1.0 m (extra)",
    "overlap": "overlapping footprint (extra)",
    "sliver": "sliver, 0.35-0.6 m wide (extra)",
    "fragment": "fragment < 4.5 m2 (extra)",
    "oversize": "oversize > 55,000 m2 (extra)",
    "null_geometry": "null geometry",
    "empty_geometry": "empty geometry",
    "point": "Point where a polygon belongs",
    "swapped": "latitude/longitude swapped",
    "z": "coordinates with Z",
}

# Styles of block and the buildings a block of each style holds on average
# (measured on this generator; used only to size the town).
STYLES = ("detached", "terrace", "apartment", "commercial", "industrial",
          "civic", "informal", "vacant")
STYLE_YIELD = {"detached": 10.9, "terrace": 29.0, "apartment": 2.5,
               "commercial": 8.3, "industrial": 2.0, "civic": 5.4,
               "informal": 54.0, "vacant": 0.0}

# ---------------------------------------------------------------------------
# The ten districts of the demo town, listed north row first. All names are
# invented. 'levels' .. 'date' are the shares of crowd-mapped buildings that
# carry that tag; 'yes' the share tagged only building=yes; 'mapped' the
# share of real buildings the crowd layer has at all.
# ---------------------------------------------------------------------------
REGIONS = (("QN", "Quellamar Norte"), ("QC", "Quellamar Centro"),
           ("QS", "Quellamar Sur"))

DEMO_DISTRICTS = (
    # row 2 (north shore): the harbour front, the old town, the port
    dict(key="QM01", name="Cais Brunavel", region="QN",
         styles=dict(terrace=.40, commercial=.25, industrial=.10, civic=.05,
                     apartment=.05, detached=.05, vacant=.10),
         era=(1890, 1985), mat=dict(URM=.45, RM=.30, RC=.15, TMB=.10),
         mapped=.99, levels=.80, height=.35, material=.40, roof=.30,
         date=.20, yes=.25, cadastre=False, census=(2021, "census")),
    dict(key="QM02", name="Orvaneto", region="QN",
         styles=dict(terrace=.55, civic=.10, commercial=.15, detached=.10,
                     vacant=.10),
         era=(1860, 1960), mat=dict(URM=.60, RM=.20, TMB=.10, RC=.10),
         mapped=.98, levels=.55, height=.15, material=.30, roof=.25,
         date=.35, yes=.30, cadastre=True, census=(2021, "census")),
    dict(key="QM03", name="Fenduro", region="QN",
         styles=dict(industrial=.60, commercial=.15, terrace=.05,
                     vacant=.20),
         era=(1950, 2015), mat=dict(RM=.50, RC=.30, URM=.10, TMB=.10),
         mapped=.96, levels=.10, height=.05, material=.10, roof=.10,
         date=.05, yes=.60, cadastre=False, census=(2021, "census")),
    # row 1 (centre): the municipal cadastre covers this region but the
    # hillside (and, above, the old town)
    dict(key="QM04", name="Calvarosa", region="QC",
         styles=dict(commercial=.40, apartment=.25, civic=.10, terrace=.15,
                     vacant=.10),
         era=(1930, 2010), mat=dict(RC=.45, RM=.35, URM=.20),
         mapped=.98, levels=.45, height=.20, material=.15, roof=.10,
         date=.10, yes=.35, cadastre=True, census=(2021, "census")),
    dict(key="QM05", name="Pellucina", region="QC",
         styles=dict(apartment=.55, commercial=.10, civic=.05, detached=.10,
                     vacant=.20),
         era=(1965, 2000), mat=dict(RC=.60, RM=.35, URM=.05),
         mapped=.97, levels=.35, height=.25, material=.10, roof=.05,
         date=.15, yes=.40, cadastre=True, census=(2021, "census")),
    dict(key="QM06", name="Tessalune", region="QC",
         styles=dict(detached=.80, civic=.05, commercial=.05, vacant=.10),
         era=(1970, 2015), mat=dict(RM=.60, RC=.20, TMB=.20),
         mapped=.96, levels=.15, height=.05, material=.05, roof=.05,
         date=.05, yes=.55, cadastre=True, census=(2021, "census")),
    dict(key="QM07", name="Miraquel Alto", region="QC",
         styles=dict(informal=.45, detached=.35, vacant=.20),
         era=(1975, 2020), mat=dict(RM=.35, TMB=.30, ADB=.20, URM=.15),
         mapped=.93, levels=.03, height=.01, material=.02, roof=.08,
         date=.01, yes=.85, cadastre=False, census=(2019, "estimate")),
    # row 0 (south): hillside settlement, new suburb, the edge of town
    dict(key="QM08", name="Sombralta", region="QS",
         styles=dict(informal=.85, detached=.05, vacant=.10),
         era=(1985, 2022), mat=dict(ADB=.35, TMB=.30, URM=.20, RM=.15),
         mapped=.15, levels=.05, height=.00, material=.05, roof=.15,
         date=.00, yes=.90, cadastre=False, census=(2019, "estimate")),
    dict(key="QM09", name="Zarcavel", region="QS",
         styles=dict(detached=.85, commercial=.05, civic=.03, vacant=.07),
         era=(1995, 2022), mat=dict(RM=.55, RC=.35, TMB=.10),
         mapped=.97, levels=.25, height=.10, material=.10, roof=.05,
         date=.30, yes=.50, cadastre=False, census=(2021, "census")),
    dict(key="QM10", name="Lumbrezza", region="QS",
         styles=dict(detached=.55, vacant=.40, industrial=.05),
         era=(1940, 2020), mat=dict(TMB=.45, RM=.35, ADB=.10, RC=.10),
         mapped=.95, levels=.08, height=.02, material=.12, roof=.10,
         date=.02, yes=.70, cadastre=False, census=(2021, "census")),
)
DEMO_ROWS = (3, 4, 3)     # districts per row, south row first
UNDERMAPPED_MAPPED = 0.15  # crowd completeness of an under-mapped district

# ---------------------------------------------------------------------------
# Local words: spellings of tag values as volunteers type them.
# ---------------------------------------------------------------------------
SPELL_BUILDING = {
    "house": ("house", "house", "house", "House", "detached", "residential",
              "Residential", "resid.", "casa", "vivienda", "Vivienda",
              "residencial", "residental"),
    "terrace": ("terrace", "terrace", "house", "residential", "Terrace",
                "terraced_house", "casa adosada", "vivienda"),
    "apartments": ("apartments", "apartments", "residential", "Apartments",
                   "apartamentos", "apartmnets", "edificio"),
    "MIX": ("residential;retail", "retail;residential", "mixed",
            "comercial;vivienda", "Mixed Use"),
    "COM": ("commercial", "retail", "Retail", "shop", "comercio",
            "comércio", "office", "commerical", "oficinas"),
    "IND": ("industrial", "industrial", "warehouse", "Industrial",
            "nave industrial", "galpão", "industiral", "factory"),
    "EDU": ("school", "school", "escuela", "escola", "college"),
    "HLT": ("hospital", "clinic", "clínica", "posto de saúde"),
    "REL": ("church", "church", "iglesia", "igreja", "chapel", "capilla"),
    "PUB": ("public", "civic", "government", "ayuntamiento", "townhall"),
    "outbuilding": ("garage", "garage", "shed", "garagem", "cobertizo",
                    "roof", "Garage"),
    "hut": ("house", "hut", "casa", "barraca", "vivienda precaria",
            "residential"),
}
SPELL_MATERIAL = {
    "RC": ("concrete", "concrete", "reinforced_concrete", "Concrete",
           "hormigón", "concreto", "betão armado"),
    "RM": ("brick", "cement_block", "masonry", "bloque", "ladrillo",
           "blocks", "Brick"),
    "URM": ("stone", "brick", "mampostería", "unreinforced masonry",
            "pedra", "stone;brick"),
    "TMB": ("wood", "wood", "timber", "madera", "madeira", "Wood"),
    "ADB": ("adobe", "adobe", "Adobe", "earth", "taipa", "bahareque"),
    "STL": ("steel", "metal", "acero", "Steel", "steel;concrete"),
}
ROOF_MATERIALS = ("metal", "metal", "tiles", "roof_tiles", "concrete", "zinc",
                  "chapa", "tejas", "thatch", "Metal", "telha")
WORDS = (("one", "two", "three", "four", "five"),
         ("uno", "dos", "tres", "cuatro", "cinco"),
         ("um", "dois", "três", "quatro", "cinco"))
SAINTS = ("San Orvino", "Santa Brunela", "San Corvelio", "Santa Ilvena",
          "San Teobrando")
SURNAMES = ("Vessarro", "Quintelle", "Dorvalán", "Marrecho", "Ilvanes",
            "Tobrena", "Ocampel")
SHOPS = ("Panadería", "Ferretería", "Farmacia", "Almacén", "Café",
         "Talleres", "Hotel", "Mercadito")

# Cadastre codes (the municipality's own).
CAD_USE = {"house": "R1", "terrace": "R1", "hut": "R1", "apartments": "R2",
           "MIX": "MX", "COM": "CO", "IND": "IN", "EDU": "EQ", "HLT": "EQ",
           "REL": "EQ", "PUB": "EQ", "outbuilding": "AN"}
CAD_MATERIAL = {"RC": ("HA", "HORMIGON ARMADO"), "RM": ("MC", "BLOQUE"),
                "URM": ("MS", "PIEDRA"), "TMB": ("MAD", "MADERA"),
                "ADB": ("ADO", "ADOBE"), "STL": ("MET", "ESTRUCT. METALICA")}


# ---------------------------------------------------------------------------
# Random helpers built only on random() (see Determinism above).
# ---------------------------------------------------------------------------
class Rng:
    def __init__(self, seed):
        self.r = random.Random(seed)

    def u(self, a=0.0, b=1.0):
        return a + (b - a) * self.r.random()

    def chance(self, p):
        return self.r.random() < p

    def int(self, a, b):
        """Integer in [a, b], both ends included."""
        return a + min(b - a, int(self.r.random() * (b - a + 1)))

    def pick(self, seq):
        return seq[self.int(0, len(seq) - 1)]

    def weighted(self, weights):
        """Key of 'weights' (dict key -> weight), by weight."""
        total = sum(weights.values())
        x = self.r.random() * total
        acc = 0.0
        last = None
        for k, w in weights.items():
            acc += w
            last = k
            if x < acc:
                return k
        return last

    def shuffle(self, seq):
        for i in range(len(seq) - 1, 0, -1):
            j = self.int(0, i)
            seq[i], seq[j] = seq[j], seq[i]


def fmt_num(v):
    """A height or share as a volunteer writes it: 9, 9.5 (one decimal)."""
    s = "%.1f" % v
    return s[:-2] if s.endswith(".0") else s


# ---------------------------------------------------------------------------
# Plane geometry in local metres.
# ---------------------------------------------------------------------------
class Frame:
    """A rotated frame: local (u, v) -> town (x, y)."""
    __slots__ = ("ox", "oy", "c", "s", "theta")

    def __init__(self, ox, oy, theta):
        self.ox, self.oy, self.theta = ox, oy, theta
        self.c, self.s = math.cos(theta), math.sin(theta)

    def pt(self, u, v):
        return (self.ox + u * self.c - v * self.s,
                self.oy + u * self.s + v * self.c)

    def child(self, u, v, dtheta):
        x, y = self.pt(u, v)
        return Frame(x, y, self.theta + dtheta)


def closed(pts):
    return list(pts) + [pts[0]]


def rect(f, w, d):
    """Closed counter-clockwise rectangle w x d centred on frame f."""
    a, b = w / 2.0, d / 2.0
    return closed([f.pt(-a, -b), f.pt(a, -b), f.pt(a, b), f.pt(-a, b)])


def ring_area(ring):
    """Signed shoelace area of a closed ring (positive if CCW)."""
    s = 0.0
    for i in range(len(ring) - 1):
        x1, y1 = ring[i]
        x2, y2 = ring[i + 1]
        s += x1 * y2 - x2 * y1
    return s / 2.0


def poly_area(poly):
    return abs(ring_area(poly[0])) - sum(abs(ring_area(h)) for h in poly[1:])


def ring_centre(ring):
    pts = ring[:-1]
    return (sum(p[0] for p in pts) / len(pts), sum(p[1] for p in pts) / len(pts))


def translate(ring, dx, dy):
    return [(x + dx, y + dy) for x, y in ring]


# ---------------------------------------------------------------------------
# Districts: a jittered grid that tiles the town exactly. Rows are bounded by
# shared polylines; inside a row, cells are split by three-point lines. Every
# point two cells share is computed once, so the tiling has no gap or overlap.
# ---------------------------------------------------------------------------
class DistrictGrid:
    """Jitter bounds keep every cell simple: a row line rises at most 0.4
    (its knots move at most 0.2 of their spacing), a boundary inside a row
    at least 1.65 (it leans at most 0.17 a over at least 0.28 a, a being
    the smaller of cell width and row height), so the two meet only at
    their shared corner."""

    def __init__(self, rng, width, height, row_counts):
        self.w, self.h = width, height
        self.rows = len(row_counts)
        self.counts = list(row_counts)
        rh = height / self.rows
        step = width / (max(self.counts) * 3)
        hjit = min(0.12 * rh, 0.2 * step)
        # vertical boundaries of each row: (x_bottom, (x_mid, y_mid), x_top)
        self.vbounds = []
        for r, c in enumerate(row_counts):
            cw = width / c
            a = min(cw, rh)
            y0, y1 = r * rh, (r + 1) * rh
            row = []
            for j in range(1, c):
                xb = j * cw + rng.u(-0.12, 0.12) * a
                xt = j * cw + rng.u(-0.12, 0.12) * a
                xm = (xb + xt) / 2 + rng.u(-0.05, 0.05) * a
                ym = (y0 + y1) / 2 + rng.u(-0.1, 0.1) * rh
                row.append((xb, (xm, ym), xt))
            self.vbounds.append(row)
        # horizontal polylines 0..rows: knots at a regular step, jittered,
        # plus the corners of the rows below and above, on the line.
        self.hlines = []
        for r in range(self.rows + 1):
            y = r * rh
            nk = int(round(width / step))
            knots = []
            for k in range(nk + 1):
                x = width * k / nk
                jit = 0.0 if r in (0, self.rows) or k in (0, nk) else \
                    rng.u(-hjit, hjit)
                knots.append((x, y + jit))
            corners = []
            if r > 0:
                corners += [b[2] for b in self.vbounds[r - 1]]
            if r < self.rows:
                corners += [b[0] for b in self.vbounds[r]]
            pts = list(knots)
            for x in corners:
                pts.append((x, self._interp(knots, x)))
            pts.sort()
            self.hlines.append(pts)
        self.hx = [[p[0] for p in pts] for pts in self.hlines]
        # heights where each vertical boundary meets its row's lines
        self.vends = [[(self._hline_y(r, xb), self._hline_y(r + 1, xt))
                       for xb, _, xt in row]
                      for r, row in enumerate(self.vbounds)]

    @staticmethod
    def _interp(pts, x):
        lo, hi = 0, len(pts) - 1
        while hi - lo > 1:
            mid = (lo + hi) // 2
            if pts[mid][0] <= x:
                lo = mid
            else:
                hi = mid
        (x0, y0), (x1, y1) = pts[lo], pts[hi]
        if x1 == x0:
            return y0
        return y0 + (y1 - y0) * (x - x0) / (x1 - x0)

    def _hline_y(self, r, x):
        xs, pts = self.hx[r], self.hlines[r]
        i = min(max(bisect.bisect_right(xs, x), 1), len(xs) - 1)
        (x0, y0), (x1, y1) = pts[i - 1], pts[i]
        if x1 == x0:
            return y0
        return y0 + (y1 - y0) * (x - x0) / (x1 - x0)

    def _vline_x(self, r, j, y):
        """x of vertical boundary j of row r at height y."""
        xb, (xm, ym), xt = self.vbounds[r][j]
        yb, yt = self.vends[r][j]
        if y <= ym:
            return xb + (xm - xb) * (y - yb) / (ym - yb)
        return xm + (xt - xm) * (y - ym) / (yt - ym)

    def locate(self, x, y):
        """(row, column) of the cell holding (x, y), or None outside."""
        if not (0.0 <= x <= self.w and 0.0 <= y <= self.h):
            return None
        lo, hi = 0, self.rows - 1          # rows are ordered south to north
        while lo < hi:
            mid = (lo + hi + 1) // 2
            if y >= self._hline_y(mid, x):
                lo = mid
            else:
                hi = mid - 1
        r = lo
        lo, hi = 0, len(self.vbounds[r])
        while lo < hi:
            mid = (lo + hi) // 2
            if x >= self._vline_x(r, mid, y):
                lo = mid + 1
            else:
                hi = mid
        return r, lo

    def _span(self, r, x0, x1):
        """Points of line r with x0 <= x <= x1 (both are points of it)."""
        xs = self.hx[r]
        return self.hlines[r][bisect.bisect_left(xs, x0):
                              bisect.bisect_right(xs, x1)]

    def cell_ring(self, r, j):
        """Closed CCW ring of cell (r, j)."""
        c = self.counts[r]
        xb_left = 0.0 if j == 0 else self.vbounds[r][j - 1][0]
        xb_right = self.w if j == c - 1 else self.vbounds[r][j][0]
        xt_left = 0.0 if j == 0 else self.vbounds[r][j - 1][2]
        xt_right = self.w if j == c - 1 else self.vbounds[r][j][2]
        bottom = self._span(r, xb_left, xb_right)
        top = self._span(r + 1, xt_left, xt_right)
        ring = list(bottom)
        if j < c - 1:
            ring.append(self.vbounds[r][j][1])
        ring += top[::-1]
        if j > 0:
            ring.append(self.vbounds[r][j - 1][1])
        return closed(ring)


# ---------------------------------------------------------------------------
# Buildings. A building is the truth; layers are drawings of it.
# ---------------------------------------------------------------------------
class Bldg:
    __slots__ = ("polys", "cx", "cy", "kind", "occ", "storeys", "material",
                 "year", "height", "roof", "name", "amenity", "block",
                 "terrace_row", "district", "bid", "multi")

    def __init__(self, polys, centre, kind, occ):
        self.polys = polys          # list of polygons; polygon = rings
        self.cx, self.cy = centre
        self.kind = kind            # spelling family, see SPELL_BUILDING
        self.occ = occ              # RES COM MIX IND EDU HLT REL PUB
        self.storeys = 1
        self.material = "RM"
        self.year = 2000
        self.height = 3.0
        self.roof = None
        self.name = None
        self.amenity = None
        self.block = None
        self.terrace_row = None
        self.district = None
        self.bid = None
        self.multi = len(polys) > 1


def storey_height(rng, occ):
    if occ in ("COM", "MIX", "PUB", "HLT", "EDU"):
        return rng.u(3.4, 4.2)
    return rng.u(2.8, 3.2)


def fill_truth(rng, b, prof, style):
    """Storeys, material, year, height and roof of building b."""
    lo, hi = prof["era"]
    b.year = rng.int(lo, hi)
    if style == "apartment":
        b.material = rng.weighted(dict(RC=.85, RM=.15))
    elif style == "industrial":
        b.material = rng.weighted(dict(STL=.55, RC=.35, RM=.10))
    elif style == "commercial":
        b.material = rng.weighted(dict(RC=.55, RM=.30, URM=.15))
    else:
        b.material = rng.weighted(prof["mat"])
    if b.occ == "IND":
        b.height = round(rng.u(5.5, 10.0) * (1 if b.storeys == 1 else 1.6), 1)
    else:
        b.height = round(b.storeys * storey_height(rng, b.occ)
                         + rng.u(0.0, 1.8), 1)
    b.roof = rng.pick(ROOF_MATERIALS)


class BlockMaker:
    """Turns one block of a given style into buildings."""

    def __init__(self, rng):
        self.rng = rng
        self.terrace_rows = 0
        self.terrace_houses = 0
        self.shared_walls = 0

    def make(self, style, frame, prof, district_name):
        rng = self.rng
        out = []
        if style == "detached":
            self._detached(frame, prof, out, range(5))
        elif style == "terrace":
            self._terrace(frame, prof, out)
        elif style == "apartment":
            self._apartment(frame, prof, out)
        elif style == "commercial":
            self._commercial(frame, prof, out)
        elif style == "industrial":
            self._industrial(frame, prof, out)
        elif style == "civic":
            self._civic(frame, prof, out, district_name)
            self._detached(frame, prof, out, (3, 4))
        elif style == "informal":
            self._informal(frame, prof, out)
        for b in out:
            fill_truth(rng, b, prof, style)
        return out

    def _house_ring(self, f, w, d):
        rng = self.rng
        if not rng.chance(0.25):
            return rect(f, w, d)
        # L-shape: a corner cut out, the corner picked by mirroring; the
        # cut stays clear of the centre, so the centre is inside
        a, b = w / 2.0, d / 2.0
        cw, cd = rng.u(0.3, 0.45) * w, rng.u(0.3, 0.45) * d
        sx = 1 if rng.chance(0.5) else -1
        sy = 1 if rng.chance(0.5) else -1
        loc = [(-a, -b), (a, -b), (a, b - cd), (a - cw, b - cd), (a - cw, b),
               (-a, b)]
        loc = [(sx * u, sy * v) for u, v in loc]
        if sx * sy < 0:
            loc.reverse()
        return closed([f.pt(u, v) for u, v in loc])

    def _detached(self, frame, prof, out, columns):
        rng = self.rng
        for i in columns:
            for j in (0, 1):
                side = -1 if j == 0 else 1
                if not rng.chance(0.9):
                    continue
                w, d = rng.u(7.0, 12.0), rng.u(8.0, 13.0)
                pu = -40.0 + 20.0 * i + rng.u(-2.0, 2.0)
                pv = side * (16.0 + rng.u(-1.0, 1.0))
                f = frame.child(pu, pv, math.radians(rng.u(-6.0, 6.0)))
                occ = "COM" if rng.chance(0.05) else "RES"
                b = Bldg([[self._house_ring(f, w, d)]], (f.ox, f.oy),
                         "house" if occ == "RES" else "COM", occ)
                b.storeys = rng.weighted({1: .55, 2: .38, 3: .07})
                out.append(b)
                if rng.chance(0.2):
                    g = frame.child(pu + rng.u(-4.0, 4.0), side * 4.5,
                                    math.radians(rng.u(-3.0, 3.0)))
                    gb = Bldg([[rect(g, rng.u(3.0, 6.0), rng.u(3.5, 5.0))]],
                              (g.ox, g.oy), "outbuilding", "RES")
                    gb.storeys = 1
                    out.append(gb)

    def _terrace(self, frame, prof, out):
        rng = self.rng
        skew = 0.35 if prof["era"][0] < 1900 else 0.1
        for j in (0, 1):
            d = rng.u(9.0, 12.0)
            vlo, vhi = (-24.0, -24.0 + d) if j == 0 else (24.0 - d, 24.0)
            u = -49.0
            row = []

            def flush(row):
                if len(row) >= 2:
                    self.terrace_rows += 1
                    self.terrace_houses += len(row)
                    self.shared_walls += len(row) - 1
                    tag = self.terrace_rows
                    for b in row:
                        b.terrace_row = tag
                out.extend(row)

            walls = None
            while True:
                width = rng.u(4.5, 8.0)
                if u + width > 49.0:
                    break
                if walls is None:
                    walls = (frame.pt(u, vlo), frame.pt(u, vhi))
                nu = u + width
                jf, jb = rng.u(-skew, skew), rng.u(-skew, skew)
                nxt = (frame.pt(nu + jf, vlo), frame.pt(nu + jb, vhi))
                ring = closed([walls[0], nxt[0], nxt[1], walls[1]])
                occ = rng.weighted(dict(RES=.80, MIX=.15, COM=.05))
                kind = "terrace" if occ == "RES" else occ
                c = frame.pt((u + nu) / 2.0, (vlo + vhi) / 2.0)
                b = Bldg([[ring]], c, kind, occ)
                b.storeys = rng.weighted({1: .15, 2: .50, 3: .30, 4: .05})
                row.append(b)
                u = nu
                walls = nxt
                if rng.chance(0.12):
                    flush(row)
                    row = []
                    walls = None
                    u += rng.u(1.5, 3.5)
            flush(row)

    def _apartment(self, frame, prof, out):
        rng = self.rng
        if rng.chance(0.3):
            w, d = rng.u(70.0, 90.0), rng.u(40.0, 44.0)
            inset = rng.u(11.0, 13.0)
            f = frame.child(rng.u(-3.0, 3.0), 0.0, 0.0)
            shell = rect(f, w, d)
            hole = rect(f, w - 2 * inset, d - 2 * inset)[::-1]
            b = Bldg([[shell, hole]], f.pt(0.0, -d / 2.0 + inset / 2.0),
                     "apartments", "RES")
            b.storeys = rng.int(3, 6)
            out.append(b)
            return
        for side in (-1, 1):
            n = 1 if rng.chance(0.5) else 2
            span = 96.0 / n
            for k in range(n):
                w = rng.u(0.55, 0.85) * span
                d = rng.u(11.0, 16.0)
                cu = -48.0 + span * (k + 0.5)
                f = frame.child(cu, side * 14.0 + rng.u(-1.0, 1.0), 0.0)
                occ = "MIX" if rng.chance(0.1) else "RES"
                b = Bldg([[rect(f, w, d)]], (f.ox, f.oy),
                         "apartments" if occ == "RES" else "MIX", occ)
                b.storeys = rng.int(4, 9)
                out.append(b)

    def _commercial(self, frame, prof, out):
        rng = self.rng
        for side in (-1, 1):
            u = -49.0
            while True:
                w = rng.u(10.0, 28.0)
                if u + w > 49.0:
                    break
                d = rng.u(14.0, 22.0)
                f = frame.child(u + w / 2.0, side * (24.0 - d / 2.0), 0.0)
                occ = rng.weighted(dict(COM=.60, MIX=.30, RES=.10))
                b = Bldg([[rect(f, w, d)]], (f.ox, f.oy),
                         "house" if occ == "RES" else occ, occ)
                b.storeys = rng.weighted({1: .35, 2: .35, 3: .20, 4: .10})
                if occ != "RES" and rng.chance(0.25):
                    b.name = "%s %s" % (rng.pick(SHOPS), rng.pick(SURNAMES))
                out.append(b)
                u += w + rng.u(1.5, 4.0)

    def _industrial(self, frame, prof, out):
        rng = self.rng
        n = rng.int(1, 3)
        span = 98.0 / n
        for k in range(n):
            w = rng.u(0.8, 0.95) * (span - 6.0)
            d = rng.u(24.0, 44.0)
            f = frame.child(-49.0 + span * (k + 0.5),
                            rng.u(-1.0, 1.0) * (44.0 - d) / 2.0, 0.0)
            occ = "IND" if rng.chance(0.85) else "COM"
            b = Bldg([[rect(f, w, d)]], (f.ox, f.oy), occ, occ)
            b.storeys = 1 if rng.chance(0.85) else 2
            out.append(b)

    def _civic(self, frame, prof, out, dname):
        rng = self.rng
        occ = rng.weighted(dict(EDU=.35, REL=.25, HLT=.20, PUB=.20))
        f = frame.child(-20.0 + rng.u(-2.0, 2.0), rng.u(-2.0, 2.0), 0.0)
        centre = (f.ox, f.oy)
        polys = None
        if occ == "EDU":
            if rng.chance(0.4):
                # two separate wings: a valid two-part MultiPolygon
                a = f.child(0.0, -12.0, 0.0)
                c = f.child(0.0, 12.0, 0.0)
                polys = [[rect(a, rng.u(40.0, 50.0), 12.0)],
                         [rect(c, rng.u(40.0, 50.0), 12.0)]]
                centre = (a.ox, a.oy)
            else:
                polys = [[self._house_ring(f, rng.u(40.0, 54.0),
                                           rng.u(28.0, 40.0))]]
            name = rng.pick(("Escuela Primaria N.º %d" % rng.int(1, 12),
                             "Colegio %s" % rng.pick(SAINTS),
                             "Liceo de %s" % dname,
                             "Escola Técnica %s" % rng.pick(SURNAMES)))
            amenity = rng.pick(("school", "school", "college"))
            storeys = rng.int(1, 3)
        elif occ == "REL":
            polys = [[rect(f, rng.u(12.0, 16.0), rng.u(26.0, 34.0))]]
            name = rng.pick(("Iglesia de %s" % rng.pick(SAINTS),
                             "Capilla de %s" % rng.pick(SAINTS),
                             "Templo Evangélico %s" % dname))
            amenity = "place_of_worship"
            storeys = 1
        elif occ == "HLT":
            polys = [[rect(f, rng.u(30.0, 45.0), rng.u(18.0, 30.0))]]
            name = rng.pick(("Centro de Salud %s" % dname,
                             "Clínica %s" % rng.pick(SURNAMES),
                             "Hospital %s" % rng.pick(SAINTS)))
            amenity = rng.pick(("clinic", "hospital", "doctors"))
            storeys = rng.int(1, 4)
        else:
            polys = [[rect(f, rng.u(25.0, 40.0), rng.u(20.0, 30.0))]]
            name, amenity = rng.pick((
                ("Casa Consistorial de %s" % TOWN, "townhall"),
                ("Mercado Municipal de %s" % dname, "marketplace"),
                ("Comisaría %s" % dname, "police"),
                ("Biblioteca %s" % rng.pick(SURNAMES), "library"),
                ("Bomberos de %s" % TOWN, "fire_station")))
            storeys = rng.int(1, 3)
        b = Bldg(polys, centre, occ, occ)
        b.storeys = storeys
        b.name = name if rng.chance(0.85) else None
        b.amenity = amenity if rng.chance(0.8) else None
        out.append(b)

    def _informal(self, frame, prof, out):
        rng = self.rng
        cell = 8.2
        for i in range(12):
            for j in range(6):
                if not rng.chance(0.75):
                    continue
                cu = -49.2 + cell * (i + 0.5)
                cv = -24.6 + cell * (j + 0.5)
                loc = [(rng.u(1.6, 3.9), -rng.u(1.6, 3.9)),
                       (rng.u(1.6, 3.9), rng.u(1.6, 3.9)),
                       (-rng.u(1.6, 3.9), rng.u(1.6, 3.9)),
                       (-rng.u(1.6, 3.9), -rng.u(1.6, 3.9))]
                f = frame.child(cu, cv, 0.0)
                ring = closed([f.pt(u, v) for u, v in loc])
                b = Bldg([[ring]], (f.ox, f.oy),
                         "hut" if rng.chance(0.95) else "COM",
                         "RES")
                if b.kind == "COM":
                    b.occ = "COM"
                b.storeys = 1 if rng.chance(0.75) else 2
                out.append(b)


# ---------------------------------------------------------------------------
# Faults: each takes the clean polygons of a building and returns what the
# layer will hold (a Geom) plus, for the 'extra' faults, a second Geom.
# ---------------------------------------------------------------------------
class Geom:
    """What a feature's geometry member will say.
    kind: 'Polygon', 'MultiPolygon', 'Point', 'null', 'empty'."""
    __slots__ = ("kind", "polys", "point", "cw", "swap", "z", "empty_type")

    def __init__(self, kind, polys=None):
        self.kind = kind
        self.polys = polys
        self.point = None
        self.cw = False
        self.swap = False
        self.z = None
        self.empty_type = "Polygon"


def open_ring(ring):
    return ring[:-1]


def shell_geom(b, shell, holes=None):
    polys = [[shell] + (holes if holes is not None else b.polys[0][1:])]
    polys += b.polys[1:]
    return Geom("MultiPolygon" if b.multi else "Polygon", polys)


def clean_geom(b):
    return Geom("MultiPolygon" if b.multi else "Polygon",
                [list(p) for p in b.polys])


def apply_fault(rng, fault, b):
    """(main Geom, extra Geom or None) for building b with 'fault'."""
    shell = b.polys[0][0]
    pts = open_ring(shell)
    n = len(pts)
    if fault is None:
        return clean_geom(b), None
    if fault == "bowtie":
        # swap two neighbouring vertices; for an L-shape not every pair
        # makes edges cross, so take the first pair that does
        for i in range(1, n - 1):
            q = list(pts)
            q[i], q[i + 1] = q[i + 1], q[i]
            if edges_cross(q):
                return shell_geom(b, closed(q)), None
        raise AssertionError("no bowtie for a %d-vertex ring" % n)
    if fault == "self_touch":
        # notch into the interior from the middle of the last edge, back to
        # the same point: the ring touches itself there
        (x0, y0), (x1, y1) = pts[-1], pts[0]
        mx, my = (x0 + x1) / 2.0, (y0 + y1) / 2.0
        cx, cy = ring_centre(shell)
        tx, ty = (x1 - x0) * 0.15, (y1 - y0) * 0.15
        ix, iy = mx + (cx - mx) * 0.5, my + (cy - my) * 0.5
        a = (mx + (cx - mx) * 0.3 + tx, my + (cy - my) * 0.3 + ty)
        c = (mx + (cx - mx) * 0.3 - tx, my + (cy - my) * 0.3 - ty)
        q = list(pts) + [(mx, my), c, (ix, iy), a, (mx, my)]
        return shell_geom(b, closed(q)), None
    if fault == "hole_outside":
        xs = [p[0] for p in pts]
        ys = [p[1] for p in pts]
        s = rng.u(2.0, 4.0)
        hx = max(xs) + rng.u(3.0, 8.0)
        hy = (min(ys) + max(ys)) / 2.0
        hole = closed([(hx, hy), (hx, hy + s), (hx + s, hy + s), (hx + s, hy)])
        return shell_geom(b, shell, b.polys[0][1:] + [hole]), None
    if fault == "unclosed":
        return shell_geom(b, list(pts)), None
    if fault == "too_few_points":
        return shell_geom(b, [pts[0], pts[1], pts[0]], []), None
    if fault == "repeated_vertex":
        q = list(pts)
        for _ in range(rng.int(1, 2)):
            i = rng.int(0, len(q) - 1)
            q.insert(i, q[i])
        return shell_geom(b, closed(q)), None
    if fault == "spike":
        (x0, y0), (x1, y1) = pts[0], pts[1]
        mx, my = (x0 + x1) / 2.0, (y0 + y1) / 2.0
        ln = math.hypot(x1 - x0, y1 - y0)
        out = rng.u(3.0, 6.0)
        # outward normal of a counter-clockwise ring's edge
        tip = (mx + (y1 - y0) / ln * out, my - (x1 - x0) / ln * out)
        q = [pts[0], (mx, my), tip, (mx, my)] + list(pts[1:])
        return shell_geom(b, closed(q)), None
    if fault == "dup_exact":
        return clean_geom(b), clean_geom(b)
    if fault == "dup_rotated":
        k = rng.int(1, n - 1)
        q = pts[k:] + pts[:k]
        return clean_geom(b), shell_geom(b, closed(q))
    if fault == "dup_reversed":
        g = clean_geom(b)
        return g, None   # the caller writes the copy with opposite direction
    if fault == "near_dup":
        ang = rng.u(0.0, 2.0 * math.pi)
        dist = rng.u(0.3, 1.0)
        dx, dy = dist * math.cos(ang), dist * math.sin(ang)
        polys = [[translate(r, dx, dy) for r in p] for p in b.polys]
        return clean_geom(b), Geom(clean_geom(b).kind, polys)
    if fault == "overlap":
        (x0, y0), (x1, y1) = pts[0], pts[1]
        theta = math.atan2(y1 - y0, x1 - x0)
        cx, cy = ring_centre(shell)
        w = math.hypot(x1 - x0, y1 - y0)
        f = Frame(cx, cy, theta).child(w * rng.u(0.3, 0.45), 0.0, 0.0)
        return clean_geom(b), Geom("Polygon", [[rect(f, w * rng.u(0.5, 0.8),
                                                    rng.u(4.0, 7.0))]])
    if fault == "sliver":
        (x0, y0), (x1, y1) = pts[0], pts[1]
        theta = math.atan2(y1 - y0, x1 - x0)
        width = rng.u(0.35, 0.6)
        length = rng.u(20.0, 35.0)
        mx, my = (x0 + x1) / 2.0, (y0 + y1) / 2.0
        ln = math.hypot(x1 - x0, y1 - y0)
        off = 0.05 + width / 2.0
        f = Frame(mx + (y1 - y0) / ln * off, my - (x1 - x0) / ln * off, theta)
        return clean_geom(b), Geom("Polygon", [[rect(f, length, width)]])
    if fault == "fragment":
        f = Frame(pts[0][0] + rng.u(-3.0, -1.5), pts[0][1] + rng.u(-3.0, -1.5),
                  math.radians(rng.u(0.0, 90.0)))
        return clean_geom(b), Geom("Polygon", [[rect(f, rng.u(1.0, 2.2),
                                                    rng.u(1.0, 2.0))]])
    if fault == "oversize":
        cx, cy = ring_centre(shell)
        f = Frame(cx, cy, math.radians(rng.u(-5.0, 5.0)))
        return clean_geom(b), Geom("Polygon", [[rect(f, rng.u(250.0, 380.0),
                                                    rng.u(220.0, 300.0))]])
    if fault == "null_geometry":
        return Geom("null"), None
    if fault == "empty_geometry":
        g = Geom("empty")
        g.empty_type = "MultiPolygon" if rng.chance(0.3) else "Polygon"
        return g, None
    if fault == "point":
        g = Geom("Point")
        g.point = (b.cx, b.cy)
        return g, None
    if fault == "swapped":
        g = clean_geom(b)
        g.swap = True
        return g, None
    if fault == "z":
        g = clean_geom(b)
        g.z = round(rng.u(3.0, 60.0), 1)
        return g, None
    raise ValueError(fault)


def edges_cross(pts):
    """True when two non-adjacent edges of the ring 'pts' (open, without
    the closing position) properly cross."""
    def orient(a, b, c):
        v = (b[0] - a[0]) * (c[1] - a[1]) - (b[1] - a[1]) * (c[0] - a[0])
        return (v > 0) - (v < 0)
    n = len(pts)
    edges = [(pts[i], pts[(i + 1) % n]) for i in range(n)]
    for i in range(n):
        for j in range(i + 2, n):
            if i == 0 and j == n - 1:
                continue            # neighbours through the closing vertex
            (a, b), (c, d) = edges[i], edges[j]
            if orient(a, b, c) * orient(a, b, d) < 0 and \
                    orient(c, d, a) * orient(c, d, b) < 0:
                return True
    return False


def pick_fault(rng, table, allow_extra, omit=()):
    """A fault drawn at the table's rates, or None. An omitted fault (and an
    extra one when not allowed) leaves its building clean; the draw is made
    all the same, so omitting one fault changes nothing else."""
    x = rng.u()
    acc = 0.0
    for name, rate in table:
        acc += rate
        if x < acc:
            if name in omit or (name in EXTRA_FAULTS and not allow_extra):
                return None
            return name
    return None


# ---------------------------------------------------------------------------
# Output: lon/lat text and the two GeoJSON flavours.
# ---------------------------------------------------------------------------
def lonlat(x, y):
    return (CENTRE_LON + (x - ORIGIN[0]) / M_PER_DEG_LON,
            CENTRE_LAT + (y - ORIGIN[1]) / M_PER_DEG_LAT)


ORIGIN = [0.0, 0.0]   # town-metre position of the centre, set by main()


def pos_json(x, y, swap, z):
    lon, lat = lonlat(x, y)
    if swap:
        lon, lat = lat, lon
    if z is None:
        return "[%.7f,%.7f]" % (lon, lat)
    return "[%.7f,%.7f,%.1f]" % (lon, lat, z)


def ring_json(ring, g):
    pts = ring[::-1] if g.cw else ring
    return "[" + ",".join(pos_json(x, y, g.swap, g.z) for x, y in pts) + "]"


def geom_json(g):
    if g.kind == "null":
        return "null"
    if g.kind == "empty":
        return '{"type":"%s","coordinates":[]}' % g.empty_type
    if g.kind == "Point":
        return '{"type":"Point","coordinates":%s}' % pos_json(
            g.point[0], g.point[1], g.swap, g.z)
    polys = ["[" + ",".join(ring_json(r, g) for r in p) + "]"
             for p in g.polys]
    if g.kind == "MultiPolygon":
        return '{"type":"MultiPolygon","coordinates":[%s]}' % ",".join(polys)
    return '{"type":"Polygon","coordinates":%s}' % polys[0]


def props_json(props):
    return json.dumps(props, ensure_ascii=False, separators=(",", ":"))


class LayerWriter:
    """Writes Features one at a time; FeatureCollection or one per line."""

    def __init__(self, path, name, fmt):
        self.f = open(path, "w", encoding="utf-8", newline="\n")
        self.fmt = fmt
        self.count = 0
        if fmt == "geojson":
            self.f.write('{"type":"FeatureCollection","name":"%s",'
                         '"features":[\n' % name)

    def write(self, props, geom, fid=None):
        idpart = "" if fid is None else '"id":%d,' % fid
        text = '{"type":"Feature",%s"properties":%s,"geometry":%s}' % (
            idpart, props_json(props), geom_json(geom))
        if self.fmt == "geojson" and self.count:
            self.f.write(",\n")
        self.f.write(text)
        if self.fmt == "geojsonl":
            self.f.write("\n")
        self.count += 1
        return self.count - 1

    def close(self):
        if self.fmt == "geojson":
            self.f.write("\n]}\n")
        self.f.close()


# ---------------------------------------------------------------------------
# Attributes as each layer writes them.
# ---------------------------------------------------------------------------
class Tally:
    def __init__(self):
        self.c = {}

    def add(self, key, k=1):
        self.c[key] = self.c.get(key, 0) + k


def levels_text(rng, s, tally):
    """building:levels as volunteers write it, for s true storeys."""
    form = rng.weighted(dict(plain=.68, range=.06, word=.05, ground_plus=.05,
                             half=.04, zero=.03, padded=.04, unit=.02,
                             multi=.03))
    if form == "word" and s > 5:
        form = "plain"
    tally.add(form)
    if form == "plain":
        return str(s)
    if form == "range":
        return "%d-%d" % (s, s + 1) if rng.chance(0.5) else \
            "%d-%d" % (max(1, s - 1), s if s > 1 else 2)
    if form == "word":
        return rng.pick(WORDS)[s - 1]
    if form == "ground_plus":
        return "R+%d" % (s - 1)
    if form == "half":
        return "%d.5" % s
    if form == "zero":
        return "0"
    if form == "padded":
        return " %d " % s
    if form == "unit":
        return "%d floors" % s if rng.chance(0.5) else "%d pisos" % s
    return "%d;%d" % (s, s + 1)


def height_text(rng, h, tally):
    form = rng.weighted(dict(metres=.55, metres_unit=.15, metres_nospace=.07,
                             feet=.10, feet_mark=.05, decimal_comma=.08))
    tally.add(form)
    if form == "metres":
        return fmt_num(h)
    if form == "metres_unit":
        return fmt_num(h) + " m"
    if form == "metres_nospace":
        return fmt_num(h) + "m"
    if form == "feet":
        return "%d ft" % int(round(h / 0.3048))
    if form == "feet_mark":
        return "%d'" % int(round(h / 0.3048))
    return fmt_num(h).replace(".", ",")


def date_text(rng, y):
    form = rng.int(0, 9)
    if form <= 4:
        return str(y)
    if form == 5:
        return "%d-%02d" % (y, rng.int(1, 12))
    if form == 6:
        return "~%d" % y
    if form == 7:
        return "%ds" % (y // 10 * 10)
    if form == 8:
        return "before %d" % ((y // 10 + 1) * 10)
    return "C%d" % (y // 100 + 1) if y < 1950 else str(y)


def crowd_props(rng, b, prof, osm_id, tallies):
    p = {"@id": "way/%d" % osm_id}
    if rng.chance(prof["yes"]) and b.occ in ("RES", "COM", "MIX") \
            and b.kind != "outbuilding":
        p["building"] = "yes"
    else:
        fam = b.kind if b.kind in SPELL_BUILDING else b.occ
        p["building"] = rng.pick(SPELL_BUILDING[fam])
    if rng.chance(prof["levels"]):
        p["building:levels"] = levels_text(rng, b.storeys, tallies["levels"])
    if rng.chance(prof["material"]):
        p["building:material"] = rng.pick(SPELL_MATERIAL[b.material])
    if rng.chance(prof["height"]):
        p["height"] = height_text(rng, b.height, tallies["height"])
    if rng.chance(prof["roof"]):
        p["roof:material"] = b.roof
    if b.amenity:
        p["amenity"] = b.amenity
    if b.name:
        p["name"] = b.name
    if rng.chance(prof["date"]):
        p["start_date"] = date_text(rng, b.year)
    return p


def cadastre_props(rng, b, dname, ref):
    p = {"REF_CAT": ref}
    use = CAD_USE.get(b.kind, CAD_USE.get(b.occ, "R1"))
    x = rng.u()
    if x < 0.04:
        use = None
    elif x < 0.12:
        use = use.lower()
    elif x < 0.15:
        use = " " + use
    elif x < 0.20 and use == "R1":
        use = "VIV"
    p["COD_USO"] = use
    x = rng.u()
    if x < 0.08:
        p["N_PLANTAS"] = None
    elif x < 0.14:
        p["N_PLANTAS"] = "PB+%d" % (b.storeys - 1)
    elif x < 0.18:
        p["N_PLANTAS"] = str(b.storeys)
    elif x < 0.20:
        p["N_PLANTAS"] = 0
    else:
        p["N_PLANTAS"] = b.storeys
    x = rng.u()
    short, long_ = CAD_MATERIAL[b.material]
    p["MAT_EST"] = None if x < 0.10 else (long_ if x < 0.25 else short)
    x = rng.u()
    if x < 0.10:
        p["ALT_CUMB"] = None
    elif x < 0.18:
        p["ALT_CUMB"] = 0
    elif x < 0.23:
        p["ALT_CUMB"] = -9999
    else:
        p["ALT_CUMB"] = b.height
    x = rng.u()
    p["ANO_CONST"] = None if x < 0.10 else (0 if x < 0.25 else b.year)
    area = sum(poly_area(poly) for poly in b.polys)
    p["SUP_CONST"] = round(area * b.storeys * rng.u(0.9, 1.05), 1) \
        if rng.chance(0.6) else None
    x = rng.u()
    if x < 0.10:
        p["BARRIO"] = None
    else:
        p["BARRIO"] = dname.upper()
    return p


def hash_jitter(x, y, seed, amp):
    """Offset of at most 'amp' metres that depends only on the point, so a
    wall two buildings share moves the same way in both."""
    h = (int(round(x * 1000)) * 73856093) ^ (int(round(y * 1000)) * 19349663) \
        ^ (seed * 83492791)
    h &= 0xFFFFFFFF
    h = (h * 2654435761) & 0xFFFFFFFF
    a = ((h & 0xFFFF) / 65535.0 - 0.5) * 2 * amp
    b = ((h >> 16) / 65535.0 - 0.5) * 2 * amp
    return a, b


# ---------------------------------------------------------------------------
# The run.
# ---------------------------------------------------------------------------
def make_profiles(rng, k):
    """District profiles: the named ten, or K generated from them."""
    if k == 10:
        profs = [dict(p) for p in DEMO_DISTRICTS]
        rows = list(DEMO_ROWS)
        # DEMO_DISTRICTS lists the north row first; the grid counts rows
        # from the south
        ordered = profs[7:10] + profs[3:7] + profs[0:3]
        for p in ordered:
            p["undermapped"] = p["key"] == "QM08"
        regions = [{"id": r, "name": n} for r, n in REGIONS]
        return ordered, rows, regions
    nrows = max(1, int(round(math.sqrt(k / ASPECT))))
    rows = [k // nrows + (1 if i < k % nrows else 0) for i in range(nrows)]
    nreg = 2 if k < 30 else max(3, int(round(math.sqrt(k) / 10)))
    width = len(str(k))
    profs = []
    under = set()
    nunder = max(1, k // 100)
    while len(under) < nunder:
        under.add(rng.int(0, k - 1))
    i = 0
    for r, c in enumerate(rows):
        reg = min(nreg - 1, r * nreg // nrows)
        for _ in range(c):
            base = rng.pick(DEMO_DISTRICTS)
            p = dict(base)
            p["key"] = "QM%0*d" % (width, i + 1)
            p["name"] = "%s Sector %0*d" % (TOWN, width, i + 1)
            p["region"] = "R%02d" % (reg + 1)
            p["undermapped"] = i in under
            p["cadastre"] = False
            p["mapped"] = UNDERMAPPED_MAPPED if i in under else \
                max(base["mapped"], 0.93)
            profs.append(p)
            i += 1
    regions = [{"id": "R%02d" % (g + 1),
                "name": "%s Region %d" % (TOWN, g + 1)} for g in range(nreg)]
    return profs, rows, regions


def district_yield(p):
    tot = sum(p["styles"].values())
    return sum(w * STYLE_YIELD[s] for s, w in p["styles"].items()) / tot


def largest_remainder(weights, total):
    s = sum(weights)
    if s <= 0:
        return [0] * len(weights)
    raw = [w * total / s for w in weights]
    base = [int(math.floor(x)) for x in raw]
    rest = total - sum(base)
    order = sorted(range(len(raw)), key=lambda i: (-(raw[i] - base[i]), i))
    for i in order[:rest]:
        base[i] += 1
    return base


class Town:
    def __init__(self, args):
        self.args = args
        self.rng = Rng(args.seed)
        rng = self.rng
        self.profs, rows, self.regions = make_profiles(rng, args.districts)
        k = len(self.profs)
        # size: enough blocks that FILL of their capacity makes N features
        per_block = sum(district_yield(p) * p["mapped"] for p in self.profs) / k
        blocks = args.n / (per_block * 1.05 * FILL)
        area = blocks * PITCH_X * PITCH_Y
        self.nx = max(1, int(math.ceil(math.sqrt(area * ASPECT) / PITCH_X)))
        self.ny = max(1, int(math.ceil(area / (self.nx * PITCH_X) / PITCH_Y)))
        self.width, self.height = self.nx * PITCH_X, self.ny * PITCH_Y
        ORIGIN[0], ORIGIN[1] = self.width / 2.0, self.height / 2.0
        self.grid = DistrictGrid(rng, self.width, self.height, rows)
        self.cell_index = {}
        i = 0
        for r, c in enumerate(rows):
            for j in range(c):
                self.cell_index[(r, j)] = i
                i += 1
        # blocks by the district holding their centre
        self.blocks = [[] for _ in range(k)]
        for by in range(self.ny):
            for bx in range(self.nx):
                cx = (bx + 0.5) * PITCH_X
                cy = (by + 0.5) * PITCH_Y
                d = self.district_at(cx, cy)
                self.blocks[d].append((bx, by))
        weights = [len(self.blocks[d]) * district_yield(self.profs[d])
                   * self.profs[d]["mapped"] for d in range(k)]
        self.quota = largest_remainder(weights, args.n)

    def district_at(self, x, y):
        cell = self.grid.locate(x, y)
        if cell is None:
            cell = self.grid.locate(min(max(x, 0.0), self.width),
                                    min(max(y, 0.0), self.height))
        return self.cell_index[cell]


def generate(args):
    town = Town(args)
    rng = town.rng
    out = args.out
    os.makedirs(out, exist_ok=True)
    ext = args.format
    k = len(town.profs)
    maker = BlockMaker(rng)

    crowd = LayerWriter(os.path.join(out, "buildings_osm." + ext),
                        "buildings_osm", ext)
    cad = None
    if not args.no_cadastre:
        cad = LayerWriter(os.path.join(out, "buildings_cadastre." + ext),
                          "buildings_cadastre", ext)
    faults_f = open(os.path.join(out, "faults.csv"), "w", encoding="utf-8",
                    newline="\n")
    faults_f.write("layer,index,source_id,fault,of_index\n")
    truth_f = None
    if not args.no_truth:
        truth_f = open(os.path.join(out, "buildings_truth.csv"), "w",
                       encoding="utf-8", newline="\n")
        truth_f.write("bid,district_id,kind,occupancy,storeys,material,"
                      "year,height_m,terrace_row,osm_index,cadastre_index\n")

    counts = {"osm": Tally(), "cadastre": Tally()}
    tallies = {"levels": Tally(), "height": Tally()}
    cross = Tally()
    geomstats = Tally()
    true_by_d = [0] * k
    crowd_by_d = [0] * k
    levels_by_d = [0] * k
    state = dict(osm_id=1000000, bid=0, cad_id=0, remaining=args.n)

    def emit_crowd(b, prof, d):
        """Write building b to the crowd layer; returns its feature index."""
        remaining = state["remaining"]
        fault = pick_fault(rng, CROWD_FAULTS, remaining >= 2, args.omit)
        main, extra = apply_fault(rng, fault, b)
        cw = rng.chance(0.35)
        main.cw = cw
        if main.kind == "Polygon" and not b.multi and rng.chance(0.02):
            main.kind = "MultiPolygon"
            geomstats.add("single_part_multipolygon")
        state["osm_id"] += rng.int(1, 4000)
        props = crowd_props(rng, b, prof, state["osm_id"], tallies)
        idx = crowd.write(props, main)
        if main.kind == "MultiPolygon":
            geomstats.add("multipolygon")
        if cw and main.kind in ("Polygon", "MultiPolygon"):
            geomstats.add("clockwise_shell")
        if "building:levels" in props:
            levels_by_d[d] += 1
        if fault:
            counts["osm"].add(fault)
            if fault not in EXTRA_FAULTS:
                faults_f.write("osm,%d,%s,%s,\n" % (idx, props["@id"], fault))
        used = 1
        if fault == "dup_reversed":
            extra = clean_geom(b)
            extra.cw = not cw
        if extra is not None:
            state["osm_id"] += rng.int(1, 4000)
            if fault in ("dup_exact", "dup_rotated"):
                eprops = dict(props)
                eprops["@id"] = "way/%d" % state["osm_id"]
                extra.cw = cw
            else:
                eprops = {"@id": "way/%d" % state["osm_id"],
                          "building": rng.pick(("yes", "yes", "roof",
                                                "shed"))}
                if fault == "near_dup" and "building:levels" in props:
                    eprops["building:levels"] = props["building:levels"]
                if fault == "oversize" and rng.chance(0.5):
                    eprops["name"] = "Parque %s" % rng.pick(SURNAMES)
                extra.cw = rng.chance(0.35) if fault != "dup_reversed" \
                    else extra.cw
            eidx = crowd.write(eprops, extra)
            faults_f.write("osm,%d,%s,%s,%d\n" % (eidx, eprops["@id"], fault,
                                                   idx))
            used += 1
        state["remaining"] -= used
        return idx, used

    def cadastre_drawing(b, how, shift):
        """The cadastre's drawing of b: the same coordinates, redrawn (each
        vertex moved up to 0.15 m, the same way wherever it is shared), or
        the whole block shifted (a map sheet placed 0.4-1.5 m off)."""
        if how == "identical":
            return b
        if how == "shifted":
            move = lambda x, y: (x + shift[0], y + shift[1])
        else:
            def move(x, y):
                jx, jy = hash_jitter(x, y, args.seed, 0.15)
                return x + jx, y + jy
        src = Bldg([[[move(x, y) for x, y in r] for r in p] for p in b.polys],
                   (b.cx, b.cy), b.kind, b.occ)
        src.multi = b.multi
        return src

    def emit_cadastre(b, prof, how, shift):
        fault = pick_fault(rng, CADASTRE_FAULTS, True, args.omit)
        src = cadastre_drawing(b, how, shift)
        cross.add("cadastre_drawn_" + how)
        main, extra = apply_fault(rng, fault, src)
        main.cw = True    # exported from a shapefile: shells clockwise
        state["cad_id"] += 1
        dname = town.profs[b.district]["name"]
        ref = "%s-%04d-%s" % (town.profs[b.district]["key"], b.block % 10000,
                              "ABCDEFGH"[state["cad_id"] % 8])
        props = cadastre_props(rng, b, dname, ref)
        idx = cad.write(props, main, state["cad_id"])
        if fault:
            counts["cadastre"].add(fault)
            if fault not in EXTRA_FAULTS:
                faults_f.write("cadastre,%d,%s,%s,\n" % (idx, ref, fault))
        if extra is not None:
            extra.cw = True
            state["cad_id"] += 1
            eprops = dict(props) if fault == "dup_exact" else \
                {key: None for key in props}
            eidx = cad.write(eprops, extra, state["cad_id"])
            faults_f.write("cadastre,%d,%s,%s,%d\n" % (
                eidx, eprops["REF_CAT"] or "", fault, idx))
        return idx

    def process_block(d, blk):
        """Make and write one block of district d; returns crowd features.
        Stops early only when the layer has its N features."""
        prof = town.profs[d]
        bx, by = blk
        style = rng.weighted(prof["styles"])
        frame = Frame((bx + 0.5) * PITCH_X, (by + 0.5) * PITCH_Y,
                      math.radians(rng.u(-2.5, 2.5)))
        blds = maker.make(style, frame, prof, prof["name"])
        # one survey per block in the cadastre: drawn the same way
        shift = None
        how = rng.weighted(dict(identical=.25, redrawn=.55, shifted=.20))
        if how == "shifted":
            ang = rng.u(0.0, 2.0 * math.pi)
            dist = rng.u(0.4, 1.5)
            shift = (dist * math.cos(ang), dist * math.sin(ang))
        block_id = by * town.nx + bx
        made = 0
        for b in blds:
            if state["remaining"] <= 0:
                break
            b.block = block_id
            bd = town.district_at(b.cx, b.cy)
            b.district = bd
            bprof = town.profs[bd]
            b.bid = state["bid"]
            state["bid"] += 1
            true_by_d[bd] += 1
            oidx = cidx = ""
            if rng.chance(bprof["mapped"]):
                oidx, used = emit_crowd(b, bprof, bd)
                crowd_by_d[bd] += used
                made += used
            if cad is not None and bprof["cadastre"]:
                if rng.chance(0.9):
                    cidx = emit_cadastre(b, bprof, how, shift)
                cross.add(("both_layers" if oidx != "" else "cadastre_only")
                          if cidx != "" else
                          ("osm_only" if oidx != "" else "neither_layer"))
            if truth_f is not None:
                truth_f.write("%d,%s,%s,%s,%d,%s,%d,%s,%s,%s,%s\n" % (
                    b.bid, bprof["key"], b.kind, b.occ, b.storeys,
                    b.material, b.year, fmt_num(b.height),
                    "" if b.terrace_row is None else b.terrace_row,
                    oidx, cidx))
        return made

    # A district takes whole blocks until its quota is met; what it takes
    # beyond the quota (or falls short) carries to the next district, so
    # no block is cut short except the very last one of the layer.
    leftovers = []
    carry = 0
    for d in range(k):
        blocks = town.blocks[d]
        rng.shuffle(blocks)
        target = town.quota[d] + carry
        done = 0
        i = 0
        while i < len(blocks) and done < target and state["remaining"] > 0:
            done += process_block(d, blocks[i])
            i += 1
        leftovers.append(blocks[i:])
        carry = target - done
    # second pass only if some district ran out of room
    for d in range(k):
        for blk in leftovers[d]:
            if state["remaining"] <= 0:
                break
            process_block(d, blk)

    crowd.close()
    if cad is not None:
        cad.close()
    faults_f.close()
    if truth_f is not None:
        truth_f.close()

    write_districts(town, os.path.join(out, "districts.geojson"))
    refs = write_reference(town, rng, true_by_d,
                           os.path.join(out, "reference_counts.csv"))
    manifest = {
        "generator": "bench/gen_town.py",
        "version": VERSION,
        "seed": args.seed,
        "n": args.n,
        "districts": k,
        "format": ext,
        "omitted_faults": sorted(args.omit),
        "town": {"name": TOWN, "island": ISLAND, "invented": True,
                 "centre_lon": CENTRE_LON, "centre_lat": CENTRE_LAT,
                 "width_m": round(town.width, 1),
                 "height_m": round(town.height, 1),
                 "blocks": town.nx * town.ny},
        "true_buildings": state["bid"],
        "layers": {
            "buildings_osm": {"features": crowd.count,
                              "faults": sorted_counts(counts["osm"].c,
                                                      CROWD_FAULTS),
                              "geometry": dict(sorted(geomstats.c.items())),
                              "levels_forms": dict(sorted(
                                  tallies["levels"].c.items())),
                              "height_forms": dict(sorted(
                                  tallies["height"].c.items()))},
        },
        "terraces": {"rows": maker.terrace_rows,
                     "houses": maker.terrace_houses,
                     "shared_walls": maker.shared_walls},
    }
    if cad is not None:
        manifest["layers"]["buildings_cadastre"] = {
            "features": cad.count,
            "faults": sorted_counts(counts["cadastre"].c, CADASTRE_FAULTS),
            "districts": sorted(p["key"] for p in town.profs
                               if p["cadastre"])}
        manifest["cross_layer"] = dict(sorted(cross.c.items()))
    if k <= 50:
        manifest["district_table"] = [
            {"district_id": p["key"], "name": p["name"],
             "region_id": p["region"], "true_buildings": true_by_d[d],
             "osm_features": crowd_by_d[d], "reference": refs[d],
             "osm_levels_tagged": levels_by_d[d],
             "undermapped": p["undermapped"], "cadastre": p["cadastre"]}
            for d, p in sorted(enumerate(town.profs),
                               key=lambda t: t[1]["key"])]
    else:
        manifest["undermapped_districts"] = [
            p["key"] for p in town.profs if p["undermapped"]]
    with open(os.path.join(out, "manifest.json"), "w", encoding="utf-8",
              newline="\n") as f:
        f.write(json.dumps(manifest, indent=1, ensure_ascii=False) + "\n")
    if crowd.count != args.n:
        print("gen_town: made %d crowd features, fewer than --n %d (the town "
              "ran out of room)" % (crowd.count, args.n), file=sys.stderr)
    return manifest


def sorted_counts(c, table):
    return {name: c.get(name, 0) for name, _ in table}


def write_districts(town, path):
    with open(path, "w", encoding="utf-8", newline="\n") as f:
        f.write('{"type":"FeatureCollection","name":"districts","features":[\n')
        regname = {r["id"]: r["name"] for r in town.regions}
        first = True
        cells = sorted(town.cell_index.items(),
                       key=lambda t: town.profs[t[1]]["key"])
        for (r, j), i in cells:
            p = town.profs[i]
            props = {"district_id": p["key"], "name": p["name"],
                     "region_id": p["region"],
                     "region_name": regname[p["region"]]}
            g = Geom("Polygon", [[town.grid.cell_ring(r, j)]])
            if not first:
                f.write(",\n")
            first = False
            f.write('{"type":"Feature","properties":%s,"geometry":%s}' % (
                props_json(props), geom_json(g)))
        f.write("\n]}\n")


def write_reference(town, rng, true_by_d, path):
    """Reference counts: the truth, moved a little as a census would be
    (buildings demolished or built since, counting differences)."""
    refs = []
    with open(path, "w", encoding="utf-8", newline="\n") as f:
        f.write("district_id,buildings,census_year,method\n")
        for d, p in enumerate(town.profs):
            refs.append(int(round(true_by_d[d] * rng.u(0.97, 1.03))))
        for d in sorted(range(len(town.profs)),
                        key=lambda i: town.profs[i]["key"]):
            year, method = town.profs[d]["census"]
            f.write("%s,%d,%d,%s\n" % (town.profs[d]["key"], refs[d], year,
                                        method))
    return refs


def table_faults(m):
    osm = m["layers"]["buildings_osm"]
    cad = m["layers"].get("buildings_cadastre")
    crates = dict(CADASTRE_FAULTS)
    out = ["| fault | rate (osm) | buildings_osm | rate (cadastre) | "
           "buildings_cadastre |", "|---|---:|---:|---:|---:|"]
    for name, rate in CROWD_FAULTS:
        cr = "%.1f %%" % (crates[name] * 100) if name in crates else "-"
        cc = str(cad["faults"][name]) if cad and name in crates else "-"
        out.append("| `%s` %s | %.2f %% | %d | %s | %s |" % (
            name, FAULT_TEXT[name], rate * 100, osm["faults"][name], cr, cc))
    out.append("| **features in the layer** | | **%d** | | **%s** |" % (
        osm["features"], cad["features"] if cad else "-"))
    return out


def table_districts(m):
    out = ["| district_id | name | region_id | true buildings | "
           "buildings_osm features | reference count | osm with "
           "building:levels | notes |",
           "|---|---|---|---:|---:|---:|---:|---|"]
    for r in m["district_table"]:
        notes = []
        if r["undermapped"]:
            notes.append("under-mapped")
        if r["cadastre"]:
            notes.append("in the cadastre")
        share = 100.0 * r["osm_levels_tagged"] / max(1, r["osm_features"])
        out.append("| %s | %s | %s | %d | %d | %d | %d (%.0f %%) | %s |" % (
            r["district_id"], r["name"], r["region_id"], r["true_buildings"],
            r["osm_features"], r["reference"], r["osm_levels_tagged"], share,
            ", ".join(notes)))
    return out


def table_facts(m):
    osm = m["layers"]["buildings_osm"]
    g, t = osm["geometry"], m["terraces"]
    rows = [
        ("true buildings in the town", m["true_buildings"]),
        ("terraced rows (houses sharing walls; not overlaps)", t["rows"]),
        ("houses in terraced rows", t["houses"]),
        ("shared walls", t["shared_walls"]),
        ("buildings_osm: clockwise exterior rings (allowed; RFC 7946 "
         "prefers counter-clockwise)", g.get("clockwise_shell", 0)),
        ("buildings_osm: MultiPolygon features", g.get("multipolygon", 0)),
        ("... of which single-part", g.get("single_part_multipolygon", 0)),
    ]
    for k, v in osm["levels_forms"].items():
        rows.append(("buildings_osm: building:levels written as `%s`" % k, v))
    for k, v in osm["height_forms"].items():
        rows.append(("buildings_osm: height written as `%s`" % k, v))
    for k, v in m.get("cross_layer", {}).items():
        rows.append(("cadastre districts: %s" % k.replace("_", " "), v))
    return ["| fact | count |", "|---|---:|"] + \
        ["| %s | %d |" % (k, v) for k, v in rows]


def print_table(manifest_path, kind):
    """One of the README's tables, from a manifest."""
    with open(manifest_path, encoding="utf-8") as f:
        m = json.load(f)
    lines = {"faults": table_faults, "districts": table_districts,
             "facts": table_facts}[kind](m)
    print("\n".join(lines))


def parse_args(argv):
    ap = argparse.ArgumentParser(
        description="Generate the invented town of %s (demo and benchmark "
                    "data for stocktake)." % TOWN)
    ap.add_argument("--seed", type=int, default=73)
    ap.add_argument("--n", type=int, default=3000,
                    help="features in the crowd-mapped layer (exact)")
    ap.add_argument("--districts", type=int, default=10,
                    help="number of districts (10: the named demo districts)")
    ap.add_argument("--out", help="output folder (created)")
    ap.add_argument("--format", choices=("geojson", "geojsonl"),
                    default="geojson")
    ap.add_argument("--no-cadastre", action="store_true",
                    help="skip the cadastre layer (benchmarks)")
    ap.add_argument("--no-truth", action="store_true",
                    help="skip buildings_truth.csv (benchmarks)")
    ap.add_argument("--omit", metavar="FAULT,...", default="",
                    help="faults never to inject (names as in faults.csv)")
    ap.add_argument("--table", metavar="MANIFEST",
                    help="print a README table made from MANIFEST and exit")
    ap.add_argument("--table-kind", choices=("faults", "districts", "facts"),
                    default="faults")
    args = ap.parse_args(argv)
    if args.table:
        return args
    if not args.out:
        ap.error("--out is required")
    if not 1 <= args.n <= 50_000_000:
        ap.error("--n must be between 1 and 50,000,000")
    if not 2 <= args.districts <= 100_000:
        ap.error("--districts must be between 2 and 100,000")
    if args.seed < 0:
        ap.error("--seed must be 0 or more")
    known = {name for name, _ in CROWD_FAULTS}
    args.omit = tuple(sorted({f for f in args.omit.split(",") if f}))
    for f in args.omit:
        if f not in known:
            ap.error("--omit: unknown fault '%s'" % f)
    return args


def main(argv):
    args = parse_args(argv)
    if args.table:
        print_table(args.table, args.table_kind)
        return 0
    try:
        m = generate(args)
    except OSError as e:
        print("gen_town: %s" % e, file=sys.stderr)
        return 1
    osm = m["layers"]["buildings_osm"]
    print("gen_town: %s: %d crowd features, %s cadastre features, %d "
          "districts, %d true buildings" % (
              args.out, osm["features"],
              m["layers"].get("buildings_cadastre", {}).get("features", 0),
              m["districts"], m["true_buildings"]), file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
