"""Turn routes into driven edges: join planned waypoints, match recorded traces.

Build one :class:`RoadIndex` per road graph (an STRtree of the edge geometries, CSR matrices
of the graph weighted by travel time and by length, node id arrays and the WGS84 -> graph CRS
transformer) and pass it to the functions here:

- :func:`join_waypoints` snaps each planned waypoint to the nearest edge position (the middle of
  an edge is fine: the edge is split at the projection) and joins consecutive waypoints by the
  fastest path (travel time, Dijkstra on the CSR matrix);
- :func:`match_trace` matches a recorded, noisy trace with a hidden Markov model decoded by
  Viterbi, after Newson, P. and Krumm, J. (2009), "Hidden Markov map matching through noise and
  sparseness", ACM SIGSPATIAL GIS '09, pp. 336-343 [published];
- :func:`to_edges` picks one of the two per route (see :func:`is_dense_trace`).

All return a :class:`MatchedRoute`: the ordered edges ``(u, v, key)`` driven, the share of each
edge driven (the first and last edges are usually partial), and the total length and time.

Both decoders solve the same problem: choose one candidate edge position per point so that the
summed cost (emission plus transition) is least. The chain of points is a layered graph
(candidates of point t link to candidates of point t + 1), so the Viterbi recursion is a
shortest path from one source through that acyclic graph; it is run by
``scipy.sparse.csgraph.dijkstra`` on a CSR matrix, all in compiled code. Route distances
between candidates come from one bounded Dijkstra per route on the road matrix, restricted to
the nodes that a path within the bound can reach.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Hashable, Sequence
from dataclasses import dataclass
from typing import Any, Literal

import networkx as nx
import numpy as np
import pyproj
import scipy.sparse as sp
import shapely
from scipy.sparse.csgraph import dijkstra
from shapely import LineString, STRtree

from .errors import EmptyNetworkError, OptionError, RouteInputError
from .routes import PlannedRoute

logger = logging.getLogger(__name__)

__all__ = [
    "DENSE_INTERVAL_S",
    "DENSE_SPACING_M",
    "MAX_SNAP_M",
    "SIGMA_Z_M",
    "MatchedRoute",
    "RoadIndex",
    "is_dense_trace",
    "join_waypoints",
    "match_trace",
    "to_edges",
]

#: Standard deviation of GPS noise, Newson and Krumm (2009) [published].
SIGMA_Z_M = 4.07
#: Farthest a planned waypoint may lie from a drivable edge (m) [practice].
MAX_SNAP_M = 60.0
#: Traces whose median point spacing is below this are matched, not joined (m) [practice].
DENSE_SPACING_M = 60.0
#: Traces whose median time step is at most this are matched, not joined (s) [practice].
DENSE_INTERVAL_S = 10.0
#: Extra driving allowed between consecutive fixes beyond their straight distance (m) [practice].
MAX_DETOUR_M = 200.0
#: Candidates of a fix farther than this many sigma_z beyond its nearest road are dropped.
PRUNE_SIGMAS = 6.0
#: At most this many candidate edge positions per fix (the nearest; both directions count).
MAX_CANDIDATES = 10
#: Waypoint snapping keeps every edge within this of the nearest one and lets routing choose (m).
_TIE_M = 2.0
#: Median absolute deviation to standard deviation of a normal law (common practice).
_MAD_TO_SIGMA = 1.4826
_EPS = 1e-9
#: Graphs with more nodes than this run bounded Dijkstra on the part a route can reach.
_SUBGRAPH_MIN_NODES = 20_000

Edge = tuple[Hashable, Hashable, Hashable]


@dataclass(frozen=True, eq=False)
class MatchedRoute:
    """Edges driven by one route, in order.

    Attributes
    ----------
    name, source
        The route's name and file.
    method
        ``"join"`` (waypoints joined by fastest paths) or ``"match"`` (HMM map matching).
    edges
        ``(u, v, key)`` of each edge driven, in driving order (an edge can appear twice).
    fractions
        Share of each edge's length driven, 0..1 (1 except usually at the two ends and at
        breaks).
    start_offset, end_offset
        Position (share of the edge from u) where driving starts on the first edge and ends
        on the last edge.
    length_m, time_s
        Sums of share x ``length`` and share x ``travel_time`` over the edges.
    piece_starts
        Indices into ``edges`` where a connected piece begins: ``(0,)`` unless the matcher
        broke the chain, in which case ``edges[i - 1]`` does not lead to ``edges[i]``.
    breaks
        Indices of the route points where the chain was restarted (no plausible route from
        the previous kept point).
    point_edge
        For each route point, the index into ``edges`` it was placed on, or -1 when the point
        was dropped (within 2 sigma_z of the previous kept fix, or no road within reach).
    point_offset
        For each route point, its position (share from u) on that edge, NaN when dropped.
    sigma_z, beta
        Emission and transition parameters used by the matcher (m), None for joins.
    """

    name: str
    source: str
    method: str
    edges: tuple[Edge, ...]
    fractions: np.ndarray
    start_offset: float
    end_offset: float
    length_m: float
    time_s: float
    piece_starts: tuple[int, ...]
    breaks: tuple[int, ...]
    point_edge: np.ndarray
    point_offset: np.ndarray
    sigma_z: float | None = None
    beta: float | None = None

    def __len__(self) -> int:
        """Return the number of edges."""
        return len(self.edges)


@dataclass
class _Dist:
    """Bounded Dijkstra result on a (sub)graph: rows are sources, columns local nodes."""

    sources: np.ndarray  # global node positions, sorted unique
    loc: np.ndarray | None  # global -> local node position (-1 outside), None: whole graph
    sub: np.ndarray | None  # local -> global
    dist: np.ndarray
    pred: np.ndarray

    def rows(self, src: np.ndarray) -> np.ndarray:
        """Return the row of each source node position (any row for other nodes)."""
        if not len(self.sources):
            return np.zeros(len(src), dtype=np.int64)
        return np.minimum(np.searchsorted(self.sources, src), len(self.sources) - 1)

    def cols(self, dst: np.ndarray) -> np.ndarray:
        """Return the column of each node position; -1 (a column of inf) outside the subgraph."""
        return np.asarray(dst, dtype=np.int64) if self.loc is None else self.loc[dst]

    def node_path(self, src: int, dst: int) -> list[int]:
        """Return global node positions from src to dst (both included)."""
        row = int(np.searchsorted(self.sources, src))
        if self.loc is None:
            s, t = src, dst
        else:
            s, t = int(self.loc[src]), int(self.loc[dst])
        pred = self.pred[row]
        path = [t]
        while t != s:
            t = int(pred[t])
            if t < 0:
                raise RuntimeError("no predecessor on a path Dijkstra reported as reachable")
            path.append(t)
        path.reverse()
        if self.sub is not None:
            return [int(self.sub[p]) for p in path]
        return path


class RoadIndex:
    """Spatial and routing index of a projected road graph, built once per graph.

    Parameters
    ----------
    G
        Projected ``networkx.MultiDiGraph`` with the road-graph conventions: ``G.graph["crs"]``,
        node ``x``/``y``, edge ``geometry`` (u -> v), ``length`` (m) and ``travel_time`` (s).
        A missing geometry falls back to the straight segment, a missing ``travel_time`` to
        ``length / speed_kph``; a geometry stored v -> u is turned around.

    Attributes
    ----------
    crs
        The graph CRS.
    node_ids
        Object array of node ids; ``node_pos`` maps an id to its position.
    node_xy
        (n, 2) projected node coordinates.
    edge_u, edge_v
        Node positions of each edge; ``edge_key`` the keys, ``edge_geom`` the LineStrings,
        ``edge_length`` (m) and ``edge_time`` (s); ``edge_pos`` maps ``(u, v, key)`` to the
        position.
    tree
        STRtree of ``edge_geom`` (nearest-edge queries).
    csr_time, csr_length
        n x n CSR matrices of the graph keeping, per (u, v), the fastest (resp. shortest)
        parallel edge.
    to_graph
        Transformer EPSG:4326 -> graph CRS (always_xy).

    Notes
    -----
    Candidate search runs on a second STRtree, of the straight segments of each distinct
    geometry (the two directions of a two-way street share one), and projects points on
    segments with numpy; this is several times faster than shapely's per-pair distance and
    line_locate_point.
    """

    def __init__(self, G: nx.MultiDiGraph) -> None:
        crs = G.graph.get("crs")
        if not crs:
            raise ValueError("the road graph has no 'crs' graph attribute")
        if G.number_of_edges() == 0:
            raise EmptyNetworkError("the road graph has no edges")
        self.crs = crs
        nodes = list(G.nodes)
        self.node_ids = np.empty(len(nodes), dtype=object)
        self.node_ids[:] = nodes
        self.node_pos: dict[Hashable, int] = {n: i for i, n in enumerate(nodes)}
        self.node_xy = np.array([(G.nodes[n]["x"], G.nodes[n]["y"]) for n in nodes], dtype=float)
        m = G.number_of_edges()
        eu = np.empty(m, dtype=np.int64)
        ev = np.empty(m, dtype=np.int64)
        keys: list[Hashable] = []
        geoms = np.empty(m, dtype=object)
        length = np.empty(m)
        ttime = np.empty(m)
        for i, (u, v, k, d) in enumerate(G.edges(keys=True, data=True)):
            iu, iv = self.node_pos[u], self.node_pos[v]
            eu[i], ev[i] = iu, iv
            keys.append(k)
            g = d.get("geometry")
            if g is None:
                g = LineString([self.node_xy[iu], self.node_xy[iv]])
            geoms[i] = g
            length[i] = float(d["length"]) if d.get("length") is not None else g.length
            if d.get("travel_time") is not None:
                ttime[i] = float(d["travel_time"])
            elif d.get("speed_kph"):
                ttime[i] = length[i] / (float(d["speed_kph"]) / 3.6)
            else:
                raise ValueError(f"edge {(u, v, k)} has neither travel_time nor speed_kph")
        length = np.maximum(length, 0.0)
        ttime = np.maximum(ttime, _EPS)
        # geometry must run u -> v (osmnx convention); turn around any stored the other way
        first = shapely.get_coordinates(shapely.get_point(geoms, 0))
        last = shapely.get_coordinates(shapely.get_point(geoms, -1))
        fwd = np.hypot(*(first - self.node_xy[eu]).T) + np.hypot(*(last - self.node_xy[ev]).T)
        rev = np.hypot(*(first - self.node_xy[ev]).T) + np.hypot(*(last - self.node_xy[eu]).T)
        flip = rev + 1e-6 < fwd
        if flip.any():
            logger.warning("RoadIndex turned %d edge geometries around to run u -> v",
                           int(flip.sum()))
            geoms[flip] = shapely.reverse(geoms[flip])
        self.edge_u, self.edge_v, self.edge_key = eu, ev, keys
        self.edge_geom = geoms
        self.edge_length, self.edge_time = length, ttime
        self.edge_pos: dict[Edge, int] = {
            (nodes[a], nodes[b], k): i for i, (a, b, k) in enumerate(zip(eu, ev, keys, strict=True))
        }
        self.tree = STRtree(geoms)
        n = len(nodes)
        self.n_nodes = n
        self.csr_time, self._time_keys, self._time_edge = self._matrix(ttime)
        self.csr_length, self._len_keys, self._len_edge = self._matrix(length)
        chord = np.hypot(*(self.node_xy[ev] - self.node_xy[eu]).T)
        with np.errstate(divide="ignore", invalid="ignore"):
            stretch = np.where(chord > 1.0, length / chord, np.inf)
        # a path of cost c stays within c * reach of its start (used to cut out subgraphs)
        min_stretch = min(1.0, float(np.min(stretch))) if np.isfinite(stretch).any() else 1.0
        self._reach = {
            "time": float(np.max(length / ttime)) / min_stretch * 1.01,
            "length": 1.01 / min_stretch,
        }
        self.median_speed = float(np.median(length / ttime))
        self.to_graph = pyproj.Transformer.from_crs("EPSG:4326", crs, always_xy=True)
        self._build_segments()
        logger.info("RoadIndex indexed %d nodes and %d edges", n, m)

    # ---------------------------------------------------------------------------------------
    def _matrix(self, w: np.ndarray) -> tuple[sp.csr_matrix, np.ndarray, np.ndarray]:
        n = self.n_nodes
        key = self.edge_u * n + self.edge_v
        order = np.lexsort((w, key))
        ks = key[order]
        head = np.ones(len(order), dtype=bool)
        head[1:] = ks[1:] != ks[:-1]
        best = order[head]
        mat = sp.csr_matrix(
            (np.maximum(w[best], _EPS), (self.edge_u[best], self.edge_v[best])), shape=(n, n)
        )
        mat.sort_indices()
        return mat, key[best], best

    def _build_segments(self) -> None:
        """Group edges sharing one geometry (both directions of a street) and cut segments."""
        m = len(self.edge_geom)
        coords, gi = shapely.get_coordinates(self.edge_geom, return_index=True)
        bounds = np.searchsorted(gi, np.arange(m + 1))
        groups: dict[tuple[int, int, bytes], int] = {}
        grp = np.empty(m, dtype=np.int64)
        rev = np.zeros(m, dtype=bool)
        reps: list[int] = []
        eu, ev = self.edge_u.tolist(), self.edge_v.tolist()
        for i in range(m):
            c = coords[bounds[i]:bounds[i + 1]]
            g = groups.get((eu[i], ev[i], c.tobytes()))
            if g is None:
                g = groups.get((ev[i], eu[i], c[::-1].tobytes()))
                if g is not None:
                    rev[i] = True
            if g is None:
                g = len(reps)
                groups[(eu[i], ev[i], c.tobytes())] = g
                reps.append(i)
            grp[i] = g
        order = np.argsort(grp, kind="stable")
        self._grp_count = np.bincount(grp, minlength=len(reps))
        self._grp_ptr = np.concatenate([[0], np.cumsum(self._grp_count)[:-1]])
        self._grp_edge = order
        self._grp_rev = rev[order]
        rc, ri = shapely.get_coordinates(self.edge_geom[reps], return_index=True)
        same = ri[1:] == ri[:-1]
        a, b, sg = rc[:-1][same], rc[1:][same], ri[:-1][same]
        ab = b - a
        seg_len = np.hypot(ab[:, 0], ab[:, 1])
        real = seg_len > 0
        a, b, sg, ab, seg_len = a[real], b[real], sg[real], ab[real], seg_len[real]
        lost = np.setdiff1d(np.arange(len(reps)), sg)
        if len(lost):  # a geometry of zero length: index it as a 1 mm segment at its start
            pa = shapely.get_coordinates(shapely.get_point(self.edge_geom[np.asarray(reps)[lost]], 0))
            a = np.concatenate([a, pa])
            b = np.concatenate([b, pa + [1e-3, 0.0]])
            sg = np.concatenate([sg, lost])
            order = np.argsort(sg, kind="stable")
            a, b, sg = a[order], b[order], sg[order]
            ab = b - a
            seg_len = np.hypot(ab[:, 0], ab[:, 1])
        cum = np.cumsum(seg_len) - seg_len
        first_of = np.searchsorted(sg, np.arange(len(reps)))
        first_of = np.minimum(first_of, max(len(sg) - 1, 0))
        self._seg_cum = cum - cum[first_of[sg]]
        self._seg_ax, self._seg_ay = a[:, 0].copy(), a[:, 1].copy()
        self._seg_dx, self._seg_dy = ab[:, 0].copy(), ab[:, 1].copy()
        self._seg_l2 = seg_len**2
        self._seg_len = seg_len
        self._seg_grp = sg
        self._grp_len = np.bincount(sg, weights=seg_len, minlength=len(reps))
        self._seg_tree = STRtree(shapely.linestrings(np.stack([a, b], axis=1)))

    def edge(self, i: int) -> Edge:
        """Return the ``(u, v, key)`` of edge position i."""
        return (self.node_ids[self.edge_u[i]], self.node_ids[self.edge_v[i]], self.edge_key[i])

    def project(self, lonlat: np.ndarray) -> np.ndarray:
        """Return (N, 2) graph-CRS coordinates of (N, 2) lon, lat (NaN where invalid)."""
        ll = np.asarray(lonlat, dtype=float)
        with np.errstate(all="ignore"):
            x, y = self.to_graph.transform(ll[:, 0], ll[:, 1], errcheck=False)
        xy = np.column_stack([np.asarray(x, dtype=float), np.asarray(y, dtype=float)])
        xy[~np.isfinite(xy).all(axis=1)] = np.nan
        return xy

    def candidates(
        self, xy: np.ndarray, radius: float, *, spread: float | None = None,
        max_per_point: int | None = None,
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Return the edge positions within ``radius`` of each point.

        Parameters
        ----------
        xy
            (N, 2) projected points.
        radius
            Search radius (m).
        spread
            If given, keep only positions with ``d**2 <= nearest**2 + spread**2`` (nearest: the
            point's closest road), the rest being far less likely.
        max_per_point
            If given, keep at most this many geometries (each direction of a two-way street
            then counts once) per point, the nearest.

        Returns
        -------
        point, edge, distance, offset
            Flat arrays grouped by point (ascending): the point's row in ``xy``, the edge
            position, the point-to-edge distance (m) and the projection's share along the edge
            from u (0..1). Points with non-finite coordinates get none.
        """
        ok = np.flatnonzero(np.isfinite(xy).all(axis=1))
        px, py = xy[ok, 0], xy[ok, 1]
        boxes = shapely.box(px - radius, py - radius, px + radius, py + radius)
        qi, si = self._seg_tree.query(boxes)
        qx, qy = px[qi] - self._seg_ax[si], py[qi] - self._seg_ay[si]
        dx, dy, l2 = self._seg_dx[si], self._seg_dy[si], self._seg_l2[si]
        t = np.clip((qx * dx + qy * dy) / l2, 0.0, 1.0)  # l2 > 0: zero-length segments dropped
        d = np.hypot(qx - t * dx, qy - t * dy)
        near = np.flatnonzero(d <= radius)
        qi, si, t, d = qi[near], si[near], t[near], d[near]
        g = self._seg_grp[si]
        key = qi * len(self._grp_len) + g
        order = np.lexsort((d, key))
        key = key[order]
        head = np.flatnonzero(np.concatenate([[True], key[1:] != key[:-1]]))
        take = order[head]
        qi, g, d = qi[take], g[take], d[take]
        along = self._seg_cum[si[take]] + t[take] * self._seg_len[si[take]]
        if spread is not None and len(qi):
            first = np.concatenate([[True], qi[1:] != qi[:-1]])
            nearest = np.minimum.reduceat(d, np.flatnonzero(first))[np.cumsum(first) - 1]
            keep = np.flatnonzero(d * d <= nearest * nearest + spread * spread)
            qi, g, d, along = qi[keep], g[keep], d[keep], along[keep]
        if max_per_point is not None and len(qi):
            count = np.bincount(qi)
            if count.max() > max_per_point:
                order = np.lexsort((g, d, qi))
                qi, g, d, along = qi[order], g[order], d[order], along[order]
                count = count[count > 0]
                rank = np.arange(len(qi)) - np.repeat(np.cumsum(count) - count, count)
                keep = np.flatnonzero(rank < max_per_point)
                qi, g, d, along = qi[keep], g[keep], d[keep], along[keep]
        frac = along / self._grp_len[g]
        cnt = self._grp_count[g]
        rep = np.repeat(np.arange(len(g)), cnt)
        slot = self._grp_ptr[g][rep] + (np.arange(len(rep)) - np.repeat(np.cumsum(cnt) - cnt, cnt))
        f = frac[rep]
        f = np.clip(np.where(self._grp_rev[slot], 1.0 - f, f), 0.0, 1.0)
        return ok[qi[rep]], self._grp_edge[slot].astype(np.int64), d[rep], f

    def nearest_distance(self, xy: np.ndarray) -> np.ndarray:
        """Return each point's distance to the nearest edge (m), inf for invalid points."""
        out = np.full(len(xy), np.inf)
        ok = np.flatnonzero(np.isfinite(xy).all(axis=1))
        if len(ok):
            idx, dist = self.tree.query_nearest(shapely.points(xy[ok]), return_distance=True)
            np.minimum.at(out, ok[idx[0]], dist)
        return out

    def distances(self, weight: str, sources: np.ndarray, limit: float) -> _Dist:
        """Run Dijkstra from node positions ``sources`` up to cost ``limit``.

        For a finite limit only the nodes inside the sources' bounding box grown by the
        farthest a path of that cost can go are kept, so the work scales with the route, not
        with the graph.
        """
        mat = self.csr_time if weight == "time" else self.csr_length
        src = np.unique(sources)
        loc = sub = None
        if not len(src):
            empty = np.empty((0, self.n_nodes))
            return _Dist(src, None, None, empty, empty.astype(np.int32))
        if math.isfinite(limit) and self.n_nodes > _SUBGRAPH_MIN_NODES:
            margin = limit * self._reach[weight] + 1.0
            sxy = self.node_xy[src]
            lo, hi = sxy.min(axis=0) - margin, sxy.max(axis=0) + margin
            inside = ((self.node_xy >= lo) & (self.node_xy <= hi)).all(axis=1)
            # cutting pays off once the per-source set-up over all nodes costs more than the cut
            if inside.sum() < 0.5 * self.n_nodes:
                sub = np.flatnonzero(inside)
                loc = np.full(self.n_nodes, -1, dtype=np.int64)
                loc[sub] = np.arange(len(sub))
                mat = mat[sub][:, sub]
        idx = src if loc is None else loc[src]
        dist, pred = dijkstra(mat, indices=idx, limit=limit, return_predecessors=True)
        dist = np.atleast_2d(dist)
        if loc is not None:  # an extra column of inf: column -1 (outside the cut) reads inf
            dist = np.hstack([dist, np.full((len(src), 1), np.inf)])
        return _Dist(src, loc, sub, dist, np.atleast_2d(pred))

    def edges_between(self, weight: str, nodes: Sequence[int]) -> list[int]:
        """Return the edge positions joining consecutive node positions (best parallel edge)."""
        if len(nodes) < 2:
            return []
        a = np.asarray(nodes[:-1], dtype=np.int64)
        b = np.asarray(nodes[1:], dtype=np.int64)
        keys, edge = (
            (self._time_keys, self._time_edge) if weight == "time"
            else (self._len_keys, self._len_edge)
        )
        pos = np.searchsorted(keys, a * self.n_nodes + b)
        return [int(e) for e in edge[pos]]


