"""Join planned waypoints by the fastest path.

:func:`join_waypoints` snaps each planned waypoint to the nearest edge position (the middle of
an edge is fine: the edge is split at the projection) and joins consecutive waypoints by the
fastest path (travel time, Dijkstra on the CSR matrix); :func:`join_many` does it for many
routes at once (one candidate search, one Dijkstra per distinct source node, one decoding).
"""

from __future__ import annotations

import logging
import math
from collections.abc import Sequence

import numpy as np

from routerisk.errors import OptionError, RouteInputError
from routerisk.io.routes import PlannedRoute
from routerisk.matching.common import _EPS, _TIE_M, MAX_SNAP_M, MatchedRoute
from routerisk.matching.decode import (
    _assemble,
    _groups,
    _layer_bounds,
    _layers,
    _off_network,
    _pair_costs,
    _pairs,
    _stack,
    _viterbi,
)
from routerisk.matching.index import RoadIndex

# The package's logger, so that log lines name ``routerisk.matching`` as before the split.
logger = logging.getLogger(__package__)


def _check_snap(value: float) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        v = math.nan
    if not v > 0 or not math.isfinite(v):
        raise OptionError(
            f"max_snap_m must be a positive number, got {value!r}", field="max_snap_m"
        )
    return v


def join_waypoints(
    index: RoadIndex, route: PlannedRoute, *, max_snap_m: float = MAX_SNAP_M
) -> MatchedRoute:
    """Join a route's waypoints by the fastest paths between them.

    Each waypoint is snapped to the nearest edge position (every edge within 2 m of the
    nearest counts, e.g. both directions of a two-way street, and the routing picks the
    cheapest), the edge is split at the projection, and consecutive waypoints are joined by the
    least-travel-time path. All choices are made jointly, so a waypoint on a two-way street is
    passed in the direction that makes the whole route fastest. The paths are exact: bounded
    Dijkstra runs are widened until the chain found is provably the fastest.

    Parameters
    ----------
    index
        Index of the road graph.
    route
        The planned route (its points are waypoints, all visited in order).
    max_snap_m
        Farthest a waypoint may lie from a drivable edge.

    Returns
    -------
    MatchedRoute
        With ``method="join"``.

    Raises
    ------
    RouteInputError
        A waypoint is farther than ``max_snap_m`` from every edge (naming the route, the point
        and its distance), latitude and longitude look swapped, or no drivable path joins two
        consecutive waypoints.
    """
    return join_many(index, [route], max_snap_m=max_snap_m)[0]


def join_many(
    index: RoadIndex, routes: Sequence[PlannedRoute], *, max_snap_m: float = MAX_SNAP_M
) -> list[MatchedRoute]:
    """Join the waypoints of many routes at once; see :func:`join_waypoints`.

    Returns one :class:`MatchedRoute` per route, in order; the first route in error raises.
    """
    snap = _check_snap(max_snap_m)
    out: list[MatchedRoute] = []
    for group in _groups(routes):
        out.extend(_join_group(index, [routes[i] for i in group], snap))
    return out


def _join_group(
    index: RoadIndex, routes: list[PlannedRoute], max_snap_m: float, attempt: int = 0
) -> list[MatchedRoute]:
    xy, offsets = _stack(index, routes)
    n_pts = len(xy)
    point, edge, dist, frac = index.candidates(xy, max_snap_m)
    have = np.bincount(point, minlength=n_pts) > 0
    if not have.all():
        r = int(np.searchsorted(offsets, int(np.flatnonzero(~have)[0]), side="right") - 1)
        lo, hi = offsets[r], offsets[r + 1]
        raise _off_network(index, routes[r], xy[lo:hi], np.flatnonzero(~have[lo:hi]), max_snap_m)
    head = np.concatenate([[True], point[1:] != point[:-1]])
    nearest = np.minimum.reduceat(dist, np.flatnonzero(head))[np.cumsum(head) - 1]
    near = dist <= nearest + _TIE_M
    lay = _layers(n_pts, point[near], edge[near], dist[near], frac[near])
    route_of = np.repeat(np.arange(len(routes)), np.diff(offsets))
    layer_route = route_of[lay.point]
    bounds = _layer_bounds(layer_route, len(routes))
    prs = _pairs(lay, layer_route)
    # a first bound on each fastest time: 1.5 x straight distance at the median speed + 30 s,
    # widened 3x per attempt; the last attempt is unbounded
    gap = np.hypot(*np.diff(xy[lay.point], axis=0).T)
    limit_t = (1.5 * gap / max(index.median_speed, 0.5) + 30.0) * 3.0**attempt
    if attempt >= 3:
        limit_t = np.full(lay.n - 1, np.inf)
    cost, routing = _pair_costs(
        index,
        lay,
        prs,
        weight="time",
        limit_t=limit_t,
        back_tol=np.zeros(len(lay.cand_layer)),
        at_nodes=True,
    )
    starts = np.zeros(lay.n, dtype=bool)
    starts[bounds[:-1]] = True
    chosen, seg, best = _viterbi(lay, np.zeros(len(lay.cand_layer)), prs, cost, starts)
    # per transition the least pair cost; a pair left out at transition t costs more than
    # limit_t, so a chain using it costs more than limit_t + the other transitions' least
    # costs: the chain found is optimal when it is no dearer than every such bound
    m_t = np.full(lay.n - 1, np.inf)
    np.minimum.at(m_t, prs.t, cost)
    retry: list[int] = []
    results: dict[int, MatchedRoute] = {}
    for r, route in enumerate(routes):
        lo, hi = int(bounds[r]), int(bounds[r + 1])
        broken = seg[lo + 1 : hi]
        if broken.any():
            if attempt >= 3:
                t = lo + int(np.flatnonzero(broken)[0])
                a, b = int(lay.point[t] - offsets[r]), int(lay.point[t + 1] - offsets[r])
                raise RouteInputError(
                    f"no drivable path from point {a} to point {b} "
                    "(one-way streets or a road not connected to the rest)",
                    path=route.source or None,
                    field=f"route {route.name!r} point {b}",
                )
            retry.append(r)
            continue
        if attempt < 3 and hi - lo > 1:
            found = float(best[chosen[hi - 1]]) - (hi - lo) * _EPS
            m = m_t[lo : hi - 1]
            if found - float(m.sum()) > float(np.min(limit_t[lo : hi - 1] - m)) + 1e-9:
                retry.append(r)
                continue
        results[r] = _assemble(
            index,
            route,
            int(offsets[r]),
            lay,
            lo,
            hi,
            chosen,
            seg,
            routing,
            method="join",
            weight="time",
            back_tol_m=0.0,
            at_nodes=True,
        )
    if retry:
        logger.debug("join: %d route(s) need wider Dijkstra bounds", len(retry))
        again = _join_group(index, [routes[r] for r in retry], max_snap_m, attempt + 1)
        results.update(zip(retry, again, strict=True))
    return [results[r] for r in range(len(routes))]
