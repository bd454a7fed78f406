"""The layered decoder shared by waypoint joining and map matching.

Both decoders solve one problem: choose one candidate edge position per point so that the
summed cost (emission plus transition) is least. The chain of points is a layered graph
(candidates of point t link to candidates of point t + 1), so the Viterbi recursion is a
shortest path from one source through that acyclic graph; it runs in compiled code as
``scipy.sparse.csgraph.dijkstra`` on a CSR matrix. Route costs between candidates come from
bounded Dijkstra runs on the road matrix (:class:`~routerisk.matching.index.RoadIndex`).
:func:`_assemble` turns the decoded positions into a
:class:`~routerisk.matching.common.MatchedRoute`; :func:`_off_network` names a point with no
road within reach.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import dijkstra

from routerisk.errors import RouteInputError
from routerisk.io.routes import PlannedRoute
from routerisk.matching.common import (
    _BLOCK_ENTRIES,
    _EPS,
    _GROUP_POINTS,
    _LIMIT_STEPS,
    MatchedRoute,
)
from routerisk.matching.index import RoadIndex, _Dist


@dataclass
class _Layers:
    """Candidates of the points that have some: flat arrays grouped by layer."""

    point: np.ndarray  # global point of each layer
    cand_layer: np.ndarray
    cand_edge: np.ndarray
    cand_frac: np.ndarray
    cand_dist: np.ndarray
    start: np.ndarray  # first candidate of each layer
    count: np.ndarray  # candidates per layer

    @property
    def n(self) -> int:
        return len(self.point)


def _layers(
    n_points: int, point: np.ndarray, edge: np.ndarray, dist: np.ndarray, frac: np.ndarray
) -> _Layers:
    """Make layers 0..T-1 of the points that have candidates (``point`` grouped ascending)."""
    count_all = np.bincount(point, minlength=n_points)
    have = count_all > 0
    layer_of = np.cumsum(have) - 1
    count = count_all[have]
    start = np.concatenate([[0], np.cumsum(count)[:-1]]).astype(np.int64)
    return _Layers(np.flatnonzero(have), layer_of[point], edge, frac, dist, start, count)


def _ends(index: RoadIndex, lay: _Layers, *, at_nodes: bool) -> tuple[np.ndarray, np.ndarray]:
    """Return per candidate the node a route leaves from and the node a route arrives at.

    Normally a route leaves a position on (u, v) through v and arrives through u. With
    ``at_nodes`` a position at the very start of an edge is the node u itself, and one at the
    very end is the node v itself (all edges meeting at a node then share one Dijkstra
    source).
    """
    e, f = lay.cand_edge, lay.cand_frac
    leave, arrive = index.edge_v[e], index.edge_u[e]
    if at_nodes:
        leave = np.where(f <= 0.0, index.edge_u[e], leave)
        arrive = np.where(f >= 1.0, index.edge_v[e], arrive)
    return leave, arrive


@dataclass
class _Pairs:
    """Candidate pairs of consecutive layers of one route, sorted by from-candidate."""

    t: np.ndarray  # transition (from-layer) of each pair
    a: np.ndarray  # from-candidate
    b: np.ndarray  # to-candidate
    first: np.ndarray  # first pair of each transition (len T), for pair lookup

    def find(self, lay: _Layers, t: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
        """Return the pair index of (a, b) at transitions t."""
        return self.first[t] + (a - lay.start[t]) * lay.count[t + 1] + (b - lay.start[t + 1])


def _pairs(lay: _Layers, layer_route: np.ndarray) -> _Pairs:
    """Return every pair of candidates of consecutive layers of the same route."""
    cnt = lay.count
    npairs = cnt[:-1] * cnt[1:] * (layer_route[1:] == layer_route[:-1])
    total = int(npairs.sum())
    first = np.concatenate([[0], np.cumsum(npairs)]).astype(np.int64)
    t = np.repeat(np.arange(lay.n - 1), npairs)
    within = np.arange(total) - first[t]
    cnext = cnt[1:][t]
    a = lay.start[t] + within // cnext
    b = lay.start[t + 1] + within % cnext
    return _Pairs(t, a, b, first)


@dataclass
class _Routing:
    """Node-to-node Dijkstra results behind pair costs, kept to rebuild the paths."""

    results: list[_Dist]
    cand_block: np.ndarray  # per candidate: block in results holding its leave node (-1)
    leave: np.ndarray
    arrive: np.ndarray

    def node_path(self, a: int, b: int) -> list[int]:
        res = self.results[int(self.cand_block[a])]
        return res.node_path(int(self.leave[a]), int(self.arrive[b]))


def _pair_costs(
    index: RoadIndex,
    lay: _Layers,
    prs: _Pairs,
    *,
    weight: str,
    limit_t: np.ndarray,
    back_tol: np.ndarray,
    at_nodes: bool,
) -> tuple[np.ndarray, _Routing]:
    """Return the route cost of every pair and the routing behind it.

    The cost from position (e, f) to (e', f') is the rest of e, the least cost from the node
    left through to the node arrived at (bounded Dijkstra, at most ``limit_t`` of the
    transition, else inf), and the start of e'. Moving forward along one edge costs the part
    between; a step back of at most ``back_tol`` (per candidate, m) costs nothing (GPS
    jitter). Dijkstra runs once per distinct leave node and limit step, in blocks.
    """
    e, f = lay.cand_edge, lay.cand_frac
    w = (index.edge_time if weight == "time" else index.edge_length)[e]
    leave, arrive = _ends(index, lay, at_nodes=at_nodes)
    tail, lead = (1.0 - f) * w, f * w
    if at_nodes:
        tail = np.where(f <= 0.0, 0.0, tail)
        lead = np.where(f >= 1.0, 0.0, lead)
    # the candidates that leave towards a next layer, and with which limit step
    has = np.flatnonzero(np.diff(prs.first) > 0)
    step_t = np.full(lay.n, -1, dtype=np.int64)
    step_t[has] = np.searchsorted(_LIMIT_STEPS, limit_t[has])
    cand_step = step_t[lay.cand_layer]
    cand_block = np.full(len(e), -1, dtype=np.int64)
    cand_row = np.zeros(len(e), dtype=np.int64)
    results: list[_Dist] = []
    per_block = max(32, _BLOCK_ENTRIES // max(index.n_nodes, 1))
    for step in np.unique(cand_step[cand_step >= 0]):
        sel = np.flatnonzero(cand_step == step)
        nodes, inv = np.unique(leave[sel], return_inverse=True)
        order = index.spatial_order(nodes)
        rank = np.empty(len(nodes), dtype=np.int64)
        rank[order] = np.arange(len(nodes))
        cand_blk = (rank // per_block)[inv]
        by = np.argsort(cand_blk, kind="stable")
        cuts = np.searchsorted(cand_blk[by], np.arange(int(cand_blk.max()) + 2))
        for k in range(len(cuts) - 1):
            mine = sel[by[cuts[k] : cuts[k + 1]]]
            res = index.distances(
                weight, nodes[order[k * per_block : (k + 1) * per_block]], float(_LIMIT_STEPS[step])
            )
            cand_block[mine] = len(results)
            cand_row[mine] = res.rows(leave[mine])
            results.append(res)

    def fill(res: _Dist, sel: Any) -> np.ndarray:
        a, b = prs.a[sel], prs.b[sel]
        assert res.dist is not None
        return tail[a] + res.dist[cand_row[a], res.cols(arrive[b])] + lead[b]

    if len(results) <= 1:
        cost = fill(results[0], slice(None)) if results else np.full(len(prs.a), np.inf)
    else:
        cost = np.empty(len(prs.a))
        blk = cand_block[prs.a]
        for k, res in enumerate(results):
            idx = np.flatnonzero(blk == k)
            cost[idx] = fill(res, idx)
    for res in results:
        res.dist = None  # only the predecessors are kept, to rebuild paths
    same = np.flatnonzero(e[prs.a] == e[prs.b])
    if len(same):
        a, b = prs.a[same], prs.b[same]
        fa, fb = f[a], f[b]
        fwd = fb >= fa
        k = same[fwd]
        cost[k] = np.minimum(cost[k], (fb[fwd] - fa[fwd]) * w[a[fwd]])
        hold = ~fwd & ((fa - fb) * index.edge_length[e[a]] <= back_tol[a])
        cost[same[hold]] = 0.0
    return cost, _Routing(results, cand_block, leave, arrive)


def _viterbi(
    lay: _Layers, em: np.ndarray, prs: _Pairs, tw: np.ndarray, starts: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Decode the cheapest chains of candidates.

    Parameters
    ----------
    lay, prs
        Layers and pairs.
    em, tw
        Emission cost per candidate and transition cost per pair (inf: not plausible).
    starts
        True at layers that must start a chain (the first layer of each route).

    Returns
    -------
    chosen, seg, best
        Chosen candidate per layer, True at layers that start a chain (route starts and
        breaks: no plausible transition into them), and each candidate's least chain cost.
    """
    n_c = len(lay.cand_layer)
    seg = starts.copy()
    if lay.n > 1:
        seg[1:] |= np.bincount(prs.t, weights=np.isfinite(tw), minlength=lay.n - 1) == 0
    root = n_c
    # CSR rows: candidates (pairs are sorted by from-candidate), then the source root; an
    # implausible pair keeps an inf weight, which Dijkstra never relaxes
    indptr_c = np.concatenate([[0], np.cumsum(np.bincount(prs.a, minlength=n_c))])
    pair_data = tw + em[prs.b] + _EPS
    itype = np.int32 if n_c + len(prs.a) < 2**31 - 1 else np.int64
    while True:
        heads = np.flatnonzero(seg[lay.cand_layer])
        indptr = np.concatenate([indptr_c, [len(prs.a) + len(heads)]]).astype(itype)
        mat = sp.csr_matrix(
            (
                np.concatenate([pair_data, em[heads] + _EPS]),
                np.concatenate([prs.b, heads]).astype(itype),
                indptr,
            ),
            shape=(n_c + 1, n_c + 1),
        )
        dist, pred = dijkstra(mat, indices=root, return_predecessors=True)
        reached = np.bincount(lay.cand_layer[np.isfinite(dist[:n_c])], minlength=lay.n) > 0
        if reached.all():
            break
        seg |= ~reached & np.concatenate([[True], reached[:-1]])
    # backtrack every chain at once: the chosen candidate of layer t is pred^d of the best
    # candidate of its chain's last layer, d layers later; pred^d by binary doubling
    best = dist[:n_c]
    layer_min = np.minimum.reduceat(best, lay.start)
    is_min = np.flatnonzero(best == layer_min[lay.cand_layer])
    first_min = is_min[np.concatenate([[True], np.diff(lay.cand_layer[is_min]) != 0])]
    ends = np.flatnonzero(np.concatenate([seg[1:], [True]]))
    chain = np.cumsum(seg) - 1
    d = ends[chain] - np.arange(lay.n)
    c = first_min[ends][chain]
    jump = pred[:n_c].astype(np.int64)
    jump[(jump < 0) | (jump >= n_c)] = np.flatnonzero((jump < 0) | (jump >= n_c))
    bit = 0
    while (d >> bit).any():
        m = ((d >> bit) & 1).astype(bool)
        c[m] = jump[c[m]]
        jump = jump[jump]
        bit += 1
    chosen = c
    return chosen, seg, best