# --------------------------------------------------------------------------------------------
# the layered decoder shared by joining and matching


@dataclass
class _Layers:
    """Candidates of the points that have some: flat arrays grouped by layer."""

    point: np.ndarray  # route point of each layer
    cand_layer: np.ndarray
    cand_edge: np.ndarray
    cand_frac: np.ndarray
    cand_dist: np.ndarray
    start: np.ndarray  # first candidate of each layer
    count: np.ndarray  # candidates per layer

    @property
    def n(self) -> int:
        return len(self.point)


def _layers(n_points: int, point: np.ndarray, edge: np.ndarray, dist: np.ndarray,
            frac: np.ndarray) -> _Layers:
    """Number the points that have candidates 0..T-1 (``point`` must be grouped ascending)."""
    count_all = np.bincount(point, minlength=n_points)
    have = count_all > 0
    layer_of = np.cumsum(have) - 1
    count = count_all[have]
    start = np.concatenate([[0], np.cumsum(count)[:-1]])
    return _Layers(np.flatnonzero(have), layer_of[point], edge, frac, dist, start, count)


def _ends(index: RoadIndex, L: _Layers, *, at_nodes: bool) -> tuple[np.ndarray, np.ndarray]:
    """Return per candidate the node a route leaves from and the node a route arrives at.

    Normally a route leaves a position on (u, v) through v and arrives through u. With
    ``at_nodes`` a position at the very start of an edge is the node u itself, and one at the
    very end is the node v itself (both directions and all edges meeting there then share one
    Dijkstra source).
    """
    e, f = L.cand_edge, L.cand_frac
    leave, arrive = index.edge_v[e], index.edge_u[e]
    if at_nodes:
        leave = np.where(f <= 0.0, index.edge_u[e], leave)
        arrive = np.where(f >= 1.0, index.edge_v[e], arrive)
    return leave, arrive


