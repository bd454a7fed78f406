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

Each has a ``*_many`` form taking a list of routes, which is much faster for many routes: the
work is done for all of them at once (one candidate search, one Dijkstra per distinct source
node, one Viterbi decoding).

All return :class:`MatchedRoute`: the ordered edges ``(u, v, key)`` driven, the share of each
edge driven (the first and last edges are usually partial), and the total length and time.

How it works
------------
Both decoders solve one problem: choose one candidate edge position per point so that the
summed cost (emission plus transition) is least. The chain of points is a layered graph
(candidates of point t link to candidates of point t + 1), so the Viterbi recursion is a
shortest path from one source through that acyclic graph; it runs in compiled code as
``scipy.sparse.csgraph.dijkstra`` on a CSR matrix. Route costs between candidates come from
bounded Dijkstra runs on the road matrix (``indices`` = the distinct nodes routes leave from,
``limit`` = the largest cost that can matter), never from networkx in a loop.
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
    "MAX_DETOUR_M",
    "MAX_SNAP_M",
    "SIGMA_Z_M",
    "MatchedRoute",
    "RoadIndex",
    "is_dense_trace",
    "join_many",
    "join_waypoints",
    "match_many",
    "match_trace",
    "to_edges",
    "to_edges_many",
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
#: Candidates of a fix farther than this many sigma_z beyond its nearest road (in quadrature)
#: are dropped: their emission is below exp(-18) of the nearest's [practice].
PRUNE_SIGMAS = 6.0
#: At most this many candidate geometries per fix, the nearest (both directions count once).
MAX_CANDIDATE_GEOMETRIES = 5
#: A step back along one edge of at most this many sigma_z is GPS jitter, not reversing: the
#: along-edge difference of two fixes has a standard deviation of sqrt(2) sigma_z, so 3 of
#: those cover 99.7 % of it [practice].
_HOLD_SIGMAS = 4.25
#: Default transition scale beta as a multiple of sigma_z [practice].
_BETA_PER_SIGMA = 0.5
#: Waypoint snapping keeps every edge within this of the nearest one and lets routing choose (m).
_TIE_M = 2.0
#: Median absolute deviation to standard deviation of a normal law (common practice).
_MAD_TO_SIGMA = 1.4826
_EPS = 1e-9
#: Graphs with more nodes than this run bounded Dijkstra on the part a route can reach.
_SUBGRAPH_MIN_NODES = 20_000
#: Grid cell of the candidate search (m), grown so that the grid has at most _MAX_CELLS cells.
_CELL_M = 50.0
_MAX_CELLS = 4_000_000
#: Dijkstra limits are rounded up to these steps, so that sources share runs.
_LIMIT_STEPS = np.concatenate([15.0 * 2.0 ** np.arange(12), [np.inf]])
#: Entries of one Dijkstra output block (sources x nodes), bounding memory.
_BLOCK_ENTRIES = 4_000_000
#: Routes are decoded in groups of about this many points, bounding memory.
_GROUP_POINTS = 60_000

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
    dist: np.ndarray | None
    pred: np.ndarray

    def rows(self, src: np.ndarray) -> np.ndarray:
        """Return the row of each source node position (any row for other nodes)."""
        if not len(self.sources):
            return np.zeros(len(src), dtype=np.int64)
        return np.minimum(np.searchsorted(self.sources, src), len(self.sources) - 1)

    def cols(self, dst: np.ndarray) -> np.ndarray:
        """Return the column of each node position; -1 (a column of inf) outside the cut."""
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


