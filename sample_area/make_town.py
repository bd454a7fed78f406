#!/usr/bin/env python3
"""Generate the invented sample town Corvane as OpenStreetMap XML.

Corvane does not exist. It is drawn here in local metres (x east, y north, origin at
the south-west corner of the street grid) and placed in open ocean at about 38.50 N,
38.00 W so that it overlaps no real place. Every name in it is invented.

Running ``python sample_area/make_town.py`` (standard library only, no randomness)
writes, next to this script and byte-identical on every run:

``corvane.osm``
    OSM XML 0.6: streets, footways, land use and the pedestrian exposure sources.
``routes.geojson``
    Four planned test routes (LineString waypoints with ``name`` and ``depart``).
``area.geojson``
    Two proposed test-area polygons (``name``).
``README.md``
    What the town holds, with the counts taken from the generated data.

``--out DIR`` writes the same files into another folder (the tests use it). Before
writing, the script checks its own work: every crossing of two highway ways shares a
node, the drivable network is strongly connected, and every route waypoint lies on a
drivable street. A failed check stops it with a message and writes nothing.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import sys
import tempfile
from collections.abc import Iterable, Sequence
from pathlib import Path

Point = tuple[float, float]
Tags = dict[str, str]

# --------------------------------------------------------------------------------------
# Placement: local metres -> WGS84 (equirectangular about the town centre; over 3 km the
# error against a proper projection is a few centimetres).
# --------------------------------------------------------------------------------------
CENTRE_LAT = 38.50
CENTRE_LON = -38.00
CENTRE_X = 1500.0
CENTRE_Y = 1250.0
_PHI = math.radians(CENTRE_LAT)
# Metres per degree on the WGS84 ellipsoid (series expansion, common practice).
M_PER_DEG_LAT = 111132.954 - 559.822 * math.cos(2 * _PHI) + 1.175 * math.cos(4 * _PHI)
M_PER_DEG_LON = 111412.84 * math.cos(_PHI) - 93.5 * math.cos(3 * _PHI) + 0.118 * math.cos(5 * _PHI)
SCALE = 10_000_000  # 7 decimals

# Extent written to <bounds>, in local metres (the street grid spans 0..3000 x 0..2500).
BOUNDS = (-60.0, -60.0, 3060.0, 2560.0)

DRIVE_CLASSES = frozenset(
    {"primary", "secondary", "tertiary", "unclassified", "residential", "living_street"}
)
FOOT_CLASSES = frozenset({"footway", "path", "cycleway", "steps", "pedestrian"})

SCHOOL_ZONE_CONDITIONAL = "20 mph @ (Mo-Fr 07:30-08:30,14:30-15:30)"


def fixed(value: float) -> int:
    """Return a coordinate in degrees as an integer count of 1e-7 degrees."""
    return int(round(value * SCALE))


def lonlat_fixed(pt: Point) -> tuple[int, int]:
    """Return the (lon, lat) of a local point in integer 1e-7 degrees."""
    x, y = pt
    lon = CENTRE_LON + (x - CENTRE_X) / M_PER_DEG_LON
    lat = CENTRE_LAT + (y - CENTRE_Y) / M_PER_DEG_LAT
    return fixed(lon), fixed(lat)


def fmt7(value: int) -> str:
    """Format integer 1e-7 degrees as a decimal string with exactly 7 decimals."""
    sign = "-" if value < 0 else ""
    whole, frac = divmod(abs(value), SCALE)
    return f"{sign}{whole}.{frac:07d}"


def json_coord(pt: Point) -> list[float]:
    """Return [lon, lat] floats rounded to 7 decimals, equal to the OSM node values."""
    lon, lat = lonlat_fixed(pt)
    return [float(fmt7(lon)), float(fmt7(lat))]


# --------------------------------------------------------------------------------------
# Small geometry helpers
# --------------------------------------------------------------------------------------
def h(y: float, x0: float, x1: float) -> list[Point]:
    """Return a straight east-west polyline (node order follows x0 -> x1)."""
    return [(x0, y), (x1, y)]


def v(x: float, y0: float, y1: float) -> list[Point]:
    """Return a straight north-south polyline (node order follows y0 -> y1)."""
    return [(x, y0), (x, y1)]


def wavy_h(y: float, stops: Sequence[float], amp: float, n: int = 3) -> list[Point]:
    """Return an east-west street that bows by ``amp`` metres between each pair of stops.

    The offset is zero at every stop (where cross streets meet it) and follows half a
    sine wave in between, so the street curves gently without moving its junctions.
    """
    pts: list[Point] = [(stops[0], y)]
    for a, b in zip(stops, stops[1:], strict=False):
        for i in range(1, n + 1):
            s = i / (n + 1)
            pts.append((a + (b - a) * s, y + amp * math.sin(math.pi * s)))
        pts.append((b, y))
    return pts


def wavy_v(x: float, stops: Sequence[float], amp: float, n: int = 3) -> list[Point]:
    """Return a north-south street that bows by ``amp`` metres between each pair of stops."""
    # wavy_h(x, ...) yields (distance along, x + offset); swap the axes
    return [(across, along) for along, across in wavy_h(x, stops, amp, n)]


def rect(x0: float, y0: float, x1: float, y1: float) -> list[Point]:
    """Return a counter-clockwise rectangle ring (not closed)."""
    return [(x0, y0), (x1, y0), (x1, y1), (x0, y1)]


def _cross(ax: float, ay: float, bx: float, by: float) -> float:
    return ax * by - ay * bx


def point_segment_distance(p: Point, a: Point, b: Point) -> float:
    """Return the distance in metres from ``p`` to the segment ``a``-``b``."""
    ax, ay = a
    bx, by = b
    dx, dy = bx - ax, by - ay
    length2 = dx * dx + dy * dy
    if length2 == 0.0:
        return math.hypot(p[0] - ax, p[1] - ay)
    t = max(0.0, min(1.0, ((p[0] - ax) * dx + (p[1] - ay) * dy) / length2))
    return math.hypot(p[0] - (ax + t * dx), p[1] - (ay + t * dy))


# --------------------------------------------------------------------------------------
# The town model
# --------------------------------------------------------------------------------------
class Town:
    """Collect lines, areas, relations and point features in local metres."""

    def __init__(self) -> None:
        self.lines: list[tuple[list[Point], Tags]] = []  # highway ways (noded)
        self.areas: list[tuple[list[Point], Tags]] = []  # closed ways (not noded)
        self.relations: list[tuple[list[tuple[int, str]], Tags]] = []  # (area idx, role)
        self.pois: list[tuple[Point, Tags]] = []
        self.marks: list[tuple[Point, Tags]] = []  # tags for nodes on highway ways

    def line(self, pts: Sequence[Point], tags: Tags) -> None:
        """Add a highway way."""
        self.lines.append((list(pts), dict(tags)))

    def street(self, name: str, base: Tags, pieces: Iterable[tuple[list[Point], Tags]]) -> None:
        """Add one named street made of several ways (one per piece)."""
        for pts, extra in pieces:
            self.line(pts, {**base, **extra, "name": name})

    def area(self, ring: Sequence[Point], tags: Tags) -> int:
        """Add a closed way; return its index among the areas."""
        self.areas.append((list(ring), dict(tags)))
        return len(self.areas) - 1

    def multipolygon(
        self,
        outers: Sequence[Sequence[Point]],
        inners: Sequence[Sequence[Point]],
        tags: Tags,
        *,
        inner_tags: Tags | None = None,
    ) -> None:
        """Add a type=multipolygon relation (untagged outers; inners get ``inner_tags``)."""
        members = [(self.area(r, {}), "outer") for r in outers]
        members += [(self.area(r, dict(inner_tags or {})), "inner") for r in inners]
        self.relations.append((members, {"type": "multipolygon", **tags}))

    def poi(self, pt: Point, tags: Tags) -> None:
        """Add a stand-alone tagged node."""
        self.pois.append((pt, dict(tags)))

    def mark(self, pt: Point, tags: Tags) -> None:
        """Tag the node at ``pt`` on a highway way (inserted into the way if needed)."""
        self.marks.append((pt, dict(tags)))


def is_drivable(tags: Tags) -> bool:
    """Return True for ways a car may use (public drivable classes, not private)."""
    return tags.get("highway") in DRIVE_CLASSES and tags.get("access") not in {"private", "no"}


def _cells(a: Point, b: Point, size: float, pad: float) -> list[tuple[int, int]]:
    """Return the square grid cells that the padded bounding box of a segment touches."""
    xs = range(int((min(a[0], b[0]) - pad) // size), int((max(a[0], b[0]) + pad) // size) + 1)
    ys = range(int((min(a[1], b[1]) - pad) // size), int((max(a[1], b[1]) + pad) // size) + 1)
    return [(cx, cy) for cx in xs for cy in ys]


# --------------------------------------------------------------------------------------
# Noding: every place where two highway ways cross or touch becomes a shared node
# --------------------------------------------------------------------------------------
EPS = 1e-9


def _segment_hits(p: Point, q: Point, a: Point, b: Point) -> list[tuple[float, float, Point]]:
    """Return (t on p-q, u on a-b, point) where the two segments meet (none if apart)."""
    rx, ry = q[0] - p[0], q[1] - p[1]
    sx, sy = b[0] - a[0], b[1] - a[1]
    denom = _cross(rx, ry, sx, sy)
    apx, apy = a[0] - p[0], a[1] - p[1]
    if abs(denom) < 1e-12 * max(1.0, math.hypot(rx, ry) * math.hypot(sx, sy)):
        if abs(_cross(apx, apy, rx, ry)) > 1e-6 * max(1.0, math.hypot(rx, ry)):
            return []  # parallel, apart
        # collinear: allowed only when they merely share an endpoint
        rr = rx * rx + ry * ry
        ta = (apx * rx + apy * ry) / rr
        tb = ((b[0] - p[0]) * rx + (b[1] - p[1]) * ry) / rr
        lo, hi = min(ta, tb), max(ta, tb)
        if hi < EPS or lo > 1 - EPS or abs(hi - lo) < EPS:
            return []
        if min(hi, 1.0) - max(lo, 0.0) > 1e-6:
            msg = f"collinear overlapping highway segments near {p} - {q}"
            raise ValueError(msg)
        return []
    t = _cross(apx, apy, sx, sy) / denom
    u = _cross(apx, apy, rx, ry) / denom
    if t < -EPS or t > 1 + EPS or u < -EPS or u > 1 + EPS:
        return []
    # snap to endpoints so a touching endpoint keeps its exact coordinates
    if abs(u) <= EPS:
        pt = a
    elif abs(u - 1) <= EPS:
        pt = b
    elif abs(t) <= EPS:
        pt = p
    elif abs(t - 1) <= EPS:
        pt = q
    else:
        pt = (p[0] + t * rx, p[1] + t * ry)
    return [(min(max(t, 0.0), 1.0), min(max(u, 0.0), 1.0), pt)]


Segment = tuple[int, int, Point, Point]  # (way index, segment index, start, end)
Inserts = dict[tuple[int, int], list[tuple[float, Point]]]  # (way, segment) -> (t, point)


def _crossing_inserts(segs: list[Segment], inserts: Inserts) -> None:
    """Record the points where two highway segments meet (crossings and T-junctions)."""
    grid: dict[tuple[int, int], list[int]] = {}
    for si, (_wi, _k, p, q) in enumerate(segs):
        for c in _cells(p, q, 150.0, 0.0):
            grid.setdefault(c, []).append(si)
    pairs = {
        (min(i, j), max(i, j))
        for members in grid.values()
        for n, i in enumerate(members)
        for j in members[n + 1 :]
    }
    for i, j in sorted(pairs):
        wi, ki, p, q = segs[i]
        wj, kj, a, b = segs[j]
        if wi == wj and abs(ki - kj) == 1:
            continue  # consecutive segments of one way share their vertex
        for t, u, pt in _segment_hits(p, q, a, b):
            inserts.setdefault((wi, ki), []).append((t, pt))
            inserts.setdefault((wj, kj), []).append((u, pt))


def _mark_inserts(segs: list[Segment], marks: list[tuple[Point, Tags]], inserts: Inserts) -> None:
    """Record the marked points on the segments they lie on; fail for a mark off the roads."""
    for pt, tags in marks:
        hits = [(wi, k, a, b) for wi, k, a, b in segs if point_segment_distance(pt, a, b) < 1e-6]
        if not hits:
            msg = f"mark at {pt} ({tags}) lies on no highway way"
            raise ValueError(msg)
        for wi, k, a, b in hits:
            dx, dy = b[0] - a[0], b[1] - a[1]
            t = ((pt[0] - a[0]) * dx + (pt[1] - a[1]) * dy) / (dx * dx + dy * dy)
            inserts.setdefault((wi, k), []).append((t, pt))


def node_lines(town: Town) -> None:
    """Insert shared nodes at every crossing, T-junction and mark of the highway ways."""
    segs: list[Segment] = [
        (wi, k, pts[k], pts[k + 1])
        for wi, (pts, _t) in enumerate(town.lines)
        for k in range(len(pts) - 1)
    ]
    inserts: Inserts = {}
    _crossing_inserts(segs, inserts)
    _mark_inserts(segs, town.marks, inserts)
    new_lines: list[tuple[list[Point], Tags]] = []
    for wi, (pts, tags) in enumerate(town.lines):
        out: list[Point] = [pts[0]]
        for k in range(len(pts) - 1):
            extra = sorted(inserts.get((wi, k), []), key=lambda e: e[0])
            for _t, pt in [*extra, (1.0, pts[k + 1])]:
                if lonlat_fixed(pt) != lonlat_fixed(out[-1]):
                    out.append(pt)
        new_lines.append((out, tags))
    town.lines = new_lines


# --------------------------------------------------------------------------------------
# Corvane itself
# --------------------------------------------------------------------------------------
PRIMARY: Tags = {"highway": "primary", "lanes": "4", "maxspeed": "45 mph"}
SECONDARY: Tags = {"highway": "secondary", "lanes": "2", "maxspeed": "40 mph"}
TERT35: Tags = {"highway": "tertiary", "lanes": "2", "maxspeed": "35 mph"}
TERT30: Tags = {"highway": "tertiary", "lanes": "2", "maxspeed": "30 mph"}
RES25: Tags = {"highway": "residential", "maxspeed": "25 mph"}
RES: Tags = {"highway": "residential"}  # no maxspeed: the speed is imputed
UNCL: Tags = {"highway": "unclassified"}

X = [0, 250, 500, 700, 900, 1100, 1300, 1500, 1700, 1900, 2100, 2300, 2500, 2750, 3000]
Y = [0, 200, 400, 600, 800, 1000, 1200, 1400, 1600, 1800, 2000, 2250, 2500]


def sw(value: str) -> Tags:
    """Return a sidewalk tag."""
    return {"sidewalk": value}


def build_streets(t: Town) -> None:
    """Add the drivable street network."""
    # ---- arterials ------------------------------------------------------------------
    t.street(
        "Tillerman Avenue",
        PRIMARY,
        [
            (h(1200, 0, 900), sw("both")),
            (h(1200, 900, 1500), sw("both")),
            (h(1200, 1500, 2100), {"maxspeed": "40 mph", "sidewalk": "separate"}),
            (h(1200, 2100, 2750), sw("both")),
            (h(1200, 2750, 3000), sw("right")),
        ],
    )
    t.street(
        "Osprell Road",
        SECONDARY,
        [
            (v(1500, 0, 600), sw("right")),
            (v(1500, 600, 1200), sw("both")),
            (v(1500, 1200, 2000), sw("both")),
            (v(1500, 2000, 2500), sw("both")),
        ],
    )
    one = {**SECONDARY, "oneway": "yes"}
    t.street(
        "Brindlecot Street",
        one,
        [  # eastbound half of the one-way pair
            (h(600, 0, 900), sw("both")),
            (h(600, 900, 2100), sw("both")),
            (h(600, 2100, 3000), sw("right")),
        ],
    )
    t.street(
        "Vellamy Street",
        one,
        [  # westbound half (node order runs west)
            (h(800, 3000, 2100), sw("both")),
            (h(800, 2100, 900), sw("both")),
            (h(800, 900, 0), sw("left")),
        ],
    )
    # ---- collectors -----------------------------------------------------------------
    t.street(
        "Hobbin Street",
        TERT30,
        [
            (h(2000, 0, 250), sw("both")),
            (
                h(2000, 250, 900),
                {
                    "maxspeed": "30 mph",
                    "hazard": "school_zone",
                    "sidewalk": "both",
                    "maxspeed:conditional": SCHOOL_ZONE_CONDITIONAL,
                },
            ),
            (h(2000, 900, 1500), sw("both")),
            (h(2000, 1500, 2100), sw("both")),
        ],
    )
    t.street("Hobbin Street", RES, [(h(2000, 2750, 3000), sw("no"))])
    quarry_north = [
        (900, 1200),
        (900, 1400),
        (906, 1450),
        (911, 1500),
        (906, 1550),
        (900, 1600),
        (900, 2500),
    ]  # a gentle S-bend
    t.street("Quarry Lane", TERT35, [(v(900, 0, 600), sw("both")), (v(900, 600, 1200), sw("both"))])
    t.street("Quarry Lane", TERT30, [(quarry_north, sw("both"))])
    t.street(
        "Wherrit Street",
        TERT30,
        [
            (h(1000, 0, 900), sw("both")),
            (h(1000, 900, 1500), sw("both")),
            (h(1000, 1500, 2100), sw("both")),
            (h(1000, 2100, 3000), sw("both")),
        ],
    )
    t.street(
        "Pennycress Street",
        TERT30,
        [
            (v(2100, 0, 600), sw("no")),
            (v(2100, 600, 1200), sw("both")),
            (v(2100, 1200, 1600), sw("both")),
            (v(2100, 1600, 2500), sw("both")),
        ],
    )
    t.street("Cobmoor Street", RES25, [(v(1300, 0, 1200), sw("both"))])
    t.street(
        "Cobmoor Street",
        TERT35,
        [(v(1300, 1200, 2000), sw("both")), (v(1300, 2000, 2500), sw("both"))],
    )
    t.street(
        "Wickerlamp Street",
        RES25,
        [(h(2250, 0, 700), sw("both")), (h(2250, 700, 1300), sw("both"))],
    )
    t.street(
        "Wickerlamp Street",
        TERT30,
        [
            (h(2250, 1300, 2100), sw("both")),
            (h(2250, 2100, 2750), sw("both")),
            (wavy_h(2250, [2750, 3000], -10.0), sw("left")),
        ],
    )
    # ---- residential grid, east-west ------------------------------------------------
    t.street("Lowmeadow Road", RES, [(h(0, 0, 900), sw("no")), (h(0, 900, 2100), sw("left"))])
    t.street("Tallow Road", UNCL, [(h(0, 2100, 3000), sw("no"))])
    t.street("Jessamy Street", RES25, [(h(200, 0, 900), sw("both"))])
    t.street("Jessamy Street", RES, [(h(200, 900, 2100), sw("both"))])
    t.street("Cinder Mill Road", {**UNCL, "maxspeed": "50"}, [(h(200, 2100, 3000), sw("no"))])
    t.street(
        "Kipperling Street",
        RES25,
        [
            (h(400, 0, 250), sw("right")),
            (h(400, 700, 1300), sw("both")),
            (h(400, 1300, 2100), sw("both")),
        ],
    )
    t.street("Sprocket Lane", UNCL, [(h(400, 2100, 3000), sw("no"))])
    t.street(
        "Larkmoss Street",
        RES25,
        [
            (h(1400, 0, 700), sw("both")),
            (h(1400, 700, 1500), sw("both")),
            (h(1400, 1500, 2100), sw("both")),
        ],
    )
    t.street("Larkmoss Street", RES, [(h(1400, 2100, 3000), sw("both"))])
    t.street(
        "Mossglen Street",
        RES25,
        [
            (h(1600, 0, 500), sw("both")),
            (h(1600, 500, 1300), sw("both")),
            (h(1600, 1300, 2100), sw("left")),
            (h(1600, 2100, 3000), sw("both")),
        ],
    )
    t.street("Nuthatch Street", RES25, [(h(1800, 0, 900), sw("both"))])
    t.street(
        "Nuthatch Street", RES, [(h(1800, 900, 2100), sw("right")), (h(1800, 2750, 3000), sw("no"))]
    )
    t.street(
        "Ridgeline Drive",
        RES25,
        [
            (wavy_h(2500, X[:7], 18.0), sw("right")),
            (wavy_h(2500, X[6:], 18.0), sw("no")),
        ],
    )
    # ---- residential grid, north-south ----------------------------------------------
    t.street("Hedgerow Road", RES, [(wavy_v(0, Y[:7], -12.0), sw("no"))])
    t.street("Hedgerow Road", RES25, [(wavy_v(0, Y[6:], -12.0), sw("no"))])
    t.street(
        "Ambrel Street", RES25, [(v(250, 0, 600), sw("both")), (v(250, 600, 1200), sw("both"))]
    )
    t.street(
        "Ambrel Street",
        TERT30,
        [(v(250, 1200, 1600), sw("both")), (v(250, 1600, 2500), sw("both"))],
    )
    t.street("Bosky Lane", RES, [(v(500, 0, 200), sw("no")), (v(500, 600, 1200), sw("both"))])
    t.street("Bosky Lane", RES25, [(v(500, 1200, 2500), sw("both"))])
    t.street(
        "Cindle Street",
        RES25,
        [
            (v(700, 0, 600), sw("right")),
            (v(700, 600, 1200), sw("both")),
            (v(700, 1200, 2500), sw("both")),
        ],
    )
    t.street("Dapplewood Street", RES, [(v(1100, 0, 1200), sw("both"))])
    t.street("Dapplewood Street", RES25, [(v(1100, 1200, 2500), sw("both"))])
    t.street("Emberglow Street", RES, [(v(1700, 0, 1000), sw("both"))])
    t.street("Emberglow Street", RES25, [(v(1700, 1400, 2500), sw("both"))])
    t.street("Fernhollow Street", RES, [(v(1900, 0, 1000), sw("left"))])
    t.street("Fernhollow Street", RES25, [(v(1900, 1400, 2500), sw("both"))])
    t.street("Gannetry Street", RES, [(v(2300, 600, 1600), sw("both"))])
    t.street("Gannetry Street", RES25, [(v(2300, 2250, 2500), sw("both"))])
    t.street("Kilnyard Road", {**UNCL, "maxspeed": "40"}, [(v(2500, 0, 600), sw("no"))])
    t.street(
        "Heathermote Street",
        RES25,
        [(v(2500, 600, 1600), sw("both")), (v(2500, 2250, 2500), sw("both"))],
    )
    t.street("Foundry Way", UNCL, [(v(2750, 0, 600), sw("no"))])
    t.street(
        "Inkwell Street",
        RES25,
        [(v(2750, 600, 1200), sw("both")), (v(2750, 1200, 2500), sw("both"))],
    )
    t.street("Marshbank Road", {**UNCL, "maxspeed": "50"}, [(v(3000, 0, 600), sw("no"))])
    t.street("Marshbank Road", RES, [(v(3000, 600, 1200), sw("right"))])
    t.street("Marshbank Road", RES25, [(wavy_v(3000, Y[6:], 12.0), sw("right"))])
    # an older diagonal road, cutting across the grid (odd junction angles)
    t.street(
        "Millrace Road",
        RES25,
        [
            ([(1100, 800), (1210, 850), (1300, 900)], sw("left")),
            ([(1300, 900), (1395, 948), (1500, 1000)], sw("left")),
        ],
    )
    # ---- campus roads (inside the campus superblock) ----------------------------------
    campus = {"highway": "residential", "maxspeed": "20 mph"}
    t.street(
        "Scholars Bend",
        campus,
        [
            (
                [
                    (2300, 1600),
                    (2305, 1700),
                    (2330, 1800),
                    (2380, 1880),
                    (2440, 1960),
                    (2480, 2060),
                    (2495, 2160),
                    (2500, 2250),
                ],
                sw("both"),
            )
        ],
    )
    t.street("Quadrangle Way", campus, [(h(1960, 2100, 2440), sw("both"))])
    t.street("Orrery Lane", campus, [(h(2060, 2480, 2750), sw("right"))])
    # ---- special streets ------------------------------------------------------------
    t.street("Wicket Mews", {"highway": "living_street"}, [(h(1100, 2300, 2500), {})])
    t.street(
        "Pennyroyal Court",
        {"highway": "residential", "maxspeed": "walk"},
        [(h(1500, 1700, 1820), sw("no"))],
    )
    t.street("Sedgewren Court", RES, [(h(1100, 2750, 2880), sw("both"))])
    t.mark((1820, 1500), {"highway": "turning_circle"})
    t.mark((2880, 1100), {"highway": "turning_circle"})
    # ---- ways a drive filter must drop ------------------------------------------------
    t.street("Plover Reach", {**RES, "access": "private"}, [(h(700, 3000, 2860), sw("no"))])
    t.line(
        v(1950, 2250, 2420),
        {"highway": "construction", "construction": "residential", "name": "Foxglove Rise"},
    )
    t.line(
        h(1500, 1820, 1900),
        {"highway": "proposed", "proposed": "residential", "name": "Pennyroyal Link"},
    )
    for pts in (
        [(2300, 900), (2345, 900)],
        [(500, 1100), (540, 1100)],
        [(1900, 700), (1860, 700)],
        [(1800, 2000), (1800, 1930)],
    ):
        t.line(pts, {"highway": "service", "service": "driveway"})
    for pts in (
        [(1600, 1400), (1600, 1340), (2000, 1340), (2000, 1400)],
        [(1800, 1000), (1800, 1100), (1650, 1100)],
        [(2200, 1960), (2200, 1880), (2300, 1880), (2300, 1960)],
    ):
        t.line(pts, {"highway": "service", "service": "parking_aisle"})


def build_paths(t: Town) -> None:
    """Add footways, paths, steps and a cycleway, and the crossings they make."""
    side = {"highway": "footway", "footway": "sidewalk"}
    t.line(h(1212, 1506, 2094), {**side, "name": "Tillerman Avenue"})
    t.line(h(1188, 1506, 2094), {**side, "name": "Tillerman Avenue"})
    for x, kind in ((1650, "traffic_signals"), (1850, "marked"), (2000, "uncontrolled")):
        t.line(v(x, 1188, 1212), {"highway": "footway", "footway": "crossing", "crossing": kind})
        t.mark((x, 1200), {"highway": "crossing", "crossing": kind})
    # Marrowby Elementary School: path from the school door across Hobbin Street
    t.line(v(610, 1930, 2040), {"highway": "footway"})
    t.mark((610, 2000), {"highway": "crossing", "crossing": "marked", "crossing_ref": "zebra"})
    t.mark((512, 2000), {"highway": "crossing", "crossing": "uncontrolled"})
    # Tumbrel Hill Middle School and Gullhaven Academy
    t.mark((900, 300), {"highway": "crossing", "crossing": "marked"})
    t.mark((1000, 400), {"highway": "crossing", "crossing": "uncontrolled"})
    t.mark((2620, 1000), {"highway": "crossing", "crossing": "marked"})
    # campus walks
    t.line(
        [(2040, 1900), (2160, 1900), (2160, 1700), (2305, 1700)],
        {"highway": "footway", "name": "Lantern Walk"},
    )
    t.mark((2100, 1900), {"highway": "crossing", "crossing": "marked"})
    t.line(v(2160, 1700, 1650), {"highway": "steps", "step_count": "12"})
    t.line(v(2160, 1650, 1600), {"highway": "footway"})
    t.line(h(2100, 2250, 2700), {"highway": "footway"})  # crosses Scholars Bend (unmarked)
    t.line(v(2400, 2200, 2290), {"highway": "footway"})
    t.mark((2400, 2250), {"highway": "crossing", "crossing": "uncontrolled"})
    t.mark((2600, 1600), {"highway": "crossing", "crossing": "unmarked"})
    # parks
    t.line(
        [(1000, 2250), (985, 2330), (1010, 2410), (1000, 2470)],
        {"highway": "path", "surface": "gravel"},
    )
    t.line(
        [(250, 200), (330, 260), (420, 340), (500, 400), (580, 470), (650, 540), (700, 600)],
        {"highway": "cycleway", "name": "Tansy Meadow Trail", "surface": "asphalt"},
    )
    loop = rect(300, 250, 650, 550)
    t.line([*loop, loop[0]], {"highway": "footway", "surface": "fine_gravel"})
    # signals at the busiest junctions
    for pt in (
        (900, 1200),
        (1300, 1200),
        (1500, 1200),
        (2100, 1200),
        (1500, 600),
        (1500, 800),
        (1500, 1000),
        (1500, 2000),
        (900, 600),
        (900, 800),
        (2100, 600),
        (2100, 800),
    ):
        t.mark(pt, {"highway": "traffic_signals"})


SCHOOL_MARROWBY = rect(520, 1870, 690, 1988)
SCHOOL_TUMBREL = rect(912, 212, 1088, 388)
CAMPUS_OUTER = rect(2112, 1612, 2738, 2238)
CAMPUS_INNER = rect(2600, 1650, 2720, 1760)
RETAIL = rect(1512, 1212, 2088, 1388)
COMMERCIAL = rect(1512, 1012, 2088, 1188)
HOSPITAL = rect(1712, 1812, 1888, 1988)

SHOPS: list[tuple[Point, Tags]] = [
    ((1545, 1236), {"shop": "bakery", "name": "Crumbwhistle Bakery"}),
    ((1590, 1236), {"shop": "chemist", "amenity": "pharmacy", "name": "Sallowby Pharmacy"}),
    ((1635, 1236), {"shop": "coffee", "amenity": "cafe", "name": "Cup and Quern"}),
    ((1690, 1236), {"shop": "hardware", "name": "Bolt and Bracket Hardware"}),
    ((1740, 1236), {"shop": "books", "name": "Foxedleaf Books"}),
    ((1790, 1236), {"shop": "clothes", "name": "Threadmoor Clothing"}),
    ((1840, 1236), {"shop": "hairdresser", "name": "Shearling and Comb"}),
    ((1890, 1236), {"shop": "florist", "name": "Petalwick Florist"}),
    ((1940, 1236), {"shop": "butcher", "name": "Cleaver and Quince"}),
    ((1990, 1236), {"shop": "optician", "name": "Lensmoor Optician"}),
    ((2040, 1236), {"shop": "shoes", "name": "Cobbleworth Shoes"}),
    ((1560, 1372), {"shop": "supermarket", "name": "Tillerman Fresh Market"}),
    ((2050, 1372), {"shop": "convenience", "name": "Corner Lantern Convenience"}),
    ((2070, 1300), {"shop": "toys", "name": "Tumbledrum Toys"}),
]

# (position beside the road, name, mapped as a platform too)
BUS_STOPS: list[tuple[Point, str, bool]] = [
    ((480, 1209), "Tillerman Avenue at Bosky Lane", True),
    ((880, 1191), "Tillerman Avenue at Quarry Lane", False),
    ((1480, 1209), "Tillerman Avenue at Osprell Road", True),
    ((1700, 1191), "Tallyhouse Office Park", False),
    ((1900, 1209), "Tillerman Shops", True),
    ((2320, 1191), "Tillerman Avenue at Gannetry Street", False),
    ((2730, 1209), "Tillerman Avenue at Inkwell Street", True),
    ((1509, 420), "Osprell Road at Kipperling Street", False),
    ((1491, 980), "Osprell Road at Wherrit Street", True),
    ((1509, 1750), "Osprell Road at Nuthatch Street", False),
    ((1491, 2230), "Osprell Road at Wickerlamp Street", True),
    ((2200, 591), "Brindlecot Street at Pennycress Street", False),
    ((1080, 809), "Vellamy Street at Dapplewood Street", False),
]


def build_places(t: Town) -> None:
    """Add land use and the pedestrian exposure sources."""
    for ring in (
        rect(10, 1212, 1290, 2490),
        rect(10, 10, 1490, 1188),
        rect(1510, 10, 2090, 990),
        rect(1310, 1410, 2090, 2490),
        rect(2110, 610, 2990, 1188),
        rect(2110, 1212, 2990, 1590),
        rect(2760, 1610, 2990, 2490),
        rect(2110, 2260, 2740, 2490),
    ):
        t.area(ring, {"landuse": "residential"})
    t.area(rect(2110, 10, 2990, 590), {"landuse": "industrial", "name": "Cinder Mill Yards"})
    # schools
    t.area(
        SCHOOL_MARROWBY,
        {"amenity": "school", "name": "Marrowby Elementary School", "isced:level": "1"},
    )
    t.area(
        SCHOOL_TUMBREL,
        {"amenity": "school", "name": "Tumbrel Hill Middle School", "isced:level": "2"},
    )
    t.poi((2620, 900), {"amenity": "school", "name": "Gullhaven Academy"})
    t.poi((800, 1080), {"amenity": "kindergarten", "name": "Wobblestone Kindergarten"})
    # campus: a multipolygon with a hole (a utility plot that is not campus ground)
    t.multipolygon(
        [CAMPUS_OUTER],
        [CAMPUS_INNER],
        {"amenity": "university", "name": "Corvane Polytechnic University"},
        inner_tags={"power": "substation"},
    )
    t.poi((380, 900), {"amenity": "college", "name": "Tidewrack Community College"})
    # retail strip along Tillerman Avenue, offices across the road
    t.area(RETAIL, {"landuse": "retail", "name": "Tillerman Shops"})
    t.area(rect(1590, 1332, 2010, 1392), {"amenity": "parking", "parking": "surface"})
    for pt, tags in SHOPS:
        t.poi(pt, tags)
    t.area(COMMERCIAL, {"landuse": "commercial", "name": "Tallyhouse Office Park"})
    # transit
    for pt, name, platform in BUS_STOPS:
        tags = {"highway": "bus_stop", "bus": "yes", "name": name}
        if platform:
            tags |= {"public_transport": "platform", "shelter": "yes", "bench": "yes"}
        t.poi(pt, tags)
    # parks and playgrounds
    t.area(rect(912, 2262, 1088, 2488), {"leisure": "park", "name": "Quillfeather Park"})
    t.area(rect(1030, 2290, 1075, 2335), {"leisure": "playground"})
    t.area(rect(262, 212, 688, 588), {"leisure": "park", "name": "Tansy Meadow Park"})
    t.poi((480, 300), {"leisure": "playground", "name": "Tansy Meadow Play Area"})
    t.area(rect(2762, 2262, 2988, 2488), {"leisure": "park", "name": "Brineholt Park"})
    # hospital
    t.area(
        HOSPITAL, {"amenity": "hospital", "name": "Corvane Memorial Hospital", "emergency": "yes"}
    )


# --------------------------------------------------------------------------------------
# Planned routes and proposed areas
# --------------------------------------------------------------------------------------
# school-run passes the frontage of Marrowby Elementary School on Hobbin Street during
# afternoon dismissal (the school zone's conditional limit applies 14:30-15:30 on
# weekdays). Two blocks south, Mossglen Street runs parallel through plain houses.
# (name, depart, waypoints, indices of waypoints an alternative must keep, or None)
ROUTES: list[tuple[str, str, list[Point], list[int] | None]] = [
    (
        "school-run",
        "2027-03-09T15:05:00",
        [(250, 1600), (250, 1900), (600, 2000), (1100, 2000), (1300, 2250)],
        None,
    ),
    # the signalised junction of Tillerman Avenue and Osprell Road is a test condition
    (
        "tillerman-retail",
        "2027-03-13T11:30:00",
        [
            (900, 1000),
            (900, 1150),
            (1300, 1200),
            (1500, 1200),
            (1800, 1200),
            (2500, 1200),
            (2750, 1300),
        ],
        [0, 3, 6],
    ),
    (
        "campus-drive",
        "2027-03-10T12:10:00",
        [
            (1700, 1600),
            (2000, 1600),
            (2330, 1800),
            (2480, 2060),
            (2500, 2250),
            (2750, 2250),
            (2750, 1700),
        ],
        None,
    ),
    (
        "industrial-loop",
        "2027-03-11T10:00:00",
        [(1700, 400), (2300, 400), (2500, 200), (2300, 0), (1900, 0), (1700, 200), (1700, 400)],
        None,
    ),
]

AREAS: list[tuple[str, list[Point]]] = [
    # most of the town, leaving out the south-east corner (east industrial yards and
    # the houses around Gullhaven Academy)
    (
        "corvane-main",
        [(-30, -30), (2630, -30), (2630, 1290), (3030, 1290), (3030, 2530), (-30, 2530)],
    ),
    # the north-west houses around Marrowby Elementary School
    ("corvane-northwest", rect(-30, 1290, 1400, 2530)),
]

ALTERNATIVE_STREET = "Mossglen Street"


# --------------------------------------------------------------------------------------
# Assembling elements and checking them
# --------------------------------------------------------------------------------------
class Built:
    """The numbered OSM elements of the town."""

    def __init__(self, town: Town) -> None:
        self.node_id: dict[tuple[int, int], int] = {}
        self.node_tags: dict[int, Tags] = {}
        self.node_pos: dict[int, tuple[int, int]] = {}
        self.ways: list[tuple[int, list[int], Tags]] = []
        self.relations: list[tuple[int, list[tuple[int, str]], Tags]] = []

        line_ids = [self._way([self._node(p) for p in pts], tags) for pts, tags in town.lines]
        area_ids = []
        for ring, tags in town.areas:
            refs = [self._node(p, fresh=True) for p in ring]
            area_ids.append(self._way([*refs, refs[0]], tags))
        for members, tags in town.relations:
            rid = len(self.relations) + 1
            self.relations.append((rid, [(area_ids[i], role) for i, role in members], tags))
        for pt, tags in town.marks:
            self.node_tags[self.node_id[lonlat_fixed(pt)]].update(tags)
        for pt, tags in town.pois:
            nid = self._node(pt, fresh=True)
            self.node_tags[nid].update(tags)
        self.line_ids = line_ids
        self._tag_unmarked_crossings()

    def _node(self, pt: Point, *, fresh: bool = False) -> int:
        key = lonlat_fixed(pt)
        if key in self.node_id:
            if fresh:
                msg = f"point {pt} falls on an existing node; move it"
                raise ValueError(msg)
            return self.node_id[key]
        nid = len(self.node_id) + 1
        self.node_id[key] = nid
        self.node_pos[nid] = key
        self.node_tags[nid] = {}
        return nid

    def _way(self, refs: list[int], tags: Tags) -> int:
        wid = len(self.ways) + 1
        self.ways.append((wid, refs, tags))
        return wid

    def _tag_unmarked_crossings(self) -> None:
        """Tag as unmarked crossings the nodes where a footway passes over a road."""
        on_road: set[int] = set()
        through_foot: set[int] = set()
        for _wid, refs, tags in self.ways:
            if is_drivable(tags):
                on_road.update(refs)
            elif tags.get("highway") in FOOT_CLASSES:
                through_foot.update(refs[1:-1])
        for nid in sorted(on_road & through_foot):
            if "highway" not in self.node_tags[nid]:
                self.node_tags[nid].update({"highway": "crossing", "crossing": "unmarked"})


def check_junctions(town: Town) -> None:
    """Fail if a drivable way ends within 1 m of another way without joining it."""
    cell = 100.0
    grid: dict[tuple[int, int], list[tuple[Point, Point, str]]] = {}
    ends = []
    for pts, tags in town.lines:
        if not is_drivable(tags):
            continue
        ends += [pts[0], pts[-1]]
        for a, b in zip(pts, pts[1:], strict=False):
            for c in _cells(a, b, cell, 1.0):
                grid.setdefault(c, []).append((a, b, tags.get("name", "")))
    for end in ends:
        for a, b, name in grid.get((int(end[0] // cell), int(end[1] // cell)), []):
            d = point_segment_distance(end, a, b)
            if 1e-6 < d < 1.0:
                msg = f"street end {end} misses the way {name} by {d:.2f} m"
                raise ValueError(msg)


def check_strongly_connected(built: Built) -> int:
    """Fail unless every drivable node reaches every other; return the node count."""
    succ: dict[int, set[int]] = {}
    pred: dict[int, set[int]] = {}
    for _wid, refs, tags in built.ways:
        if not is_drivable(tags):
            continue
        for a, b in zip(refs, refs[1:], strict=False):
            for u, w in ((a, b),) if tags.get("oneway") == "yes" else ((a, b), (b, a)):
                succ.setdefault(u, set()).add(w)
                pred.setdefault(w, set()).add(u)
                succ.setdefault(w, set())
                pred.setdefault(u, set())
    nodes = sorted(succ)

    def reach(adj: dict[int, set[int]]) -> set[int]:
        seen = {nodes[0]}
        stack = [nodes[0]]
        while stack:
            for w in adj[stack.pop()]:
                if w not in seen:
                    seen.add(w)
                    stack.append(w)
        return seen

    if len(reach(succ)) != len(nodes) or len(reach(pred)) != len(nodes):
        msg = "the drivable network is not strongly connected"
        raise ValueError(msg)
    return len(nodes)


def check_waypoints(town: Town) -> None:
    """Fail unless every route waypoint lies on a drivable street (within 0.5 m)."""
    segs = [
        (a, b)
        for pts, tags in town.lines
        if is_drivable(tags)
        for a, b in zip(pts, pts[1:], strict=False)
    ]
    for name, _depart, pts, _required in ROUTES:
        for p in pts:
            if min(point_segment_distance(p, a, b) for a, b in segs) > 0.5:
                msg = f"route {name}: waypoint {p} is not on a drivable street"
                raise ValueError(msg)


# --------------------------------------------------------------------------------------
# Writing
# --------------------------------------------------------------------------------------
def _attr(value: str) -> str:
    """Escape a value for a double-quoted XML attribute."""
    return (
        value.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;").replace('"', "&quot;")
    )


def _tag_lines(tags: Tags, indent: str) -> list[str]:
    return [f'{indent}<tag k="{_attr(k)}" v="{_attr(tags[k])}"/>' for k in sorted(tags)]


def osm_xml(built: Built) -> str:
    """Return the town as OSM XML 0.6 text."""
    lo = lonlat_fixed((BOUNDS[0], BOUNDS[1]))
    hi = lonlat_fixed((BOUNDS[2], BOUNDS[3]))
    out = [
        '<?xml version="1.0" encoding="UTF-8"?>',
        '<osm version="0.6" generator="routerisk sample_area/make_town.py">',
        f'  <bounds minlat="{fmt7(lo[1])}" minlon="{fmt7(lo[0])}" '
        f'maxlat="{fmt7(hi[1])}" maxlon="{fmt7(hi[0])}"/>',
    ]
    for nid in sorted(built.node_pos):
        lon, lat = built.node_pos[nid]
        head = f'  <node id="{nid}" version="1" lat="{fmt7(lat)}" lon="{fmt7(lon)}"'
        tags = built.node_tags[nid]
        if tags:
            out += [head + ">", *_tag_lines(tags, "    "), "  </node>"]
        else:
            out.append(head + "/>")
    for wid, refs, tags in built.ways:
        out.append(f'  <way id="{wid}" version="1">')
        out += [f'    <nd ref="{r}"/>' for r in refs]
        out += _tag_lines(tags, "    ")
        out.append("  </way>")
    for rid, members, tags in built.relations:
        out.append(f'  <relation id="{rid}" version="1">')
        out += [f'    <member type="way" ref="{w}" role="{role}"/>' for w, role in members]
        out += _tag_lines(tags, "    ")
        out.append("  </relation>")
    out.append("</osm>")
    return "\n".join(out) + "\n"


def dumps_json(data: object) -> str:
    """Serialise like ``routerisk.io.atomic.dumps_json`` (sorted keys, indent 2), plus newline."""
    return json.dumps(data, indent=2, sort_keys=True, ensure_ascii=False, allow_nan=False) + "\n"


def routes_geojson() -> str:
    """Return the planned test routes as a GeoJSON FeatureCollection."""
    feats = []
    for name, depart, pts, required in ROUTES:
        props: dict[str, object] = {"name": name, "depart": depart}
        if required is not None:
            props["required"] = required
        feats.append(
            {
                "type": "Feature",
                "properties": props,
                "geometry": {"type": "LineString", "coordinates": [json_coord(p) for p in pts]},
            }
        )
    return dumps_json({"type": "FeatureCollection", "features": feats})


def area_geojson() -> str:
    """Return the proposed test areas as a GeoJSON FeatureCollection."""
    feats = [
        {
            "type": "Feature",
            "properties": {"name": name},
            "geometry": {
                "type": "Polygon",
                "coordinates": [[json_coord(p) for p in [*ring, ring[0]]]],
            },
        }
        for name, ring in AREAS
    ]
    return dumps_json({"type": "FeatureCollection", "features": feats})


def counts(built: Built) -> dict[str, int]:
    """Count elements and exposure sources by the default profile's categories."""
    c = {"nodes": len(built.node_pos), "ways": len(built.ways), "relations": len(built.relations)}
    tagged = [t for t in built.node_tags.values() if t]
    tagged += [t for _w, _r, t in built.ways] + [t for _r, _m, t in built.relations]
    rules = {
        "school": lambda t: t.get("amenity") in {"school", "kindergarten"},
        "campus": lambda t: t.get("amenity") in {"university", "college"},
        "retail": lambda t: t.get("landuse") == "retail" or "shop" in t,
        "commercial": lambda t: t.get("landuse") == "commercial",
        "transit": lambda t: (
            t.get("highway") == "bus_stop" or t.get("public_transport") == "platform"
        ),
        "park": lambda t: t.get("leisure") in {"park", "playground"},
        "hospital": lambda t: t.get("amenity") == "hospital",
        "crossings": lambda t: t.get("highway") == "crossing",
        "traffic_signals": lambda t: t.get("highway") == "traffic_signals",
        "residential_landuse": lambda t: t.get("landuse") == "residential",
    }
    for name, rule in rules.items():
        c[name] = sum(1 for t in tagged if rule(t))
    c["drivable_ways"] = sum(1 for _w, _r, t in built.ways if is_drivable(t))
    return c


