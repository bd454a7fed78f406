"""The figures of one area: lengths, influence, sources, crossings, speeds, exposure, closures.

:class:`_Context` holds what every area of one review shares (the network, its indexes, the
hourly multipliers and rules); :func:`_review_area` computes one area's figures.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import geopandas as gpd
import numpy as np
import shapely
from shapely import STRtree

from routerisk.analysis.review.basis import (
    HOURS_PER_WEEK,
    KPH_PER_MPH,
    SPEED_BANDS_MPH,
    _r,
    _street_key,
)
from routerisk.analysis.review.clip import clip_edges
from routerisk.analysis.review.connectivity import _closed_matrix, connectivity
from routerisk.analysis.review.hotspots import _clusters, _high_bands, _hotspots
from routerisk.analysis.review.whatif import minute_label
from routerisk.analysis.scoring import rules_in_force
from routerisk.errors import InputFileError
from routerisk.io.areas import Area
from routerisk.network.tagging import CROSSING_SNAP_M
from routerisk.profile import MINUTES_PER_WEEK
from routerisk.render import report

if TYPE_CHECKING:  # pragma: no cover - typing only
    from routerisk.network.folder import Network


@dataclass
class _Context:
    """What every area of one review shares: the network, its profile, indexes."""

    net: Network
    tree: STRtree
    hourly_mult: np.ndarray  # (168, n_categories) mean multiplier in each hour
    force_hour: np.ndarray  # (n_rules, 168) rule in force at some minute of the hour
    source_trees: dict[str, tuple[STRtree, np.ndarray, np.ndarray]]
    clip: Callable[..., gpd.GeoDataFrame]  # clip_edges, or a drop-in that clips by tiles

    @classmethod
    def of(cls, net: Network, clip: Callable[..., gpd.GeoDataFrame] | None = None) -> _Context:
        prof = net.profile
        mult = prof.multipliers(np.arange(MINUTES_PER_WEEK))
        hourly = mult.reshape(HOURS_PER_WEEK, 60, -1).mean(axis=1)
        force = np.array(
            [r.by_minute.reshape(HOURS_PER_WEEK, 60).any(axis=1) for r in prof.rules], dtype=bool
        ).reshape(len(prof.rules), HOURS_PER_WEEK)
        trees = {}
        for c in prof.categories:
            part = net.sources[net.sources["category"] == c.name]
            if len(part):
                g = part.geometry.to_numpy()
                trees[c.name] = (STRtree(g), g, part["name"].fillna("").astype(str).to_numpy())
        return cls(
            net, STRtree(net.edges.geometry.to_numpy()), hourly, force, trees, clip or clip_edges
        )


def _review_area(
    ctx: _Context,
    area: Area,
    *,
    at: int | None = None,
    top: int = 10,
    high_bands: Sequence[str] | None = None,
) -> tuple[dict[str, Any], gpd.GeoDataFrame]:
    """Return the figures of one area and its clipped edges.

    Raises
    ------
    InputFileError
        No street of the network runs inside the area.
    """
    net = ctx.net
    prof = net.profile
    clip = ctx.clip(net.edges, area.geometry, tree=ctx.tree)
    if len(clip) == 0:
        raise InputFileError(
            f"area {area.name!r} lies entirely off the road network",
            path=area.source,
            field=area.field,
        )
    u = clip.index.get_level_values(0).to_numpy()
    v = clip.index.get_level_values(1).to_numpy()
    km = clip["clip_m"].to_numpy(dtype=float) / 1000.0
    skey = _street_key(u, v, clip["length"].to_numpy(dtype=float))
    one_per_street = np.zeros(len(clip), dtype=bool)
    one_per_street[list({key: j for j, key in enumerate(skey)}.values())] = True
    network_km = float(km.sum())
    centreline_km = float(km[one_per_street].sum())

    bands = clip["band"].astype(str).to_numpy()
    km_by_band = {b.name: _r(km[bands == b.name].sum()) for b in prof.bands}
    cl_by_band = {b.name: _r(km[(bands == b.name) & one_per_street].sum()) for b in prof.bands}

    infl = {}
    infl_share = {}
    for c in prof.categories:
        val = float((km * clip[f"infl_{c.name}"].to_numpy(dtype=float)).sum())
        infl[c.name] = _r(val)
        infl_share[c.name] = _r(val / network_km)

    srcs = net.sources
    sources_near = {}
    sources_inside = {}
    for c in prof.categories:
        g = srcs.geometry[srcs["category"] == c.name].to_numpy()
        sources_near[c.name] = (
            int(shapely.dwithin(g, area.geometry, c.radius_m).sum()) if len(g) else 0
        )
        sources_inside[c.name] = int(shapely.intersects(g, area.geometry).sum()) if len(g) else 0

    n_cross = 0
    if len(net.crossings):
        pts = net.crossings.geometry.to_numpy()
        inside = pts[shapely.intersects(pts, area.geometry)]
        if len(inside):
            line_tree = STRtree(clip.geometry.to_numpy())
            pi, _ = line_tree.query(inside, predicate="dwithin", distance=CROSSING_SNAP_M)
            n_cross = len(np.unique(pi))

    mph = np.round(clip["speed_kph"].to_numpy(dtype=float) / KPH_PER_MPH, 6)
    speed_km = {}
    lower = -math.inf
    for upper, label, _ in SPEED_BANDS_MPH:
        sel = (mph > lower) & (mph <= upper)
        speed_km[label] = _r(km[sel].sum())
        lower = upper

    weights = np.array([c.weight for c in prof.categories])
    exp_mat = clip[[f"exp_{c.name}" for c in prof.categories]].to_numpy(dtype=float)
    per_km = clip["exposure_km"].to_numpy(dtype=float)
    exposure = per_km * km
    fixed = float((km * (per_km - exp_mat @ weights)).sum())  # baseline and crossings
    by_cat = (km[:, None] * exp_mat * weights[None, :]).sum(axis=0)
    exposure_by_hour = fixed + ctx.hourly_mult @ by_cat
    if prof.baseline_time_profile or prof.crossing_time_profile:
        # baseline and crossings follow their own time profiles: the hour's mean multiplier
        base_km = float((km * clip["baseline"].to_numpy(dtype=float)).sum())
        base_h, cross_h = (
            np.asarray(a).reshape(HOURS_PER_WEEK, 60).mean(axis=1)
            for a in prof.street_multipliers(np.arange(MINUTES_PER_WEEK))
        )
        exposure_by_hour = base_km * base_h + (fixed - base_km) * cross_h + ctx.hourly_mult @ by_cat

    cover, closed = _closed_matrix(clip, prof, ctx.force_hour)
    closed_by_hour = km @ closed
    by_rule = {}
    rules_out = []
    for i, rule in enumerate(prof.rules):
        per_hour = km @ (cover[:, [i]] & ctx.force_hour[i][None, :])
        by_rule[rule.name] = [_r(x) for x in per_hour]
        rules_out.append(
            {
                "rule": rule.name,
                "covers_km": _r(km[cover[:, i]].sum()),
                "hours_in_force": int(ctx.force_hour[i].sum()),
                "closed_km_hours": _r(per_hour.sum(), 3),
            }
        )
    peak = int(np.argmax(closed_by_hour)) if len(closed_by_hour) else 0
    conn = {
        "peak": {
            "hour": peak,
            "label": report.HOUR_LABELS[peak],
            **connectivity(clip, closed[:, peak]),
        },
        "none_closed": connectivity(clip, np.zeros(len(clip), dtype=bool)),
    }
    if at is not None:
        now = rules_in_force(clip, prof, at).any(axis=1)
        conn["at"] = {"minute": int(at), "label": minute_label(at), **connectivity(clip, now)}

    high = _high_bands(prof, high_bands)
    out = {
        "name": area.name,
        "feature": area.index,
        "area_km2": _r(area.geometry.area / 1e6),
        "network_km": _r(network_km),
        "centreline_km": _r(centreline_km),
        "edges": int(len(clip)),
        "km_by_band": km_by_band,
        "centreline_km_by_band": cl_by_band,
        "km_in_influence": infl,
        "share_in_influence": infl_share,
        "sources": sources_near,
        "sources_inside": sources_inside,
        "crossings": n_cross,
        "crossings_per_km": _r(n_cross / centreline_km) if centreline_km > 0 else 0.0,
        "km_by_speed": speed_km,
        "exposure": _r(exposure.sum()),
        "exposure_per_km": _r(exposure.sum() / network_km),
        "exposure_by_hour": [_r(x) for x in exposure_by_hour],
        "high_bands": list(high),
        "km_in_high_bands": _r(km[np.isin(bands, list(high))].sum()),
        "hotspots": _hotspots(ctx, clip, skey, exposure, top),
        "clusters": _clusters(ctx, clip, area, high, skey, exposure),
        "closed_km_by_hour": [_r(x) for x in closed_by_hour],
        "closed_km_by_rule": by_rule,
        "closed_km_hours": _r(closed_by_hour.sum(), 3),
        "closed_peak": {
            "hour": peak,
            "label": report.HOUR_LABELS[peak],
            "km": _r(closed_by_hour[peak]),
        },
        "rules": rules_out,
        "allowed_parts": conn["peak"]["parts"],
        "connectivity": conn,
    }
    clip = clip.assign(_exposure=exposure)
    return out, clip
