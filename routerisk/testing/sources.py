"""The exposure sources of the invented city, with footways and land use.

Schools and kindergartens, campuses, hospitals, commercial blocks, parks and playgrounds on
the blocks chosen by :func:`~routerisk.testing.city.plan_blocks`; retail strips with shops
along arterials; bus stops about every 400 m along arterials; separate sidewalks beside some
arterial sides and residential land use between the main streets.
"""

from __future__ import annotations

import math
from bisect import bisect_right

import numpy as np

from routerisk.testing.city import City, inset
from routerisk.testing.grid import COL, SEC

_SHOPS = (
    ("supermarket", "Market"),
    ("convenience", "Corner Store"),
    ("bakery", "Bakery"),
    ("clothes", "Outfitters"),
    ("hairdresser", "Hair"),
    ("alcohol", "Cellar"),
    ("hardware", "Hardware"),
    ("books", "Books"),
    ("mobile_phone", "Phones"),
    ("butcher", "Butcher"),
)


def sources(city: City) -> None:
    """Emit the polygons and nodes of every exposure source, then footways and land use."""
    out, pr, names = city.out, city.pr, city.names
    for j, i, h, w in city.campuses:
        pts = inset(city.block_corners(j, i, h, w), 14.0)
        out.polygon(pts, {"amenity": "university", "name": f"University of {names.word()}"})
        out.count("university")
    for j, i in city.colleges:
        out.polygon(inset(city.block_corners(j, i), 14.0),
                    {"amenity": "college", "name": f"{names.word()} College"})  # fmt: skip
        out.count("college")
    for j, i in city.hospitals:
        out.polygon(
            inset(city.block_corners(j, i), 12.0),
            {"amenity": "hospital", "healthcare": "hospital", "emergency": "yes",
             "name": f"{names.word()} General Hospital"},
        )  # fmt: skip
        out.count("hospital")
    for j, i in city.commercial:
        out.polygon(inset(city.block_corners(j, i), 10.0), {"landuse": "commercial"})
        out.count("commercial")
    kinds = ("Primary School", "School", "High School", "Middle School")
    for j, i in city.schools:
        tags = {"amenity": "school", "name": f"{names.word()} {kinds[pr.randrange(4)]}"}
        out.polygon(inset(city.block_corners(j, i), 12.0), tags)
        out.count("school")
    for j, i in city.kinder:
        tags = {"amenity": "kindergarten", "name": f"{names.word()} Kindergarten"}
        c = city.block_corners(j, i)
        if pr.random() < 0.5:
            cx, cy = inset(c, 30.0)[0]
            out.polygon([(cx, cy), (cx + 35, cy), (cx + 35, cy + 30), (cx, cy + 30)], tags)
        else:
            cx = sum(p[0] for p in c) / 4
            cy = sum(p[1] for p in c) / 4
            out.node(cx, cy, tags)
        out.count("kindergarten")
    _parks(city)
    for j, i in city.playgrounds:
        c = city.block_corners(j, i)
        out.node(sum(p[0] for p in c) / 4, sum(p[1] for p in c) / 4, {"leisure": "playground"})
        out.count("playground")
    _retail(city)
    _bus_stops(city)
    _sidewalks(city)
    _residential_landuse(city)


def _parks(city: City) -> None:
    out, pr, lay = city.out, city.pr, city.lay
    nx = lay.nx
    for j, i in city.parks:
        corners = city.block_corners(j, i)
        tags = {"leisure": "park", "name": f"{city.names.word()} Park"}
        out.polygon(inset(corners, 8.0), tags)
        out.count("park")
        cx = sum(p[0] for p in corners) / 4
        cy = sum(p[1] for p in corners) / 4
        if pr.random() < 0.4:
            x0, y0 = cx + 10, cy + 10
            pts = [(x0, y0), (x0 + 25, y0), (x0 + 25, y0 + 20), (x0, y0 + 20)]
            out.polygon(pts, {"leisure": "playground"})
            out.count("playground")
        # a footpath across the park from corner to corner, joined to the streets
        ka, kb = j * nx + i, (j + 1) * nx + i + 1
        ends = []
        for k, p in ((ka, corners[0]), (kb, corners[2])):
            ends.append(k + 1 if lay.keep.flat[k] else out.node(*p))
        mid = out.node(cx + pr.gauss(0, 5), cy + pr.gauss(0, 5))
        out.way([ends[0], mid, ends[1]], {"highway": "footway"})
        out.count("footway")


def _retail(city: City) -> None:
    out, pr = city.out, city.pr
    for k0, k1, bj, bi, side in city.retail:
        ax, ay, bx, by = city.xl[k0], city.yl[k0], city.xl[k1], city.yl[k1]
        dx, dy = bx - ax, by - ay
        length = math.hypot(dx, dy)
        ux, uy = dx / length, dy / length
        nxv, nyv = -uy * side, ux * side  # unit normal pointing into the block
        # make sure the normal points towards the block centre
        c = city.block_corners(bj, bi)
        cx, cy = sum(p[0] for p in c) / 4, sum(p[1] for p in c) / 4
        if (cx - ax) * nxv + (cy - ay) * nyv < 0:
            nxv, nyv = -nxv, -nyv
        a0, a1 = 12.0, length - 12.0

        def at(s: float, d: float) -> tuple[float, float]:
            return ax + ux * s + nxv * d, ay + uy * s + nyv * d  # noqa: B023

        tags = {"landuse": "retail"}
        out.polygon([at(a0, 8.0), at(a1, 8.0), at(a1, 45.0), at(a0, 45.0)], tags)
        out.count("retail")
        n = pr.randrange(1, 5)
        for q in range(n):
            s = a0 + (a1 - a0) * (q + 0.5) / n
            shop, label = _SHOPS[pr.randrange(len(_SHOPS))]
            stags = {"shop": shop}
            if pr.random() < 0.4:
                stags["name"] = f"{city.names.word()} {label}"
            out.node(*at(s, 25.0), stags)
            out.count("shop")