def _assemble(
    index: RoadIndex,
    route: PlannedRoute,
    offset: int,
    lay: _Layers,
    lo: int,
    hi: int,
    chosen: np.ndarray,
    seg: np.ndarray,
    routing: _Routing,
    *,
    method: str,
    weight: str,
    back_tol_m: float,
    at_nodes: bool,
    sigma_z: float | None = None,
    beta: float | None = None,
) -> MatchedRoute:
    """Turn the chosen candidates of layers lo..hi-1 (one route) into ordered edge visits."""
    ch = chosen[lo:hi]
    sg = seg[lo:hi].copy()
    sg[0] = True
    ce = lay.cand_edge[ch]
    cf = lay.cand_frac[ch]
    same = ce[1:] == ce[:-1]
    fwd = same & (cf[1:] >= cf[:-1])
    hold = same & ~fwd & ((cf[:-1] - cf[1:]) * index.edge_length[ce[1:]] <= back_tol_m)
    new = np.concatenate([[True], ~(fwd | hold) | sg[1:]])
    first = np.flatnonzero(new)  # layer opening each run of layers on one edge
    group = np.cumsum(new) - 1
    gmax = np.maximum.reduceat(cf, first)
    visits: list[list[Any]] = []  # [edge, start, end, starts_piece]
    group_visit = np.empty(len(first), dtype=np.int64)
    for k, t in enumerate(first.tolist()):
        e = int(ce[t])
        if sg[t]:
            visits.append([e, float(cf[t]), float(gmax[k]), True])
        else:
            if not (at_nodes and cf[t - 1] <= 0.0):  # else it left from u: e not driven
                visits[-1][2] = 1.0
            a, b = int(ch[t - 1]), int(ch[t])
            if routing.leave[a] != routing.arrive[b]:  # else the two edges meet: no path
                nodes = routing.node_path(a, b)
                visits.extend([pe, 0.0, 1.0, False] for pe in index.edges_between(weight, nodes))
            on = 1.0 if at_nodes and cf[t] >= 1.0 else 0.0  # arrived at v without driving e
            visits.append([e, on, float(gmax[k]), False])
        group_visit[k] = len(visits) - 1
    n = len(route)
    pts = lay.point[lo:hi] - offset
    point_visit = np.full(n, -1, dtype=np.int64)
    point_off = np.full(n, np.nan)
    point_visit[pts] = group_visit[group]
    point_off[pts] = cf
    breaks = tuple(int(p) for p in pts[1:][sg[1:]])
    # drop visits shorter than 1 mm (a point exactly on a node), keeping at least one; a point on
    # a dropped visit moves to the start of the next kept visit (or the end of the last one)
    elen = index.edge_length
    keep = np.array([(v[2] - v[1]) * max(float(elen[v[0]]), 1.0) > 1e-3 for v in visits])
    if not keep.any():
        keep[0] = True
    kept_at = np.flatnonzero(keep)
    kept = [visits[i] for i in kept_at]
    for i in np.flatnonzero(~keep):
        if visits[i][3]:
            j = int(np.searchsorted(kept_at, i))
            if j < len(kept):
                kept[j][3] = True
    kept[0][3] = True
    used = np.flatnonzero(point_visit >= 0)
    i = point_visit[used]
    j = np.searchsorted(kept_at, i)
    jc = np.minimum(j, len(kept) - 1)
    moved = kept_at[jc] != i
    after = moved & (j < len(kept))
    starts = np.array([v[1] for v in kept])
    point_visit[used] = jc
    point_off[used[after]] = starts[jc[after]]
    point_off[used[moved & ~after]] = kept[-1][2]
    edges_pos = np.array([v[0] for v in kept], dtype=np.int64)
    fractions = np.array([v[2] - v[1] for v in kept])
    for arr in (fractions, point_visit, point_off):
        arr.setflags(write=False)
    return MatchedRoute(
        name=route.name,
        source=route.source,
        method=method,
        edges=index.edges(edges_pos),
        fractions=fractions,
        start_offset=float(kept[0][1]),
        end_offset=float(kept[-1][2]),
        length_m=float(np.sum(fractions * index.edge_length[edges_pos])),
        time_s=float(np.sum(fractions * index.edge_time[edges_pos])),
        piece_starts=tuple(i for i, v in enumerate(kept) if v[3]),
        breaks=breaks,
        point_edge=point_visit,
        point_offset=point_off,
        sigma_z=sigma_z,
        beta=beta,
    )