def _route_costs(
    index: RoadIndex, L: _Layers, *, weight: str, limit: float | np.ndarray, back_tol_m: float,
    at_nodes: bool = False,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, _Dist | list[_Dist]]:
    """Return pair layer, from and to candidate and route cost between consecutive layers.

    Pairs come sorted by their from-candidate. The route cost from position (e, f) to (e', f')
    is the rest of e, the least cost from e's head to the tail of e', and the start of e'; on
    one edge moving forward it is the part of the edge between, and a step back of at most
    ``back_tol_m`` costs nothing (GPS jitter). Node costs come from one bounded Dijkstra for
    a scalar ``limit``, or one per transition for an array of limits (then a list of results,
    one per transition, is returned).
    """
    start, count = L.start, L.count
    npairs = count[:-1] * count[1:]
    total = int(npairs.sum())
    pair_t = np.repeat(np.arange(L.n - 1), npairs)
    within = np.arange(total) - np.repeat(np.cumsum(npairs) - npairs, npairs)
    cnext = count[1:][pair_t]
    ia = start[:-1][pair_t] + within // cnext
    ib = start[1:][pair_t] + within % cnext
    e, f = L.cand_edge, L.cand_frac
    w = (index.edge_time if weight == "time" else index.edge_length)[e]
    heads, tails = _ends(index, L, at_nodes=at_nodes)
    tail, lead = (1.0 - f) * w, f * w
    if at_nodes:
        tail = np.where(f <= 0.0, 0.0, tail)
        lead = np.where(f >= 1.0, 0.0, lead)
    res: _Dist | list[_Dist]
    if np.ndim(limit) == 0:
        res = index.distances(weight, heads[: start[-1]], float(limit))
        rows = res.rows(heads)
        cols = res.cols(tails)
        cost = tail[ia] + res.dist[rows[ia], cols[ib]] + lead[ib]
    else:
        res = []
        cost = np.empty(total)
        lo = np.concatenate([[0], np.cumsum(npairs)])
        for t in range(L.n - 1):
            r = index.distances(weight, heads[start[t]:start[t] + count[t]], float(limit[t]))
            res.append(r)
            a, b = ia[lo[t]:lo[t + 1]], ib[lo[t]:lo[t + 1]]
            cost[lo[t]:lo[t + 1]] = tail[a] + r.dist[r.rows(heads[a]), r.cols(tails[b])] + lead[b]
    same = np.flatnonzero(e[ia] == e[ib])
    if len(same):
        fa, fb = f[ia[same]], f[ib[same]]
        fwd = fb >= fa
        k = same[fwd]
        cost[k] = np.minimum(cost[k], (fb[fwd] - fa[fwd]) * w[ia[k]])
        hold = ~fwd & ((fa - fb) * index.edge_length[e[ia[same]]] <= back_tol_m)
        cost[same[hold]] = 0.0
    return pair_t, ia, ib, cost, res