def _expand(counts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return (owner, rank) for ``counts[i]`` items owned by each i, in order."""
    owner = np.repeat(np.arange(len(counts)), counts)
    rank = np.arange(len(owner)) - np.repeat(np.cumsum(counts) - counts, counts)
    return owner, rank


class RoadIndex:
    """Spatial and routing index of a projected road graph, built once per graph.

    Parameters
    ----------
    graph
        Projected ``networkx.MultiDiGraph`` with the road-graph conventions: its ``crs``
        graph attribute, node ``x``/``y``, edge ``geometry`` (u -> v), ``length`` (m) and
        ``travel_time`` (s). A missing geometry falls back to the straight segment, a missing
        ``travel_time`` to ``length / speed_kph``; a geometry stored v -> u is turned around.

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
    Candidate search does not use the STRtree: the straight segments of each distinct
    geometry (the two directions of a two-way street share one) sit in a uniform 50 m grid,
    and points are projected on them with numpy, several times faster for many points than
    shapely's per-pair distance and line_locate_point.
    """

    def __init__(self, graph: nx.MultiDiGraph) -> None:
        crs = graph.graph.get("crs")
        if not crs:
            raise ValueError("the road graph has no 'crs' graph attribute")
        if graph.number_of_edges() == 0:
            raise EmptyNetworkError("the road graph has no edges")
        self.crs = crs
        nodes = list(graph.nodes)
        self.node_ids = np.empty(len(nodes), dtype=object)
        self.node_ids[:] = nodes
        self.node_pos: dict[Hashable, int] = {n: i for i, n in enumerate(nodes)}
        self.node_xy = np.array([(graph.nodes[n]["x"], graph.nodes[n]["y"]) for n in nodes],
                                dtype=float)
        m = graph.number_of_edges()
        eu = np.empty(m, dtype=np.int64)
        ev = np.empty(m, dtype=np.int64)
        keys: list[Hashable] = []
        geoms = np.empty(m, dtype=object)
        length = np.empty(m)
        ttime = np.empty(m)
        for i, (u, v, k, d) in enumerate(graph.edges(keys=True, data=True)):
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
        self._xy_min = self.node_xy.min(axis=0)
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
            starts = shapely.get_point(self.edge_geom[np.asarray(reps)[lost]], 0)
            pa = shapely.get_coordinates(starts)
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
        self._build_grid(a, b)

    def _build_grid(self, a: np.ndarray, b: np.ndarray) -> None:
        """Register each segment in the cells of a uniform grid that its bounding box meets."""
        lo = np.minimum(a, b)
        hi = np.maximum(a, b)
        origin = lo.min(axis=0) - 1.0
        extent = hi.max(axis=0) + 1.0 - origin
        cell = max(_CELL_M, math.sqrt(float(extent[0] * extent[1]) / _MAX_CELLS))
        nx_, ny_ = (np.floor(extent / cell).astype(np.int64) + 1).tolist()
        c0 = np.floor((lo - origin) / cell).astype(np.int64)
        c1 = np.floor((hi - origin) / cell).astype(np.int64)
        ncx, ncy = c1[:, 0] - c0[:, 0] + 1, c1[:, 1] - c0[:, 1] + 1
        seg, k = _expand(ncx * ncy)
        cx = c0[seg, 0] + k // ncy[seg]
        cy = c0[seg, 1] + k % ncy[seg]
        key = cx * ny_ + cy
        order = np.argsort(key, kind="stable")
        self._cell_seg = seg[order]
        self._cell_ptr = np.searchsorted(key[order], np.arange(nx_ * ny_ + 1))
        self._grid = (float(origin[0]), float(origin[1]), cell, nx_, ny_)

    def edge(self, i: int) -> Edge:
        """Return the ``(u, v, key)`` of edge position i."""
        return (self.node_ids[self.edge_u[i]], self.node_ids[self.edge_v[i]], self.edge_key[i])

    def edges(self, positions: np.ndarray) -> tuple[Edge, ...]:
        """Return the ``(u, v, key)`` of many edge positions."""
        u = self.node_ids[self.edge_u[positions]]
        v = self.node_ids[self.edge_v[positions]]
        return tuple(zip(u.tolist(), v.tolist(), [self.edge_key[int(p)] for p in positions],
                         strict=True))

    def spatial_order(self, nodes: np.ndarray) -> np.ndarray:
        """Return an order of node positions that keeps nearby nodes together (1 km cells)."""
        cell = np.floor((self.node_xy[nodes] - self._xy_min) / 1000.0).astype(np.int64)
        return np.lexsort((cell[:, 1], cell[:, 0]))

    def project(self, lonlat: np.ndarray) -> np.ndarray:
        """Return (N, 2) graph-CRS coordinates of (N, 2) lon, lat (NaN where invalid)."""
        ll = np.asarray(lonlat, dtype=float)
        with np.errstate(all="ignore"):
            x, y = self.to_graph.transform(ll[:, 0], ll[:, 1], errcheck=False)
        xy = np.column_stack([np.asarray(x, dtype=float), np.asarray(y, dtype=float)])
        xy[~np.isfinite(xy).all(axis=1)] = np.nan
        return xy

    def candidates(
        self, xy: np.ndarray, radius: float | np.ndarray, *,
        spread: float | np.ndarray | None = None, max_per_point: int | None = None,
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Return the edge positions within ``radius`` of each point.

        Parameters
        ----------
        xy
            (N, 2) projected points.
        radius
            Search radius (m), one for all points or one per point.
        spread
            If given (one or per point), keep only positions with
            ``d**2 <= nearest**2 + spread**2`` (nearest: the point's closest road).
        max_per_point
            If given, keep at most this many geometries per point, the nearest (the two
            directions of a two-way street share one geometry).

        Returns
        -------
        point, edge, distance, offset
            Flat arrays grouped by point (ascending): the point's row in ``xy``, the edge
            position, the point-to-edge distance (m) and the projection's share along the edge
            from u (0..1). Points with non-finite coordinates get none.
        """
        ok = np.flatnonzero(np.isfinite(xy).all(axis=1))
        px, py = xy[ok, 0], xy[ok, 1]
        r_pt = np.broadcast_to(np.asarray(radius, dtype=float), (len(xy),))[ok]
        sp_pt = None
        if spread is None:
            qi, g, d, along = self._near(px, py, r_pt)
        else:
            # two passes, same result as one: a point whose nearest road is within `spread`
            # keeps nothing beyond sqrt(2) x spread, so search that far first and search the
            # full radius only for the others
            sp_pt = np.broadcast_to(np.asarray(spread, dtype=float), (len(xy),))[ok]
            r1 = np.minimum(r_pt, math.sqrt(2.0) * sp_pt)
            qi, g, d, along = self._near(px, py, r1)
            nearest = np.full(len(ok), np.inf)
            np.minimum.at(nearest, qi, d)
            redo = np.flatnonzero((nearest > sp_pt) & (r_pt > r1))
            if len(redo):
                q2, g2, d2, a2 = self._near(px[redo], py[redo], r_pt[redo])
                stay = ~np.isin(qi, redo)
                qi = np.concatenate([qi[stay], redo[q2]])
                order = np.argsort(qi, kind="stable")
                qi = qi[order]
                g = np.concatenate([g[stay], g2])[order]
                d = np.concatenate([d[stay], d2])[order]
                along = np.concatenate([along[stay], a2])[order]
        if not len(qi):
            nothing = np.empty(0, dtype=np.int64)
            return nothing, nothing.copy(), np.empty(0), np.empty(0)
        if sp_pt is not None:
            first = np.concatenate([[True], qi[1:] != qi[:-1]])
            nearest = np.minimum.reduceat(d, np.flatnonzero(first))[np.cumsum(first) - 1]
            sp_ = sp_pt[qi]
            keep = np.flatnonzero(d * d <= nearest * nearest + sp_ * sp_)
            qi, g, d, along = qi[keep], g[keep], d[keep], along[keep]
        if max_per_point is not None and len(qi):
            count = np.bincount(qi)
            crowded = count[qi] > max_per_point
            if crowded.any():  # rank only the points with too many, by distance
                sub = np.flatnonzero(crowded)
                order = sub[np.lexsort((g[sub], d[sub], qi[sub]))]
                c = count[np.unique(qi[sub])]
                rank = np.arange(len(order)) - np.repeat(np.cumsum(c) - c, c)
                keep = np.ones(len(qi), dtype=bool)
                keep[order[rank >= max_per_point]] = False
                keep = np.flatnonzero(keep)
                qi, g, d, along = qi[keep], g[keep], d[keep], along[keep]
        frac = along / self._grp_len[g]
        cnt = self._grp_count[g]
        rep = np.repeat(np.arange(len(g)), cnt)
        slot = self._grp_ptr[g][rep] + (np.arange(len(rep)) - np.repeat(np.cumsum(cnt) - cnt, cnt))
        # within 1 mm of an end is the end itself (a point given at a node)
        glen = self._grp_len[g]
        frac = np.where(along < 1e-3, 0.0, np.where(glen - along < 1e-3, 1.0, frac))
        f = frac[rep]
        f = np.clip(np.where(self._grp_rev[slot], 1.0 - f, f), 0.0, 1.0)
        return ok[qi[rep]], self._grp_edge[slot].astype(np.int64), d[rep], f

    def _near(
        self, px: np.ndarray, py: np.ndarray, r: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Return (point, geometry, distance, distance along) of geometries within r.

        One row per (point, geometry), from the nearest of its segments, sorted by point.
        """
        qi, si = self._grid_pairs(px, py, r)
        qx, qy = px[qi] - self._seg_ax[si], py[qi] - self._seg_ay[si]
        dx, dy, l2 = self._seg_dx[si], self._seg_dy[si], self._seg_l2[si]
        t = np.clip((qx * dx + qy * dy) / l2, 0.0, 1.0)  # l2 > 0: zero-length segments dropped
        d = np.hypot(qx - t * dx, qy - t * dy)
        r_q = r[qi]
        near = np.flatnonzero(d <= r_q)
        qi, si, t, d, r_q = qi[near], si[near], t[near], d[near], r_q[near]
        if not len(qi):
            return qi, qi.copy(), d, d.copy()
        # sort on one int64 key made of point, geometry and the distance quantised to 2**-20
        # of the radius, then keep the first row of each (point, geometry)
        g = self._seg_grp[si]
        pg = qi.astype(np.int64) * len(self._grp_len) + g
        if int(pg.max()) < 2**42:
            qd = np.minimum((d / np.maximum(r_q, 1e-9) * 2**20).astype(np.int64), 2**20 - 1)
            order = np.argsort(pg * 2**20 + qd)
        else:
            order = np.lexsort((d, pg))
        pg = pg[order]
        take = order[np.flatnonzero(np.concatenate([[True], pg[1:] != pg[:-1]]))]
        along = self._seg_cum[si[take]] + t[take] * self._seg_len[si[take]]
        return qi[take], g[take], d[take], along

    def _grid_pairs(
        self, px: np.ndarray, py: np.ndarray, r: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray]:
        """Return (point, segment) pairs whose grid cells meet the point's square of side 2r.

        A pair can repeat when a segment is registered in several of those cells.
        """
        x0, y0, cell, nx_, ny_ = self._grid
        cx0 = np.clip(np.floor((px - r - x0) / cell), 0, nx_ - 1).astype(np.int64)
        cx1 = np.clip(np.floor((px + r - x0) / cell), -1, nx_ - 1).astype(np.int64)
        cy0 = np.clip(np.floor((py - r - y0) / cell), 0, ny_ - 1).astype(np.int64)
        cy1 = np.clip(np.floor((py + r - y0) / cell), -1, ny_ - 1).astype(np.int64)
        ncx = np.maximum(cx1 - cx0 + 1, 0)
        ncy = np.maximum(cy1 - cy0 + 1, 0)
        pt, k = _expand(ncx * ncy)
        key = (cx0[pt] + k // ncy[pt]) * ny_ + cy0[pt] + k % ncy[pt]
        lo = self._cell_ptr[key]
        cnt = self._cell_ptr[key + 1] - lo
        j, k2 = _expand(cnt)
        return pt[j], self._cell_seg[lo[j] + k2]

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


def _layers(n_points: int, point: np.ndarray, edge: np.ndarray, dist: np.ndarray,
            frac: np.ndarray) -> _Layers:
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
            mine = sel[by[cuts[k]:cuts[k + 1]]]
            res = index.distances(weight, nodes[order[k * per_block:(k + 1) * per_block]],
                                  float(_LIMIT_STEPS[step]))
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
            (np.concatenate([pair_data, em[heads] + _EPS]),
             np.concatenate([prs.b, heads]).astype(itype), indptr),
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


# --------------------------------------------------------------------------------------------
# points off the network


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



# --------------------------------------------------------------------------------------------
# joining planned waypoints


def _check_snap(value: float) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        v = math.nan
    if not v > 0 or not math.isfinite(v):
        raise OptionError(f"max_snap_m must be a positive number, got {value!r}",
                          field="max_snap_m")
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
    cost, routing = _pair_costs(index, lay, prs, weight="time", limit_t=limit_t,
                                back_tol=np.zeros(len(lay.cand_layer)), at_nodes=True)
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
        broken = seg[lo + 1:hi]
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
            m = m_t[lo:hi - 1]
            if found - float(m.sum()) > float(np.min(limit_t[lo:hi - 1] - m)) + 1e-9:
                retry.append(r)
                continue
        results[r] = _assemble(index, route, int(offsets[r]), lay, lo, hi, chosen, seg, routing,
                               method="join", weight="time", back_tol_m=0.0, at_nodes=True)
    if retry:
        logger.debug("join: %d route(s) need wider Dijkstra bounds", len(retry))
        again = _join_group(index, [routes[r] for r in retry], max_snap_m, attempt + 1)
        results.update(zip(retry, again, strict=True))
    return [results[r] for r in range(len(routes))]


# --------------------------------------------------------------------------------------------
# HMM map matching of recorded traces


def _positive(value: object, name: str) -> float:
    try:
        v = float(value)  # type: ignore[arg-type]
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
    return match_many(index, [route], sigma_z=sigma_z, beta=beta,
                      search_radius_m=search_radius_m, max_detour_m=max_detour_m)[0]


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
        out.extend(_match_group(index, [routes[i] for i in group], sigma_z=sigma_z, beta=beta,
                                search_radius_m=search_radius_m, detour=detour))
    return out


def _estimate_sigmas(
    index: RoadIndex, routes: list[PlannedRoute], xy: np.ndarray, offsets: np.ndarray
) -> np.ndarray:
    """Return per route 1.4826 x the median distance of its fixes to the nearest road."""
    near = index.nearest_distance(xy)
    out = np.empty(len(routes))
    for r, route in enumerate(routes):
        d = near[offsets[r]:offsets[r + 1]]
        d = d[np.isfinite(d)]
        if not len(d):
            raise _off_network(index, route, xy[offsets[r]:offsets[r + 1]],
                               np.arange(len(route)), 200.0)
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
    sigma_r = (_estimate_sigmas(index, routes, xy, offsets) if sigma_z == "estimate"
               else np.full(n_r, float(sigma_z)))
    radius_r = (np.maximum(50.0, 6.0 * sigma_r) if search_radius_m is None
                else np.full(n_r, float(search_radius_m)))
    keep = np.concatenate([
        _thin(xy[offsets[r]:offsets[r + 1]], 2.0 * sigma_r[r], routes[r].required)
        for r in range(n_r)
    ]) if n_r else np.zeros(0, dtype=bool)
    kept = np.flatnonzero(keep)
    point, edge, dist, frac = index.candidates(
        xy[kept], radius_r[route_of[kept]], spread=PRUNE_SIGMAS * sigma_r[route_of[kept]],
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
    rd, routing = _pair_costs(index, lay, prs, weight="length", limit_t=gc_t + detour,
                              back_tol=_HOLD_SIGMAS * sig_c, at_nodes=False)
    gc = gc_t[prs.t]
    diff = np.abs(gc - rd)
    plausible = rd <= gc + detour
    em = 0.5 * (lay.cand_dist / sig_c) ** 2
    beta_r = (_BETA_PER_SIGMA * sigma_r if beta is None or beta == "estimate"
              else np.full(n_r, float(beta)))
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
        m = _assemble(index, route, int(offsets[r]), lay, lo, hi, chosen, seg, routing,
                      method="match", weight="length",
                      back_tol_m=_HOLD_SIGMAS * float(sigma_r[r]),
                      at_nodes=False, sigma_z=float(sigma_r[r]), beta=float(beta_r[r]))
        if m.breaks:
            logger.info("match %r: chain broken and restarted at points %s", route.name,
                        list(m.breaks))
        out.append(m)
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
    is at most ``interval_s`` (10 s, covering the 1-10 s of GPS loggers). Anything else is a
    list of waypoints, joined by fastest paths.
    """
    if len(route) < 3:
        return False
    if _median_spacing_m(route) < spacing_m:
        return True
    if route.times is not None:
        steps = np.array([(b - a).total_seconds()
                          for a, b in zip(route.times[:-1], route.times[1:], strict=True)])
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
    return to_edges_many(index, [route], max_snap_m=max_snap_m, sigma_z=sigma_z, beta=beta,
                         search_radius_m=search_radius_m)[0]


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
    matched = iter(match_many(index, traces, sigma_z=sigma_z, beta=beta,
                              search_radius_m=search_radius_m) if traces else [])
    joined = iter(join_many(index, plans, max_snap_m=max_snap_m) if plans else [])
    return [next(matched) if d else next(joined) for d in dense]
