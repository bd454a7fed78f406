"""Match recorded, noisy traces with a hidden Markov model decoded by Viterbi.

After Newson, P. and Krumm, J. (2009), "Hidden Markov map matching through noise and
sparseness", ACM SIGSPATIAL GIS '09, pp. 336-343 [published]. :func:`match_trace` matches one
trace; :func:`match_many` many at once (one candidate search, one Dijkstra per distinct source
node, one Viterbi decoding). The emission and transition scales are estimated from the trace
when not given (:func:`_estimate_sigmas`); fixes within 2 sigma_z of the previous kept one are
dropped first (:func:`_thin`).
"""

from __future__ import annotations

import logging
import math
from collections.abc import Sequence
from typing import Literal

import numpy as np

from routerisk.errors import OptionError
from routerisk.io.routes import PlannedRoute
from routerisk.matching.common import (
    _BETA_PER_SIGMA,
    _HOLD_SIGMAS,
    _MAD_TO_SIGMA,
    MAX_CANDIDATE_GEOMETRIES,
    MAX_DETOUR_M,
    PRUNE_SIGMAS,
    SIGMA_Z_M,
    MatchedRoute,
)
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


def _thin(xy: np.ndarray, min_step: float, required: np.ndarray) -> np.ndarray:
    """Return the mask of fixes kept when dropping those within ``min_step`` of the last kept."""
    n = len(xy)
    keep = np.ones(n, dtype=bool)
    step = np.hypot(*np.diff(xy, axis=0).T)
    if n < 3 or np.all(step >= min_step):
        return keep
    x, y = xy[:, 0].tolist(), xy[:, 1].tolist()
    req = required.tolist()
    lx, ly = x[0], y[0]
    for i in range(1, n - 1):
        if req[i] or math.hypot(x[i] - lx, y[i] - ly) >= min_step:
            lx, ly = x[i], y[i]
        else:
            keep[i] = False
    return keep


def _positive(value: object, name: str) -> float:
    try:
        v = float(value)  # type: ignore[arg-type]
    except (TypeError, ValueError):
        v = math.nan
    if not v > 0 or not math.isfinite(v):
        raise OptionError(
            f"{name} must be a positive number or 'estimate', got {value!r}", field=name
        )
    return v


def match_trace(
    index: RoadIndex,
    route: PlannedRoute,
    *,
    sigma_z: float | Literal["estimate"] = SIGMA_Z_M,
    beta: float | Literal["estimate"] | None = None,
    search_radius_m: float | None = None,
    max_detour_m: float = MAX_DETOUR_M,
) -> MatchedRoute:
    """Match a recorded trace to the road graph with a hidden Markov model.

    After Newson and Krumm (2009) [published]: the states of fix t are the edge positions
    within the search radius; the emission is Gaussian in the fix-to-road distance with
    ``sigma_z``; the transition is exponential in ``|straight distance between the fixes -
    route distance between the positions|`` with ``beta``, the route distance being the
    shortest driving distance (following one-way streets; a forward move along one edge is
    measured on the edge, a step back of at most 4.25 sigma_z on one edge counts as standing
    still); Viterbi decoding in log space (as a shortest path). Fixes within 2 sigma_z of the
    last kept fix are dropped (required points are kept). Where no route with at most
    ``max_detour_m`` of extra driving joins two consecutive kept fixes, the chain is broken
    and restarted; breaks are reported in :attr:`MatchedRoute.breaks`. Fixes with no road
    within the radius are dropped. Candidates more than 6 sigma_z (in quadrature) beyond a
    fix's nearest road, and beyond its 5 nearest geometries, are not considered.

    Parameters
    ----------
    index
        Index of the road graph.
    route
        The trace (points in driving order; times are not needed).
    sigma_z
        GPS noise (m), or ``"estimate"`` for 1.4826 x the median distance from each fix to
        its nearest road.
    beta
        Transition scale (m). ``"estimate"`` decodes once with the default, then sets beta to
        the median of ``|straight - route|`` along that match / ln 2 (Newson and Krumm's
        estimator, with the match standing in for the ground truth) and decodes again. None
        uses sigma_z / 2 [practice: the along-road noise of two fixes is shared by the
        straight and the route distance, so they differ mostly by the across-road noise,
        a few metres; chosen on synthetic traces, see tests/test_matching.py].
    search_radius_m
        Candidate radius (m); None uses max(50, 6 x sigma_z).
    max_detour_m
        Largest plausible extra driving between two consecutive kept fixes (m).

    Returns
    -------
    MatchedRoute
        With ``method="match"``.

    Raises
    ------
    RouteInputError
        Fewer than two fixes, or more than half the fixes, have a road within the search
        radius (latitude and longitude swapped is named as such).
    """
    return match_many(
        index,
        [route],
        sigma_z=sigma_z,
        beta=beta,
        search_radius_m=search_radius_m,
        max_detour_m=max_detour_m,
    )[0]


def match_many(
    index: RoadIndex,
    routes: Sequence[PlannedRoute],
    *,
    sigma_z: float | Literal["estimate"] = SIGMA_Z_M,
    beta: float | Literal["estimate"] | None = None,
    search_radius_m: float | None = None,
    max_detour_m: float = MAX_DETOUR_M,
) -> list[MatchedRoute]:
    """Match many traces at once; see :func:`match_trace` (parameters apply to each).

    Returns one :class:`MatchedRoute` per route, in order; the first route in error raises.
    """
    if sigma_z != "estimate":
        _positive(sigma_z, "sigma_z")
    if beta is not None and beta != "estimate":
        _positive(beta, "beta")
    if search_radius_m is not None:
        _positive(search_radius_m, "search_radius_m")
    detour = _positive(max_detour_m, "max_detour_m")
    out: list[MatchedRoute] = []
    for group in _groups(routes):
        out.extend(
            _match_group(
                index,
                [routes[i] for i in group],
                sigma_z=sigma_z,
                beta=beta,
                search_radius_m=search_radius_m,
                detour=detour,
            )
        )
    return out