def _viterbi(
    L: _Layers, em: np.ndarray, pair_t: np.ndarray, ia: np.ndarray, ib: np.ndarray,
    tw: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Decode the cheapest chain of candidates.

    Returns
    -------
    chosen, seg, best
        Chosen candidate per layer, True at layers that start a new piece (no plausible
        transition into them), and each candidate's least chain cost.
    """
    ok = np.isfinite(tw)
    pair_t, ia, ib, tw = pair_t[ok], ia[ok], ib[ok], tw[ok]
    n_c = len(L.cand_layer)
    seg = np.zeros(L.n, dtype=bool)
    seg[0] = True
    if L.n > 1:
        seg[1:] = np.bincount(pair_t, minlength=L.n - 1) == 0
    S = n_c
    row_count = np.bincount(ia, minlength=n_c)
    pair_data = tw + em[ib] + _EPS
    while True:
        heads = np.flatnonzero(seg[L.cand_layer])
        indptr = np.concatenate([[0], np.cumsum(row_count), [len(ia) + len(heads)]])
        mat = sp.csr_matrix(
            (np.concatenate([pair_data, em[heads] + _EPS]), np.concatenate([ib, heads]), indptr),
            shape=(n_c + 1, n_c + 1),
        )
        dist, pred = dijkstra(mat, indices=S, return_predecessors=True)
        reached = np.bincount(L.cand_layer[np.isfinite(dist[:n_c])], minlength=L.n) > 0
        if reached.all():
            break
        seg |= ~reached & np.concatenate([[True], reached[:-1]])
    chosen = np.full(L.n, -1, dtype=np.int64)
    ends = np.flatnonzero(np.concatenate([seg[1:], [True]]))
    pred_l = pred.tolist()
    layer_l = L.cand_layer.tolist()
    for t in ends:
        block = dist[L.start[t]:L.start[t] + L.count[t]]
        c = int(L.start[t] + np.argmin(block))
        while 0 <= c != S:
            chosen[layer_l[c]] = c
            c = pred_l[c]
    return chosen, seg, dist[:n_c]


def _assemble(
    index: RoadIndex,
    route: PlannedRoute,
    L: _Layers,
    chosen: np.ndarray,
    seg: np.ndarray,
    res: _Dist | list[_Dist],
    *,
    method: str,
    weight: str,
    back_tol_m: float,
    at_nodes: bool = False,
    sigma_z: float | None = None,
    beta: float | None = None,
) -> MatchedRoute:
    """Turn the chosen candidate per layer into an ordered list of edge visits."""
    leave, arrive = _ends(index, L, at_nodes=at_nodes)
    ce = L.cand_edge[chosen]
    cf = L.cand_frac[chosen]
    same = ce[1:] == ce[:-1]
    fwd = same & (cf[1:] >= cf[:-1])
    hold = same & ~fwd & ((cf[:-1] - cf[1:]) * index.edge_length[ce[1:]] <= back_tol_m)
    new = np.concatenate([[True], ~(fwd | hold) | seg[1:]])
    first = np.flatnonzero(new)  # layer opening each group of layers on one edge
    group = np.cumsum(new) - 1
    gmax = np.maximum.reduceat(cf, first)
    visits: list[list[Any]] = []  # [edge, start, end, starts_piece]
    group_visit = np.empty(len(first), dtype=np.int64)
    for k, t in enumerate(first.tolist()):
        e = int(ce[t])
        if seg[t]:
            visits.append([e, float(cf[t]), float(gmax[k]), True])
        else:
            a, b = int(chosen[t - 1]), int(chosen[t])
            if not (at_nodes and cf[t - 1] <= 0.0):  # else it leaves from u: e not driven
                visits[-1][2] = 1.0
            r = res[t - 1] if isinstance(res, list) else res
            nodes = r.node_path(int(leave[a]), int(arrive[b]))
            visits.extend([pe, 0.0, 1.0, False] for pe in index.edges_between(weight, nodes))
            on = 1.0 if at_nodes and cf[t] >= 1.0 else 0.0  # arrived at v without driving e
            visits.append([e, on, float(gmax[k]), False])
        group_visit[k] = len(visits) - 1
    point_visit = np.full(len(route), -1, dtype=np.int64)
    point_off = np.full(len(route), np.nan)
    point_visit[L.point] = group_visit[group]
    point_off[L.point] = cf
    breaks = tuple(int(p) for p in L.point[1:][seg[1:]])
    # drop visits of zero length (a point exactly on a node), keeping at least one; a point on
    # a dropped visit moves to the start of the next kept visit (or the end of the last one)
    keep = np.array([v[2] - v[1] > 1e-12 for v in visits])
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
        edges=tuple(index.edge(int(e)) for e in edges_pos),
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


# --------------------------------------------------------------------------------------------
# errors about points off the network


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
    d = float(index.nearest_distance(xy[i:i + 1])[0])
    where = f"{d:,.0f} m from the nearest drivable road" if math.isfinite(d) else \
        "outside the area the road network's coordinate system covers"
    lon, lat = route.lonlat[i]
    return RouteInputError(
        f"point (lon {lon:.6f}, lat {lat:.6f}) is {where} (at most {limit_m:g} m allowed)",
        path=route.source or None,
        field=f"route {route.name!r} point {i}",
    )


# --------------------------------------------------------------------------------------------
# joining planned waypoints


def join_waypoints(
    index: RoadIndex, route: PlannedRoute, *, max_snap_m: float = MAX_SNAP_M
) -> MatchedRoute:
    """Join a route's waypoints by the fastest paths between them.

    Each waypoint is snapped to the nearest edge position (every edge within 2 m of the
    nearest counts, e.g. both directions of a two-way street, and the routing picks the
    cheapest), the edge is split at the projection, and consecutive waypoints are joined by the
    least-travel-time path; all choices are made jointly, so a waypoint on a two-way street
    is passed in the direction that makes the whole route fastest.

    Parameters
    ----------
    index
        Index of the road graph.
    route
        The planned route (its points are waypoints, all of them visited in order).
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
    if not max_snap_m > 0 or not math.isfinite(max_snap_m):
        raise OptionError(f"max_snap_m must be a positive number, got {max_snap_m!r}",
                          field="max_snap_m")
    xy = index.project(route.lonlat)
    point, edge, dist, frac = index.candidates(xy, max_snap_m)
    have = np.bincount(point, minlength=len(route)) > 0
    if not have.all():
        raise _off_network(index, route, xy, np.flatnonzero(~have), max_snap_m)
    head = np.concatenate([[True], point[1:] != point[:-1]])
    nearest = np.minimum.reduceat(dist, np.flatnonzero(head))[np.cumsum(head) - 1]
    near = dist <= nearest + _TIE_M
    L = _layers(len(route), point[near], edge[near], dist[near], frac[near])
    # per transition a first bound on the fastest time: 1.5 x straight distance at the
    # median speed plus 30 s; the result is checked optimal below, or recomputed wider
    gap = np.hypot(*np.diff(xy[L.point], axis=0).T)
    limit = 1.5 * gap / max(index.median_speed, 0.5) + 30.0
    em = np.zeros(len(L.cand_layer))
    for attempt in range(4):
        if attempt == 3:
            limit = np.full(L.n - 1, np.inf)
        pair_t, ia, ib, cost, res = _route_costs(index, L, weight="time", limit=limit,
                                                 back_tol_m=0.0, at_nodes=True)
        chosen, seg, best = _viterbi(L, em, pair_t, ia, ib, cost)
        if not seg[1:].any():
            # a pair left out at transition t costs more than limit[t], so a chain using it
            # costs more than limit[t] + the least costs of the other transitions: the chain
            # found is optimal when it is no dearer than every such bound
            m_t = np.full(L.n - 1, np.inf)
            np.minimum.at(m_t, pair_t, cost)
            found = float(best[chosen[-1]]) - L.n * _EPS
            slack = float(np.min(limit - m_t))
            if found - float(m_t.sum()) <= slack + 1e-9:
                break
            limit = limit * 3.0
        elif attempt < 3:
            limit = np.where(seg[1:], np.inf, limit)
        else:
            t = int(np.flatnonzero(seg[1:])[0])
            raise RouteInputError(
                f"no drivable path from point {int(L.point[t])} to point {int(L.point[t + 1])} "
                "(one-way streets or a road not connected to the rest)",
                path=route.source or None,
                field=f"route {route.name!r} point {int(L.point[t + 1])}",
            )
    out = _assemble(index, route, L, chosen, seg, res, method="join", weight="time",
                    back_tol_m=0.0, at_nodes=True)
    logger.debug("join_waypoints %r: %d edges, %.0f m, %.0f s", route.name, len(out),
                 out.length_m, out.time_s)
    return out


# --------------------------------------------------------------------------------------------
# HMM map matching of recorded traces


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


def _positive(value: float, name: str) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        v = math.nan
    if not v > 0 or not math.isfinite(v):
        raise OptionError(f"{name} must be a positive number or 'estimate', got {value!r}",
                          field=name)
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
    shortest driving distance (following one-way streets; forward moves along one edge are
    measured on the edge, a step back of at most 2 sigma_z on one edge counts as standing
    still); Viterbi decoding in log space. Fixes within 2 sigma_z of the last kept fix are
    dropped (required points are kept). Where no route within ``max_detour_m`` of extra
    driving joins two consecutive fixes the chain is broken and restarted, and the break is
    reported in :attr:`MatchedRoute.breaks`. Fixes with no road within the radius are dropped.

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
        Transition scale (m); ``"estimate"`` decodes once with the default, then sets beta to
        the median of ``|straight - route|`` along that match / ln 2 and decodes again; None
        uses 2 x sigma_z [practice: chosen on synthetic traces, see tests/test_matching.py].
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
    xy = index.project(route.lonlat)
    if sigma_z == "estimate":
        near = index.nearest_distance(xy)
        ok = near[np.isfinite(near)]
        if not len(ok):
            raise _off_network(index, route, xy, np.arange(len(route)), 200.0)
        sigma = max(0.5, _MAD_TO_SIGMA * float(np.median(ok)))
    else:
        sigma = _positive(sigma_z, "sigma_z")
    radius = (max(50.0, 6.0 * sigma) if search_radius_m is None
              else _positive(search_radius_m, "search_radius_m"))
    detour = _positive(max_detour_m, "max_detour_m")
    keep = _thin(xy, 2.0 * sigma, route.required)
    kept = np.flatnonzero(keep)
    point, edge, dist, frac = index.candidates(
        xy[kept], radius, spread=PRUNE_SIGMAS * sigma, max_per_point=MAX_CANDIDATES // 2
    )
    point = kept[point]
    have = np.zeros(len(route), dtype=bool)
    have[point] = True
    missing = kept[~have[kept]]
    if have.sum() < 2 or len(missing) > 0.5 * len(kept):
        raise _off_network(index, route, xy, missing, radius)
    L = _layers(len(route), point, edge, dist, frac)
    gc = np.hypot(*np.diff(xy[L.point], axis=0).T)
    limit = float(gc.max()) + detour
    back_tol = 2.0 * sigma
    pair_t, ia, ib, rd, res = _route_costs(index, L, weight="length", limit=limit,
                                           back_tol_m=back_tol)
    diff = np.abs(gc[pair_t] - rd)
    plausible = rd <= gc[pair_t] + detour
    em = 0.5 * (L.cand_dist / sigma) ** 2
    b = 2.0 * sigma if beta is None or beta == "estimate" else _positive(beta, "beta")
    chosen, seg, _ = _viterbi(L, em, pair_t, ia, ib, np.where(plausible, diff / b, np.inf))
    if beta == "estimate":
        # difference along the chosen chain, per transition inside a piece
        lookup = {(int(a), int(c)): k for k, (a, c) in enumerate(zip(ia, ib, strict=True))}
        along = [diff[lookup[(int(chosen[t]), int(chosen[t + 1]))]]
                 for t in range(L.n - 1) if not seg[t + 1]]
        if along:
            b = max(0.5, float(np.median(along)) / math.log(2.0))
            chosen, seg, _ = _viterbi(L, em, pair_t, ia, ib,
                                      np.where(plausible, diff / b, np.inf))
    out = _assemble(index, route, L, chosen, seg, res, method="match", weight="length",
                    back_tol_m=back_tol, sigma_z=sigma, beta=b)
    if out.breaks:
        logger.info("match_trace %r: chain broken and restarted at points %s", route.name,
                    list(out.breaks))
    if len(missing):
        logger.info("match_trace %r: %d fixes have no road within %.0f m", route.name,
                    len(missing), radius)
    return out


# --------------------------------------------------------------------------------------------
# choosing per route


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
    is at most ``interval_s`` (10 s, the 1-10 s of GPS loggers). Anything else is a list of
    waypoints to be joined by fastest paths.
    """
    if len(route) < 3:
        return False
    if _median_spacing_m(route) < spacing_m:
        return True
    if route.times is not None:
        steps = np.array([(b - a).total_seconds() for a, b in
                          zip(route.times[:-1], route.times[1:], strict=True)])
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
    if is_dense_trace(route):
        return match_trace(index, route, sigma_z=sigma_z, beta=beta,
                           search_radius_m=search_radius_m)
    return join_waypoints(index, route, max_snap_m=max_snap_m)