def _stack(index: RoadIndex, routes: Sequence[PlannedRoute]) -> tuple[np.ndarray, np.ndarray]:
    """Return all points projected and the point offset of each route (len R + 1)."""
    offsets = np.concatenate([[0], np.cumsum([len(r) for r in routes])]).astype(np.int64)
    lonlat = np.concatenate([r.lonlat for r in routes]) if routes else np.empty((0, 2))
    return index.project(lonlat), offsets


def _groups(routes: Sequence[PlannedRoute]) -> list[list[int]]:
    """Split route positions into groups of about _GROUP_POINTS points."""
    out: list[list[int]] = [[]]
    size = 0
    for i, r in enumerate(routes):
        if out[-1] and size + len(r) > _GROUP_POINTS:
            out.append([])
            size = 0
        out[-1].append(i)
        size += len(r)
    return [g for g in out if g]


def _layer_bounds(layer_route: np.ndarray, n_routes: int) -> np.ndarray:
    """Return, for each route, the first layer (len R + 1, layers sorted by route)."""
    return np.searchsorted(layer_route, np.arange(n_routes + 1)).astype(np.int64)


def _off_network(
    index: RoadIndex, route: PlannedRoute, xy: np.ndarray, bad: np.ndarray, limit_m: float
) -> RouteInputError:
    """Return the error for points that lie off the network (or look lat/lon swapped)."""
    n = len(route)
    swapped = route.lonlat[:, ::-1]
    if np.all(np.abs(swapped[:, 1]) <= 90.0):
        on_swapped = int(np.sum(index.nearest_distance(index.project(swapped)) <= limit_m))
        on_given = n - len(bad)
        if on_swapped >= 0.9 * n and on_swapped > on_given:
            return RouteInputError(
                f"latitude and longitude look swapped: {len(bad)} of {n} points are off the road "
                f"network as given (lon, lat), but {on_swapped} fall on it when swapped; "
                "GeoJSON positions are [lon, lat]",
                path=route.source or None,
                field=f"route {route.name!r}",
            )
    i = int(bad[0])
    d = float(index.nearest_distance(xy[i : i + 1])[0])
    where = (
        f"{d:,.0f} m from the nearest drivable road"
        if math.isfinite(d)
        else "outside the area the road network's coordinate system covers"
    )
    lon, lat = route.lonlat[i]
    return RouteInputError(
        f"point (lon {lon:.6f}, lat {lat:.6f}) is {where} (at most {limit_m:g} m allowed)",
        path=route.source or None,
        field=f"route {route.name!r} point {i}",
    )