def readme(c: dict[str, int], drive_nodes: int) -> str:
    """Return the README text with the counts of this run."""
    n_platform = sum(1 for _p, _n, platform in BUS_STOPS if platform)
    return f"""# Corvane: an invented sample town

Corvane **does not exist**. It is a made-up small US-style town, drawn by
`make_town.py` and placed in open ocean at about 38.50 N, 38.00 W (UTM zone 24N,
EPSG:32624; local time zone setting `Etc/GMT+3`), so it overlaps no real place. Every
name in it (streets, schools, shops, stops, parks) is invented. It is the demo and test
data of routerisk.

## Files

- `make_town.py`: the generator (Python standard library only, no randomness).
- `corvane.osm`: OpenStreetMap XML 0.6 with `<bounds>`, 7-decimal coordinates.
- `routes.geojson`: 4 planned test routes, LineString waypoints with the properties
  `name` and `depart` (local time); one also has `required` (waypoint indices).
- `area.geojson`: 2 proposed test areas, Polygons with the property `name`.
- `README.md`: this file (also generated).

Regenerate (byte-identical on every run):

    python sample_area/make_town.py            # writes next to the script
    python sample_area/make_town.py --out DIR  # writes into DIR

Before writing, the script checks that every crossing of two highway ways shares a
node, that no street end misses a street by less than a metre, that the drivable
network ({drive_nodes} nodes before simplification) is strongly connected, and that each
route waypoint lies on a drivable street. `tests/test_sample_area.py` checks the files.

## What the town holds

About 3 km x 2.5 km: {c["nodes"]} nodes, {c["ways"]} ways ({c["drivable_ways"]} drivable),
{c["relations"]} relation.

- Arterials: Tillerman Avenue (primary, 45 mph, 4 lanes, 40 mph along the shops with
  `sidewalk=separate` and mapped sidewalks), Osprell Road (secondary, 40 mph, 2 lanes),
  and the one-way pair Brindlecot Street (eastbound) / Vellamy Street (westbound).
- Collectors (tertiary, 35 / 30 mph): Hobbin Street, Quarry Lane, Ambrel Street, Wherrit
  Street, Pennycress Street, Cobmoor Street, Wickerlamp Street.
- A residential grid at 25 mph, with some streets carrying no `maxspeed` (imputed),
  campus roads at 20 mph, a `highway=living_street` (Wicket Mews), unclassified
  industrial roads with bare km/h limits (`50`, `40`), `maxspeed=walk` on Pennyroyal
  Court, and a `hazard=school_zone` way on Hobbin Street with
  `maxspeed:conditional={SCHOOL_ZONE_CONDITIONAL}`.
- `sidewalk=both/left/right/no/separate` on most streets; streets are split into several
  ways, some curve gently (Ridgeline Drive, Hedgerow Road, Quarry Lane, Scholars Bend) and
  Millrace Road cuts across the grid at an angle.
- Ways a drive filter must drop: footways, a cycleway, a path, steps, driveways,
  parking aisles, a private road (Plover Reach), a road under construction (Foxglove
  Rise) and a proposed one (Pennyroyal Link).

Pedestrian exposure sources (counted as the default profile groups them):

- school ({c["school"]}): Marrowby Elementary School and Tumbrel Hill Middle School
  (grounds polygons), Gullhaven Academy (node), Wobblestone Kindergarten (node).
- campus ({c["campus"]}): Corvane Polytechnic University (a multipolygon relation with a
  hole), Tidewrack Community College (node).
- retail ({c["retail"]}): Tillerman Shops (`landuse=retail`) and {len(SHOPS)} `shop=*` nodes.
- commercial ({c["commercial"]}): Tallyhouse Office Park.
- transit ({c["transit"]}): `highway=bus_stop` nodes beside the arterials (such as
  {BUS_STOPS[0][1]}), {n_platform} of them also `public_transport=platform`.
- park ({c["park"]}): Quillfeather, Tansy Meadow and Brineholt parks, 2 playgrounds.
- hospital ({c["hospital"]}): Corvane Memorial Hospital.

On the streets: {c["crossings"]} `highway=crossing` nodes (traffic_signals, marked,
uncontrolled, unmarked) near the schools, the shops and the campus, and
{c["traffic_signals"]} `highway=traffic_signals` junctions. {c["residential_landuse"]}
`landuse=residential` polygons and one industrial yard fill the blocks.

## Planned routes (`routes.geojson`)

- `school-run` (Tuesday 15:05, school dismissal): from the corner of Ambrel Street and
  {ALTERNATIVE_STREET} north on Ambrel Street, east on Hobbin Street right past the
  frontage of Marrowby Elementary School (its school zone), north on Cobmoor Street. It is
  the fastest way at the posted limits. The parallel {ALTERNATIVE_STREET}, two blocks
  south, then Cobmoor Street pass no school, shop or campus and take about 9 % longer at
  the posted limits (less than the 20 mph dismissal limit costs), so a lower-exposure
  alternative exists.
- `tillerman-retail` (Saturday 11:30): along Tillerman Avenue through the shops;
  `required: [0, 3, 6]` keeps the signalised junction with Osprell Road in any alternative.
- `campus-drive` (Wednesday 12:10): through the campus on Scholars Bend.
- `industrial-loop` (Thursday 10:00): a quiet loop through the industrial yards and
  houses south of Brindlecot Street.

## Proposed test areas (`area.geojson`)

- `corvane-main`: most of the town, leaving out its south-east corner.
- `corvane-northwest`: the houses around Marrowby Elementary School (smaller).

## Licence

The invented data in this folder (`corvane.osm`, `routes.geojson`, `area.geojson`) is
dedicated to the public domain under CC0 1.0
(https://creativecommons.org/publicdomain/zero/1.0/). It contains no OpenStreetMap
contributors' data; only the file format and tagging follow OpenStreetMap.
"""


