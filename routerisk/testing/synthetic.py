"""Invent street networks of any size, with exposure sources, for benchmarks and scale tests.

The invented city is a perturbed grid: jittered and gently warped intersections, block sides of
100 to 150 m, some missing links (a few left as dead-end stubs), a few block diagonals and
shape nodes on curved streets. Collectors (tertiary) run every 4 to 6 blocks, arterials
(secondary or primary, some as one-way pairs) every 10 to 15 blocks. The extent grows with the
square root of the requested edge count; the grid size is refined until the number of directed
drivable edges after topology simplification (drivable ways only, then osmnx's endpoint rules)
is within about 2 % of the request.

Exposure sources are placed at plausible densities: schools and kindergartens, campuses,
retail strips with shops along arterials, commercial blocks, bus stops about every 400 m along
arterials, parks and playgrounds, hospitals, and crossing nodes at arterial intersections and
around schools. Footways and driveways are added for the drive filter to drop.

All names are made up from invented syllables or numbers. The default centre lies in open ocean
(30.0 N, 45.0 W, UTM zone 23N), far from any land. The same seed and size give a byte-identical
file (no timestamps or metadata are written).
"""

from __future__ import annotations

import logging
import math
from pathlib import Path
from typing import Any

import numpy as np

from routerisk.errors import OptionError
from routerisk.io.atomic import check_target
from routerisk.testing import sources as _sources
from routerisk.testing import streets as _streets
from routerisk.testing.city import City, plan_blocks
from routerisk.testing.grid import choose_layout
from routerisk.testing.osm_writer import LonLat, utm_epsg, write_osm

__all__ = [
    "DEFAULT_CENTRE",
    "DRIVE_HIGHWAYS",
    "MAX_EDGES",
    "MIN_EDGES",
    "SOURCE_CATEGORIES",
    "utm_epsg",
    "write_city",
]

log = logging.getLogger(__name__)

DEFAULT_CENTRE = (30.0, -45.0)
"""Default city centre (lat, lon): open ocean, UTM zone 23N."""

MIN_EDGES = 500
MAX_EDGES = 5_000_000

DRIVE_HIGHWAYS = ("primary", "secondary", "tertiary", "residential", "living_street")
"""Highway values of the drivable ways this generator writes."""

SOURCE_CATEGORIES = ("school", "campus", "retail", "commercial", "transit", "park", "hospital")


def _validate(
    path: str | Path, edges: int, seed: int, centre: tuple[float, float]
) -> tuple[Path, str]:
    p = Path(path)
    name = p.name.lower()
    if name.endswith(".osm.pbf") or name.endswith(".pbf"):
        fmt = "pbf"
    elif name.endswith(".osm"):
        fmt = "osm"
    else:
        raise OptionError("the output must end in .osm.pbf or .osm", path=p, field="path")
    if isinstance(edges, bool) or not isinstance(edges, int | np.integer):
        raise OptionError(f"must be an integer, got {edges!r}", field="edges")
    if not MIN_EDGES <= edges <= MAX_EDGES:
        raise OptionError(
            f"must be between {MIN_EDGES} and {MAX_EDGES}, got {edges}", field="edges"
        )
    if isinstance(seed, bool) or not isinstance(seed, int | np.integer) or seed < 0:
        raise OptionError(f"must be a non-negative integer, got {seed!r}", field="seed")
    try:
        lat, lon = (float(v) for v in centre)
    except (TypeError, ValueError):
        raise OptionError(f"must be (lat, lon), got {centre!r}", field="centre") from None
    if not (math.isfinite(lat) and math.isfinite(lon) and -80 <= lat <= 80 and -180 <= lon < 180):
        raise OptionError(
            f"must be a finite (lat, lon) with |lat| <= 80, got {centre!r}", field="centre"
        )
    return p, fmt


def write_city(
    path: str | Path,
    *,
    edges: int,
    seed: int = 0,
    centre: tuple[float, float] = DEFAULT_CENTRE,
    force: bool = True,
) -> dict[str, Any]:
    """Write an invented city of about ``edges`` directed drivable edges as OSM data.

    Parameters
    ----------
    path
        Output file; ``.osm.pbf`` (or ``.pbf``) writes PBF, ``.osm`` writes OSM XML. Written
        atomically: a half-written file never sits at ``path``.
    edges
        Requested number of directed drivable edges after topology simplification
        (between 500 and 5,000,000); the result is usually within 2 % of it.
    seed
        Seed of every random choice; the same seed and size give a byte-identical file.
    centre
        (lat, lon) of the city centre; the default lies in open ocean.
    force
        Replace an existing ``path``; when False an existing file raises an error.

    Returns
    -------
    dict
        Summary: ``nodes``, ``ways``, ``drive_edges`` (exact count of directed drivable
        edges after simplification), ``sources`` (per exposure category), ``features``
        (finer counts), ``grid``, ``extent_m``, ``area_km2``, ``crs``, ``bytes`` and the inputs.

    Raises
    ------
    OptionError
        An option is out of range or the file name has an unknown extension.
    OutputExistsError
        ``path`` exists and ``force`` is False.
    """
    target, fmt = _validate(path, edges, seed, centre)
    target = check_target(target, force=force)
    edges, seed = int(edges), int(seed)
    lat0, lon0 = float(centre[0]), float(centre[1])
    lay = choose_layout(edges, seed)
    city = City(lay, seed)
    plan_blocks(city)
    _streets.segment_flags(city)
    _streets.streets(city)
    _sources.sources(city)

    epsg = utm_epsg(lat0, lon0)
    angle = math.radians(float(np.random.default_rng([seed, lay.nx, lay.ny, 3]).uniform(-10, 10)))
    lonlat = LonLat(centre=(lat0, lon0), angle=angle, epsg=epsg)
    n_nodes = write_osm(target, fmt, city, lonlat)

    c = city.out.counts
    sources = {
        "school": c.get("school", 0) + c.get("kindergarten", 0),
        "campus": c.get("university", 0) + c.get("college", 0),
        "retail": c.get("retail", 0) + c.get("shop", 0),
        "commercial": c.get("commercial", 0),
        "transit": c.get("bus_stop", 0),
        "park": c.get("park", 0) + c.get("playground", 0),
        "hospital": c.get("hospital", 0),
    }
    features = dict(sorted(c.items()))
    features["traffic_signals"] = len(city.grid_tags)
    width = float(lay.gx[-1] - lay.gx[0])
    height = float(lay.gy[-1] - lay.gy[0])
    summary = {
        "path": str(target),
        "format": "pbf" if fmt == "pbf" else "xml",
        "edges_requested": edges,
        "drive_edges": lay.drive_edges,
        "seed": seed,
        "centre": [lat0, lon0],
        "crs": f"EPSG:{epsg}",
        "grid": [lay.nx, lay.ny],
        "extent_m": [round(width, 1), round(height, 1)],
        "area_km2": round(city.area_km2, 3),
        "nodes": n_nodes,
        "ways": len(city.out.wtags),
        "sources": sources,
        "features": features,
        "bytes": target.stat().st_size,
    }
    log.info(
        "write_city wrote %s: %d nodes, %d ways, %d drivable edges (requested %d)",
        target, summary["nodes"], summary["ways"], lay.drive_edges, edges,
    )  # fmt: skip
    return summary
