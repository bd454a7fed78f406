"""Choose per route between joining its waypoints and matching it as a recorded trace.

:func:`is_dense_trace` tells a dense recorded trace (matched, :mod:`routerisk.matching.hmm`)
from sparse planned waypoints (joined, :mod:`routerisk.matching.join`); :func:`to_edges` and
:func:`to_edges_many` pick the one that fits each route.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Literal

import numpy as np

from routerisk.io.routes import PlannedRoute
from routerisk.matching.common import (
    DENSE_INTERVAL_S,
    DENSE_SPACING_M,
    MAX_SNAP_M,
    SIGMA_Z_M,
    MatchedRoute,
)
from routerisk.matching.hmm import match_many
from routerisk.matching.index import RoadIndex
from routerisk.matching.join import join_many


def _median_spacing_m(route: PlannedRoute) -> float:
    ll = np.radians(route.lonlat)
    lat = 0.5 * (ll[1:, 1] + ll[:-1, 1])
    dx = np.diff(ll[:, 0]) * np.cos(lat)
    dy = np.diff(ll[:, 1])
    return float(np.median(np.hypot(dx, dy))) * 6_371_008.8


def is_dense_trace(
    route: PlannedRoute,
    *,
    spacing_m: float = DENSE_SPACING_M,
    interval_s: float = DENSE_INTERVAL_S,
) -> bool:
    """Tell whether a route is a dense trace (to match) rather than sparse waypoints (to join).

    The rule: a route of at least 3 points is a trace when the median distance between
    consecutive points is below ``spacing_m`` (60 m), or when it has times whose median step
    is at most ``interval_s`` (10 s, covering the 1-10 s of GPS loggers). Anything else is a
    list of waypoints, joined by fastest paths.
    """
    if len(route) < 3:
        return False
    if _median_spacing_m(route) < spacing_m:
        return True
    if route.times is not None:
        steps = np.array(
            [
                (b - a).total_seconds()
                for a, b in zip(route.times[:-1], route.times[1:], strict=True)
            ]
        )
        med = float(np.median(steps))
        if 0.0 < med <= interval_s:
            return True
    return False


def to_edges(
    index: RoadIndex,
    route: PlannedRoute,
    *,
    max_snap_m: float = MAX_SNAP_M,
    sigma_z: float | Literal["estimate"] = SIGMA_Z_M,
    beta: float | Literal["estimate"] | None = None,
    search_radius_m: float | None = None,
) -> MatchedRoute:
    """Return the edges a route drives: match a dense trace, join sparse waypoints.

    The choice follows :func:`is_dense_trace`: :func:`match_trace` for traces (median spacing
    below 60 m, or time steps of at most 10 s), :func:`join_waypoints` otherwise.
    """
    return to_edges_many(
        index,
        [route],
        max_snap_m=max_snap_m,
        sigma_z=sigma_z,
        beta=beta,
        search_radius_m=search_radius_m,
    )[0]


def to_edges_many(
    index: RoadIndex,
    routes: Sequence[PlannedRoute],
    *,
    max_snap_m: float = MAX_SNAP_M,
    sigma_z: float | Literal["estimate"] = SIGMA_Z_M,
    beta: float | Literal["estimate"] | None = None,
    search_radius_m: float | None = None,
) -> list[MatchedRoute]:
    """Return the edges of many routes at once (in order); see :func:`to_edges`."""
    dense = [is_dense_trace(r) for r in routes]
    traces = [r for r, d in zip(routes, dense, strict=True) if d]
    plans = [r for r, d in zip(routes, dense, strict=True) if not d]
    matched = iter(
        match_many(index, traces, sigma_z=sigma_z, beta=beta, search_radius_m=search_radius_m)
        if traces
        else []
    )
    joined = iter(join_many(index, plans, max_snap_m=max_snap_m) if plans else [])
    return [next(matched) if d else next(joined) for d in dense]
