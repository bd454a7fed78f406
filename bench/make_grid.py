"""Write a plain street grid as OSM XML: every node an intersection, a few schools and shops.

Usage::

    python bench/make_grid.py --size 160 --out grid.osm

``size`` x ``size`` intersections 100 m apart, joined by two-way residential streets (one way
per row and per column), placed in open ocean (30 N, 45 W) like the generated cities, so no
real place is drawn. Twenty schools and twenty shops are scattered with a fixed seed, so
fewer than one edge in ten lies within any source's reach. The output is deterministic.
"""

from __future__ import annotations

import argparse
import math
from collections.abc import Sequence
from pathlib import Path

import numpy as np

SPACING_M = 100.0
CENTRE = (30.0, -45.0)  # lat, lon


def write_grid(out: str | Path, size: int, *, seed: int = 0) -> dict[str, int]:
    """Write the grid to ``out``; return its counts."""
    lat0, lon0 = CENTRE
    dlat = SPACING_M / 111_320.0
    dlon = SPACING_M / (111_320.0 * math.cos(math.radians(lat0)))
    half = (size - 1) / 2
    lines = [
        '<?xml version="1.0" encoding="UTF-8"?>',
        '<osm version="0.6" generator="routerisk bench/make_grid.py">',
    ]
    lat_max, lon_max = lat0 + (half + 1) * dlat, lon0 + (half + 1) * dlon
    lines.append(
        f'  <bounds minlat="{2 * lat0 - lat_max:.7f}" minlon="{2 * lon0 - lon_max:.7f}"'
        f' maxlat="{lat_max:.7f}" maxlon="{lon_max:.7f}"/>'
    )

    def nid(i: int, j: int) -> int:
        return 1 + i * size + j

    for i in range(size):
        for j in range(size):
            lat, lon = lat0 + (i - half) * dlat, lon0 + (j - half) * dlon
            lines.append(f'  <node id="{nid(i, j)}" version="1" lat="{lat:.7f}" lon="{lon:.7f}"/>')
    rng = np.random.default_rng(seed)
    extra = size * size + 1
    pois = []
    for kind, tag in (("school", ("amenity", "school")), ("shop", ("shop", "bakery"))):
        for k in range(20):
            lat = lat0 + float(rng.uniform(-half, half)) * dlat
            lon = lon0 + float(rng.uniform(-half, half)) * dlon
            pois.append(
                f'  <node id="{extra}" version="1" lat="{lat:.7f}" lon="{lon:.7f}">'
                f'<tag k="{tag[0]}" v="{tag[1]}"/><tag k="name" v="{kind} {k + 1}"/>'
                "</node>"
            )
            extra += 1
    lines += pois
    way = 1
    for i in range(size):  # rows, then columns
        refs = "".join(f'<nd ref="{nid(i, j)}"/>' for j in range(size))
        lines.append(
            f'  <way id="{way}" version="1">{refs}<tag k="highway" v="residential"/>'
            f'<tag k="name" v="Row {i + 1}"/></way>'
        )
        way += 1
    for j in range(size):
        refs = "".join(f'<nd ref="{nid(i, j)}"/>' for i in range(size))
        lines.append(
            f'  <way id="{way}" version="1">{refs}<tag k="highway" v="residential"/>'
            f'<tag k="name" v="Column {j + 1}"/></way>'
        )
        way += 1
    lines.append("</osm>")
    Path(out).write_text("\n".join(lines) + "\n", encoding="utf-8")
    return {
        "intersections": size * size,
        "directed_edges": 4 * size * (size - 1),
        "sources": len(pois),
    }


def main(argv: Sequence[str] | None = None) -> int:
    """Parse the options and write the grid."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--size", type=int, default=160, help="intersections per side (160)")
    parser.add_argument("--seed", type=int, default=0, help="seed of the source places (0)")
    parser.add_argument("--out", required=True, help="output .osm file")
    args = parser.parse_args(argv)
    print(write_grid(args.out, args.size, seed=args.seed))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