def write_atomic(path: Path, text: str) -> None:
    """Write text to a temporary file beside ``path`` and move it into place."""
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(text)
        os.chmod(tmp, 0o644)  # mkstemp makes the file private; these are shared data files
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def generate() -> dict[str, str]:
    """Build and check the town; return file name -> text."""
    town = Town()
    build_streets(town)
    build_paths(town)
    build_places(town)
    node_lines(town)
    check_junctions(town)
    check_waypoints(town)
    built = Built(town)
    drive_nodes = check_strongly_connected(built)
    c = counts(built)
    return {
        "corvane.osm": osm_xml(built),
        "routes.geojson": routes_geojson(),
        "area.geojson": area_geojson(),
        "README.md": readme(c, drive_nodes),
    }


def main(argv: Sequence[str] | None = None) -> int:
    """Generate the files; return the exit status."""
    parser = argparse.ArgumentParser(description="Generate the invented sample town Corvane.")
    parser.add_argument(
        "--out",
        type=Path,
        default=Path(__file__).resolve().parent,
        help="folder to write into (default: next to this script)",
    )
    args = parser.parse_args(argv)
    try:
        files = generate()
    except ValueError as exc:
        print(f"make_town.py: {exc}", file=sys.stderr)
        return 1
    for name, text in files.items():
        write_atomic(args.out / name, text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