def _bus_stops(city: City) -> None:
    lay, pr, out = city.lay, city.pr, city.out
    nx, ny = lay.nx, lay.ny
    lines = [("h", j) for j in np.flatnonzero(lay.row_cls >= SEC).tolist()]
    lines += [("v", i) for i in np.flatnonzero(lay.col_cls >= SEC).tolist()]
    for kind, idx in lines:
        if kind == "h":
            ks = [idx * nx + i for i in range(nx)]
            on, ow, name = lay.h_on[idx], int(lay.row_ow[idx]), city.row_names[idx]
            cross_names = city.col_names
        else:
            ks = [j * nx + idx for j in range(ny)]
            on, ow, name = lay.v_on[idx], int(lay.col_ow[idx]), city.col_names[idx]
            cross_names = city.row_names
        px = [city.xl[k] for k in ks]
        py = [city.yl[k] for k in ks]
        seg = [math.hypot(px[q + 1] - px[q], py[q + 1] - py[q]) for q in range(len(ks) - 1)]
        cum = [0.0, *np.cumsum(seg).tolist()]
        s = pr.uniform(100.0, 300.0)
        while s < cum[-1]:
            q = min(bisect_right(cum, s) - 1, len(seg) - 1)
            if on[q]:
                t = (s - cum[q]) / seg[q]
                ux, uy = (px[q + 1] - px[q]) / seg[q], (py[q + 1] - py[q]) / seg[q]
                bx, by = px[q] + ux * seg[q] * t, py[q] + uy * seg[q] * t
                near = q if t < 0.5 else q + 1
                stop_name = f"{name} / {cross_names[near]}"
                # right-hand side of travel: (uy, -ux) for travel along increasing index
                sides = (1, -1) if ow == 0 else ((1,) if ow > 0 else (-1,))
                for sd in sides:
                    tags = {"highway": "bus_stop", "name": stop_name, "bus": "yes"}
                    if pr.random() < 0.7:
                        tags["public_transport"] = "platform"
                    out.node(bx + uy * 10.0 * sd, by - ux * 10.0 * sd, tags)
                    out.count("bus_stop")
            s += pr.uniform(350.0, 450.0)


def _sidewalks(city: City) -> None:
    """Draw separate sidewalks beside some arterial sides (not joined to the streets)."""
    lay, rng, nx = city.lay, city.rng, city.lay.nx
    for j in np.flatnonzero(lay.row_cls >= SEC).tolist():
        for i in np.flatnonzero(lay.h_on[j] & (rng.random(nx - 1) < 0.12)).tolist():
            _sidewalk_pair(city, j * nx + i, j * nx + i + 1)
    for i in np.flatnonzero(lay.col_cls >= SEC).tolist():
        for j in np.flatnonzero(lay.v_on[i] & (rng.random(lay.ny - 1) < 0.12)).tolist():
            _sidewalk_pair(city, j * nx + i, (j + 1) * nx + i)


def _sidewalk_pair(city: City, ka: int, kb: int) -> None:
    ax, ay, bx, by = city.xl[ka], city.yl[ka], city.xl[kb], city.yl[kb]
    dx, dy = bx - ax, by - ay
    length = math.hypot(dx, dy)
    ux, uy = dx / length, dy / length
    for sd in (1.0, -1.0):
        ox, oy = -uy * 9.0 * sd, ux * 9.0 * sd
        a = city.out.node(ax + ux * 14 + ox, ay + uy * 14 + oy)
        b = city.out.node(bx - ux * 14 + ox, by - uy * 14 + oy)
        city.out.way([a, b], {"highway": "footway", "footway": "sidewalk"})
        city.out.count("footway")


def _residential_landuse(city: City) -> None:
    """Cover some neighbourhoods between the main streets with landuse=residential."""
    lay, pr = city.lay, city.pr
    cols = [0, *np.flatnonzero(lay.col_cls >= COL).tolist(), lay.nx - 1]
    rows = [0, *np.flatnonzero(lay.row_cls >= COL).tolist(), lay.ny - 1]
    for r0, r1 in zip(rows[:-1], rows[1:], strict=True):
        for c0, c1 in zip(cols[:-1], cols[1:], strict=True):
            if r1 - r0 >= 2 and c1 - c0 >= 2 and pr.random() < 0.6:
                pts = inset(city.block_corners(r0, c0, r1 - r0, c1 - c0), 12.0)
                city.out.polygon(pts, {"landuse": "residential"})
                city.out.count("landuse_residential")