def _estimate_sigmas(
    index: RoadIndex, routes: list[PlannedRoute], xy: np.ndarray, offsets: np.ndarray
) -> np.ndarray:
    """Return per route 1.4826 x the median distance of its fixes to the nearest road."""
    near = index.nearest_distance(xy)
    out = np.empty(len(routes))
    for r, route in enumerate(routes):
        d = near[offsets[r] : offsets[r + 1]]
        d = d[np.isfinite(d)]
        if not len(d):
            raise _off_network(
                index, route, xy[offsets[r] : offsets[r + 1]], np.arange(len(route)), 200.0
            )
        out[r] = max(0.5, _MAD_TO_SIGMA * float(np.median(d)))
    return out


def _match_group(
    index: RoadIndex,
    routes: list[PlannedRoute],
    *,
    sigma_z: float | str,
    beta: float | str | None,
    search_radius_m: float | None,
    detour: float,
) -> list[MatchedRoute]:
    xy, offsets = _stack(index, routes)
    n_r, n_pts = len(routes), len(xy)
    route_of = np.repeat(np.arange(n_r), np.diff(offsets))
    sigma_r = (
        _estimate_sigmas(index, routes, xy, offsets)
        if sigma_z == "estimate"
        else np.full(n_r, float(sigma_z))
    )
    radius_r = (
        np.maximum(50.0, 6.0 * sigma_r)
        if search_radius_m is None
        else np.full(n_r, float(search_radius_m))
    )
    keep = (
        np.concatenate(
            [
                _thin(xy[offsets[r] : offsets[r + 1]], 2.0 * sigma_r[r], routes[r].required)
                for r in range(n_r)
            ]
        )
        if n_r
        else np.zeros(0, dtype=bool)
    )
    kept = np.flatnonzero(keep)
    point, edge, dist, frac = index.candidates(
        xy[kept],
        radius_r[route_of[kept]],
        spread=PRUNE_SIGMAS * sigma_r[route_of[kept]],
        max_per_point=MAX_CANDIDATE_GEOMETRIES,
    )
    point = kept[point]
    have = np.zeros(n_pts, dtype=bool)
    have[point] = True
    n_have = np.bincount(route_of[have], minlength=n_r)
    n_kept = np.bincount(route_of[kept], minlength=n_r)
    bad = (n_have < 2) | (n_kept - n_have > 0.5 * n_kept)
    if bad.any():
        r = int(np.flatnonzero(bad)[0])
        lo, hi = offsets[r], offsets[r + 1]
        missing = np.flatnonzero(keep[lo:hi] & ~have[lo:hi])
        raise _off_network(index, routes[r], xy[lo:hi], missing, float(radius_r[r]))
    lay = _layers(n_pts, point, edge, dist, frac)
    layer_route = route_of[lay.point]
    bounds = _layer_bounds(layer_route, n_r)
    prs = _pairs(lay, layer_route)
    gc_t = np.hypot(*np.diff(xy[lay.point], axis=0).T)
    sig_c = sigma_r[layer_route[lay.cand_layer]]
    rd, routing = _pair_costs(
        index,
        lay,
        prs,
        weight="length",
        limit_t=gc_t + detour,
        back_tol=_HOLD_SIGMAS * sig_c,
        at_nodes=False,
    )
    gc = gc_t[prs.t]
    diff = np.abs(gc - rd)
    plausible = rd <= gc + detour
    em = 0.5 * (lay.cand_dist / sig_c) ** 2
    beta_r = (
        _BETA_PER_SIGMA * sigma_r
        if beta is None or beta == "estimate"
        else np.full(n_r, float(beta))
    )
    starts = np.zeros(lay.n, dtype=bool)
    starts[bounds[:-1]] = True

    def decode(b_r: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        tw = np.where(plausible, diff / b_r[layer_route[prs.t]], np.inf)
        chosen, seg, _ = _viterbi(lay, em, prs, tw, starts)
        return chosen, seg

    chosen, seg = decode(beta_r)
    if beta == "estimate":
        t = np.flatnonzero(~seg[1:] & (layer_route[1:] == layer_route[:-1]))
        if len(t):
            p = prs.find(lay, t, chosen[t], chosen[t + 1])
            along = diff[p]
            r_of = layer_route[t]
            for r in np.unique(r_of):
                beta_r[r] = max(0.5, float(np.median(along[r_of == r])) / math.log(2.0))
            chosen, seg = decode(beta_r)
    out = []
    for r, route in enumerate(routes):
        lo, hi = int(bounds[r]), int(bounds[r + 1])
        m = _assemble(
            index,
            route,
            int(offsets[r]),
            lay,
            lo,
            hi,
            chosen,
            seg,
            routing,
            method="match",
            weight="length",
            back_tol_m=_HOLD_SIGMAS * float(sigma_r[r]),
            at_nodes=False,
            sigma_z=float(sigma_r[r]),
            beta=float(beta_r[r]),
        )
        if m.breaks:
            logger.info(
                "match %r: chain broken and restarted at points %s", route.name, list(m.breaks)
            )
        out.append(m)
    return out
