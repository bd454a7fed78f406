"""The hot spots of an area (segments with the most exposure, and why) and its clusters.

A cluster joins adjacent streets of the high bands (sharing a node inside the area).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

import geopandas as gpd
import networkx as nx
import numpy as np
import shapely

from routerisk.analysis.review.basis import _jsonable, _names_by_km, _r
from routerisk.errors import OptionError
from routerisk.io.areas import Area
from routerisk.profile import Profile

if TYPE_CHECKING:  # pragma: no cover - typing only
    from routerisk.analysis.review.areas_summary import _Context


def _high_bands(profile: Profile, high_bands: Sequence[str] | None) -> list[str]:
    names = [b.name for b in profile.bands]
    if high_bands is None:
        return names[max(1, len(names) // 2) :]
    unknown = [b for b in high_bands if b not in names]
    if unknown:
        raise OptionError(
            f"unknown band {unknown[0]!r}; the profile's bands: {', '.join(names)}",
            field="--high-from",
        )
    return list(high_bands)


def high_bands_from(profile: Profile, band: str) -> list[str]:
    """Return ``band`` and every band above it."""
    names = [b.name for b in profile.bands]
    if band not in names:
        raise OptionError(
            f"unknown band {band!r}; the profile's bands: {', '.join(names)}", field="--high-from"
        )
    return names[names.index(band) :]


def _clusters(
    ctx: _Context,
    clip: gpd.GeoDataFrame,
    area: Area,
    high: Sequence[str],
    skey: list[tuple[Any, ...]],
    exposure: np.ndarray,
) -> list[dict[str, Any]]:
    """Group adjacent high-band edges (sharing a node inside the area) into clusters."""
    hi = np.flatnonzero(clip["band"].isin(list(high)).to_numpy())
    if len(hi) == 0:
        return []
    u = clip.index.get_level_values(0).to_numpy()
    v = clip.index.get_level_values(1).to_numpy()
    ends = np.unique(np.concatenate([u[hi], v[hi]]))
    nodes = ctx.net.nodes
    xy = nodes.loc[ends, ["x", "y"]].to_numpy(dtype=float)
    inside = dict(
        zip(ends.tolist(), shapely.covers(area.geometry, shapely.points(xy)), strict=True)
    )
    G = nx.Graph()
    for j in hi.tolist():
        a = u[j] if inside[u[j]] else ("outside", j, 0)
        b = v[j] if inside[v[j]] else ("outside", j, 1)
        G.add_edge(a, b)
    label = {}
    for ci, comp in enumerate(nx.connected_components(G)):
        for nd in comp:
            label[nd] = ci
    groups: dict[int, list[int]] = {}
    for j in hi.tolist():
        a = u[j] if inside[u[j]] else ("outside", j, 0)
        groups.setdefault(label[a], []).append(j)
    km = clip["clip_m"].to_numpy(dtype=float) / 1000.0
    names = clip["name"].fillna("").astype(str).to_numpy()
    bands = clip["band"].astype(str).to_numpy()
    order = {b.name: i for i, b in enumerate(ctx.net.profile.bands)}
    out = []
    for rows in groups.values():
        ra = np.array(rows)
        streets = {skey[j]: j for j in rows}
        out.append(
            {
                "km": _r(km[ra].sum()),
                "centreline_km": _r(sum(km[j] for j in streets.values())),
                "segments": len(streets),
                "exposure": _r(exposure[ra].sum()),
                "top_band": max(set(bands[ra].tolist()), key=lambda b: order.get(b, -1)),
                "streets": _names_by_km(names[ra], km[ra]),
                "edges": [
                    [_jsonable(u[j]), _jsonable(v[j])]
                    for j in sorted(rows, key=lambda r: (str(u[r]), str(v[r])))
                ],
            }
        )
    out.sort(key=lambda c: (-c["km"], -c["exposure"], c["streets"][:1]))
    for i, c in enumerate(out, start=1):
        c["cluster"] = i
    return out


def _hotspots(
    ctx: _Context,
    clip: gpd.GeoDataFrame,
    skey: list[tuple[Any, ...]],
    exposure: np.ndarray,
    top: int,
) -> list[dict[str, Any]]:
    """Return the top street segments by exposure (exposure per km x clipped km)."""
    prof = ctx.net.profile
    u = clip.index.get_level_values(0).to_numpy()
    v = clip.index.get_level_values(1).to_numpy()
    k = clip.index.get_level_values(2).to_numpy()
    first: dict[tuple[Any, ...], int] = {}
    count: dict[tuple[Any, ...], int] = {}
    for j, key in enumerate(skey):
        count[key] = count.get(key, 0) + 1
        if key not in first or exposure[j] > exposure[first[key]]:
            first[key] = j
    names = clip["name"].fillna("").astype(str).to_numpy()
    ranked = sorted(
        first.items(), key=lambda t: (-exposure[t[1]], names[t[1]], str(u[t[1]]), str(v[t[1]]))
    )
    per_km = clip["exposure_km"].to_numpy(dtype=float)
    out = []
    for key, j in ranked[: max(0, int(top))]:
        reasons = []
        row = clip.iloc[j]
        parts = [(c, c.weight * float(row[f"exp_{c.name}"])) for c in prof.categories]
        for c, val in sorted(parts, key=lambda t: -t[1]):
            if val <= 0 or len(reasons) == 3:
                continue
            near = ""
            if c.name in ctx.source_trees:
                tree, _, src_names = ctx.source_trees[c.name]
                near = str(src_names[int(tree.nearest(row.geometry))])
            reasons.append(
                {
                    "category": c.name,
                    "label": c.label,
                    "share": _r(val / per_km[j]) if per_km[j] > 0 else 0.0,
                    "near": near,
                }
            )
        out.append(
            {
                "u": _jsonable(u[j]),
                "v": _jsonable(v[j]),
                "key": _jsonable(k[j]),
                "street": names[j],
                "highway": str(row["highway"]),
                "band": str(row["band"]),
                "km": _r(row["clip_m"] / 1000.0),
                "exposure_km": _r(per_km[j]),
                "exposure": _r(exposure[j]),
                "directions": count[key],
                "edge_crossings": int(row["crossings"]),
                "reasons": reasons,
            }
        )
    return out
