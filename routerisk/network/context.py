"""The light background of maps: streets, water, parks and buildings from the same extract.

``build`` saves these as the ``context`` layer of ``network.gpkg`` (projected, simplified to
about a metre). A map draws the part inside its view, simplified once more to a few metres, so
a page stays small. A network folder written before this layer existed has none; its maps draw
the streets from the ``edges`` layer instead.
"""

from __future__ import annotations

from typing import Any

import geopandas as gpd
import numpy as np
import shapely
from shapely.geometry import LineString, Polygon

#: Kinds drawn, bottom first, and whether a closed way of that kind is an area.
KINDS = ("park", "water", "building", "street")
_AREA_KINDS = {"park", "water", "building"}
#: Simplification at build (metres, projected); the map simplifies further.
BUILD_TOLERANCE_M = 1.0
COLUMNS = ["kind", "osmid", "name", "highway", "geometry"]


def empty(crs: Any) -> gpd.GeoDataFrame:
    """Return an empty context frame."""
    return gpd.GeoDataFrame({c: [] for c in COLUMNS[:-1]}, geometry=[], crs=crs)


def context_from_raw(raw: Any, *, crs: Any) -> gpd.GeoDataFrame:
    """Return the background ways of one OSM read, projected to ``crs`` and simplified.

    Closed ways of area kinds (water, park, building) become polygons; everything else
    (streets, rivers drawn as lines, clipped areas) stays a line. Rows are sorted by kind and
    OSM id, so a build is deterministic.
    """
    rows: list[tuple[str, int, str, str]] = []
    geoms = []
    for kind, osmid, name, highway, runs in raw.context:
        for run in runs:
            if len(run) < 2:
                continue
            closed = len(run) >= 4 and np.array_equal(run[0], run[-1])
            geom = Polygon(run) if kind in _AREA_KINDS and closed else LineString(run)
            rows.append((kind, int(osmid), name or "", highway or ""))
            geoms.append(geom)
    if not rows:
        return empty(crs)
    gdf = gpd.GeoDataFrame(rows, columns=COLUMNS[:-1], geometry=geoms, crs="EPSG:4326")
    gdf = gdf.to_crs(crs)
    gdf["geometry"] = shapely.simplify(
        gdf.geometry.to_numpy(), BUILD_TOLERANCE_M, preserve_topology=True
    )
    gdf = gdf[~gdf.geometry.is_empty & gdf.geometry.is_valid]
    order = np.lexsort((gdf["osmid"].to_numpy(), [KINDS.index(k) for k in gdf["kind"]]))
    return gdf.iloc[order].reset_index(drop=True)


def from_edges(edges: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    """Return the streets of a network's edges as context (for folders without the layer)."""
    e = edges.reset_index()
    key = np.where(
        e["u"].to_numpy() < e["v"].to_numpy(),
        e["u"].astype(str) + "-" + e["v"].astype(str),
        e["v"].astype(str) + "-" + e["u"].astype(str),
    )
    e = e.loc[~_repeated(key)]
    return gpd.GeoDataFrame(
        {
            "kind": "street",
            "osmid": 0,
            "name": e["name"].fillna("").astype(str).to_numpy(),
            "highway": e["highway"].astype(str).to_numpy(),
        },
        geometry=e.geometry.to_numpy(),
        crs=edges.crs,
    )


def _repeated(values: np.ndarray) -> np.ndarray:
    """Return a mask of values seen earlier in ``values``."""
    _, first = np.unique(values, return_index=True)
    mask = np.ones(len(values), dtype=bool)
    mask[first] = False
    return mask


def for_view(
    net: Any,
    bounds: tuple[float, float, float, float],
    *,
    pad: float = 0.15,
    tolerance_m: float = 3.0,
) -> gpd.GeoDataFrame:
    """Return the context inside ``bounds`` (west, south, east, north degrees), in EPSG:4326.

    The box is widened by ``pad`` of its size on each side; shapes are clipped to it,
    simplified to ``tolerance_m`` and rounded to 1e-6 degrees (about 0.1 m).
    """
    ctx = getattr(net, "context", None)
    if ctx is None:
        ctx = from_edges(net.edges)
    if len(ctx) == 0:
        return ctx.to_crs("EPSG:4326")
    w, s, e, n = bounds
    dx, dy = (e - w) * pad + 2e-4, (n - s) * pad + 2e-4
    box = gpd.GeoSeries([shapely.box(w - dx, s - dy, e + dx, n + dy)], crs="EPSG:4326")
    box_p = box.to_crs(ctx.crs).iloc[0]
    part = ctx.iloc[ctx.sindex.query(box_p, predicate="intersects")]
    part = part.iloc[np.argsort(part.index.to_numpy(), kind="stable")].copy()
    geom = shapely.intersection(part.geometry.to_numpy(), box_p)
    geom = shapely.simplify(geom, tolerance_m, preserve_topology=True)
    part["geometry"] = geom
    part = part[~part.geometry.is_empty]
    part = part.to_crs("EPSG:4326")
    part["geometry"] = shapely.set_precision(part.geometry.to_numpy(), 1e-6)
    return part[~part.geometry.is_empty]
