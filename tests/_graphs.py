"""Synthetic projected road graphs and drives for the tests (osmnx-style attributes).

``grid_graph`` builds a square grid of streets in EPSG:32625 around 38.5 N, 38.0 W (open
ocean, see CONVENTIONS.md) with whole one-way streets, curved links and parallel links, and
every edge attribute of the road-graph conventions (geometry u -> v, length, travel_time,
speed_kph, highway, name, oneway, lanes, osmid). ``random_drive`` and ``sample_trace`` make
recorded drives on it with a known true path.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import networkx as nx
import numpy as np
import pyproj
from shapely import LineString, line_interpolate_point

CRS = "EPSG:32625"
CENTRE_LONLAT = (-38.0, 38.5)

_TO_XY = pyproj.Transformer.from_crs("EPSG:4326", CRS, always_xy=True)
_TO_LONLAT = pyproj.Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)

Edge = tuple[int, int, int]


def to_lonlat(xy: np.ndarray) -> np.ndarray:
    """Return (N, 2) lon, lat of projected (N, 2) x, y."""
    lon, lat = _TO_LONLAT.transform(xy[:, 0], xy[:, 1])
    return np.column_stack([lon, lat])


def to_xy(lonlat: np.ndarray) -> np.ndarray:
    """Return (N, 2) projected x, y of (N, 2) lon, lat."""
    x, y = _TO_XY.transform(lonlat[:, 0], lonlat[:, 1])
    return np.column_stack([x, y])


def _bulged(a: tuple[float, float], b: tuple[float, float], bulge: float, n: int = 9) -> LineString:
    """Return a line from a to b bowed sideways by ``bulge`` metres at its middle."""
    ax, ay = a
    bx, by = b
    dx, dy = bx - ax, by - ay
    length = math.hypot(dx, dy)
    nx_, ny_ = -dy / length, dx / length
    s = np.linspace(0.0, 1.0, n)
    off = bulge * np.sin(np.pi * s)
    return LineString(np.column_stack([ax + s * dx + off * nx_, ay + s * dy + off * ny_]))


def _road_class(k: int, n: int) -> tuple[str, float, int | None]:
    """Return highway, speed (km/h) and lanes of row or column k of an n x n grid."""
    if k == n // 2:
        return "secondary", 50.0, 2
    if k % 4 == 3:
        return "tertiary", 40.0, 1
    return "residential", 30.0, None


def _add_link(
    graph: nx.MultiDiGraph, a: int, b: int, geom: LineString, oneway: bool, attrs: dict[str, Any]
) -> None:
    """Add edge a -> b (and b -> a with the reversed geometry unless one-way)."""
    directions = [(a, b, geom)] if oneway else [(a, b, geom), (b, a, geom.reverse())]
    for u, v, g in directions:
        length = float(g.length)
        graph.add_edge(
            u,
            v,
            geometry=g,
            length=length,
            travel_time=length / (attrs["speed_kph"] / 3.6),
            oneway=oneway,
            reversed=False,
            **attrs,
        )


def grid_graph(
    n: int = 8,
    *,
    block_m: float = 120.0,
    seed: int = 0,
    curved_share: float = 0.12,
    parallel_share: float = 0.06,
) -> nx.MultiDiGraph:
    """Build an n x n grid of streets as a projected osmnx-style MultiDiGraph.

    Rows with ``r % 4 == 2`` and columns with ``c % 4 == 1`` are one-way (directions
    alternating), the middle row and column are 50 km/h secondary roads, row and column 3 mod 4
    are 40 km/h tertiary roads, the rest are 30 km/h residential streets. A seeded share of links
    is curved (bowed 14 m) and another share gets a parallel service link (key 1, bowed 35 m,
    20 km/h). Node ids start at 10,000 so they never equal positions.
    """
    rng = np.random.default_rng(seed)
    x0, y0 = _TO_XY.transform(*CENTRE_LONLAT)
    graph = nx.MultiDiGraph(crs=CRS, name=f"grid {n}x{n}")
    half = (n - 1) / 2.0

    def nid(r: int, c: int) -> int:
        return 10_000 + r * n + c

    xy = {
        nid(r, c): (x0 + (c - half) * block_m, y0 + (r - half) * block_m)
        for r in range(n)
        for c in range(n)
    }
    lon, lat = _TO_LONLAT.transform([p[0] for p in xy.values()], [p[1] for p in xy.values()])
    for (node, (x, y)), lo, la in zip(xy.items(), lon, lat, strict=True):
        graph.add_node(node, x=x, y=y, lon=float(lo), lat=float(la), street_count=0)
    links = [("row", r, nid(r, c), nid(r, c + 1)) for r in range(n) for c in range(n - 1)]
    links += [("col", c, nid(r, c), nid(r + 1, c)) for c in range(n) for r in range(n - 1)]
    osmid = 500_000
    for axis, k, a, b in links:
        osmid += 1
        highway, speed, lanes = _road_class(k, n)
        oneway = (axis == "row" and k % 4 == 2) or (axis == "col" and k % 4 == 1)
        if oneway and (k // 4) % 2 == 1:
            a, b = b, a
        name = f"Row {k + 1} Street" if axis == "row" else f"Column {k + 1} Avenue"
        curved = rng.random() < curved_share
        geom = _bulged(xy[a], xy[b], 14.0) if curved else LineString([xy[a], xy[b]])
        _add_link(
            graph,
            a,
            b,
            geom,
            oneway,
            {"highway": highway, "speed_kph": speed, "lanes": lanes, "name": name, "osmid": osmid},
        )
        if rng.random() < parallel_share:
            osmid += 1
            _add_link(
                graph,
                a,
                b,
                _bulged(xy[a], xy[b], -35.0),
                oneway,
                {
                    "highway": "service",
                    "speed_kph": 20.0,
                    "lanes": None,
                    "name": "",
                    "osmid": osmid,
                },
            )
    for node in graph.nodes:
        neighbours = set(graph.predecessors(node)) | set(graph.successors(node))
        graph.nodes[node]["street_count"] = len(neighbours)
    return graph


def path_length(graph: nx.MultiDiGraph, edges: Sequence[Edge]) -> float:
    """Return the summed ``length`` of edges."""
    return float(sum(graph.edges[e]["length"] for e in edges))


def random_drive(graph: nx.MultiDiGraph, length_m: float, rng: np.random.Generator) -> list[Edge]:
    """Return a random drive of about ``length_m`` along out-edges, never turning back."""
    nodes = list(graph.nodes)
    u = nodes[int(rng.integers(len(nodes)))]
    prev = None
    edges: list[Edge] = []
    total = 0.0
    while total < length_m:
        options = [(a, b, k) for a, b, k in graph.out_edges(u, keys=True) if b != prev]
        if not options:
            options = list(graph.out_edges(u, keys=True))
        e = options[int(rng.integers(len(options)))]
        edges.append(e)
        total += graph.edges[e]["length"]
        prev, u = e[0], e[1]
    return edges


def sample_trace(
    graph: nx.MultiDiGraph,
    edges: Sequence[Edge],
    *,
    spacing_m: float,
    sigma_m: float,
    rng: np.random.Generator,
) -> np.ndarray:
    """Return lon, lat fixes every ``spacing_m`` along the drive with Gaussian noise (m)."""
    coords: list[tuple[float, float]] = []
    for e in edges:
        part = list(graph.edges[e]["geometry"].coords)
        coords.extend(part if not coords else part[1:])
    line = LineString(coords)
    s = np.append(np.arange(0.0, line.length, spacing_m), line.length)
    pts = line_interpolate_point(line, s)
    xy = np.array([[p.x, p.y] for p in pts])
    xy += rng.normal(0.0, sigma_m, size=xy.shape)
    return to_lonlat(xy)
