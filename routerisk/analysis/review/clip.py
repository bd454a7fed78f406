"""Clip the network's edges to an area polygon (projected CRS)."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import shapely
from shapely import STRtree
from shapely.geometry.base import BaseGeometry

from routerisk.analysis.review.basis import MIN_CLIP_M


def _lines_only(geom: BaseGeometry) -> BaseGeometry:
    """Return the linear parts of an intersection (points where it touches are dropped)."""
    if geom.geom_type in ("LineString", "MultiLineString"):
        return geom
    parts = [g for g in shapely.get_parts(geom) if g.geom_type in ("LineString", "MultiLineString")]
    if len(parts) == 1:
        return parts[0]
    return shapely.multilinestrings([ln for g in parts for ln in shapely.get_parts(g)])


def clip_edges(
    edges: gpd.GeoDataFrame, geometry: BaseGeometry, *, tree: STRtree | None = None
) -> gpd.GeoDataFrame:
    """Return the edges that run inside ``geometry``, with their geometry clipped to it.

    Adds ``clip_m`` (edge ``length`` x share of its geometry inside the polygon) and
    ``clip_share``. Edges that only touch the boundary are left out.

    Parameters
    ----------
    edges
        Tagged edges in the projected CRS (index ``u, v, key``).
    geometry
        The area polygon in the same CRS.
    tree
        An STRtree of ``edges.geometry`` to reuse across areas.
    """
    geoms = edges.geometry.to_numpy()
    tree = tree if tree is not None else STRtree(geoms)
    idx = np.sort(tree.query(geometry, predicate="intersects"))
    sub = edges.iloc[idx]
    shapely.prepare(geometry)
    clipped = shapely.intersection(sub.geometry.to_numpy(), geometry)
    full = shapely.length(sub.geometry.to_numpy())
    part = shapely.length(clipped)
    share = np.divide(part, full, out=np.zeros_like(part), where=full > 0)
    clip_m = share * sub["length"].to_numpy(dtype=float)
    keep = part > MIN_CLIP_M
    out = sub.loc[keep].copy()
    out["clip_share"] = share[keep]
    out["clip_m"] = clip_m[keep]
    out = out.set_geometry(
        gpd.GeoSeries([_lines_only(g) for g in clipped[keep]], index=out.index, crs=edges.crs)
    )
    return out
