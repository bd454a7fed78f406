"""The road index: one spatial and routing index per road graph, built once.

:class:`RoadIndex` holds an STRtree of the edge geometries, CSR matrices of the graph weighted
by travel time and by length, node id arrays and the WGS84 -> graph CRS transformer; it finds
candidate edge positions near points and runs bounded Dijkstra searches (``indices`` = the
distinct nodes routes leave from, ``limit`` = the largest cost that can matter) on the CSR
matrix, never networkx in a loop. :class:`_Dist` holds one such bounded search.
"""

from __future__ import annotations

import logging
import math
from collections.abc import Hashable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import numpy as np
import pyproj
import scipy.sparse as sp
import shapely
from scipy.sparse.csgraph import dijkstra
from shapely import LineString, STRtree

from routerisk.errors import EmptyNetworkError
from routerisk.matching.common import _CELL_M, _EPS, _MAX_CELLS, _SUBGRAPH_MIN_NODES, Edge
from routerisk.matching.frames import frame_arrays

if TYPE_CHECKING:
    import networkx as nx

# The package's logger, so that log lines name ``routerisk.matching`` as before the split.
logger = logging.getLogger(__package__)


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
        nodes = list(graph.nodes)
        node_pos: dict[Hashable, int] = {n: i for i, n in enumerate(nodes)}
        node_xy = np.array([(graph.nodes[n]["x"], graph.nodes[n]["y"]) for n in nodes], dtype=float)
        m = graph.number_of_edges()
        eu = np.empty(m, dtype=np.int64)
        ev = np.empty(m, dtype=np.int64)
        keys: list[Hashable] = []
        geoms = np.empty(m, dtype=object)
        length = np.empty(m)
        ttime = np.empty(m)
        for i, (u, v, k, d) in enumerate(graph.edges(keys=True, data=True)):
            iu, iv = node_pos[u], node_pos[v]
            eu[i], ev[i] = iu, iv
            keys.append(k)
            g = d.get("geometry")
            if g is None:
                g = LineString([node_xy[iu], node_xy[iv]])
            geoms[i] = g
            length[i] = float(d["length"]) if d.get("length") is not None else g.length
            if d.get("travel_time") is not None:
                ttime[i] = float(d["travel_time"])
            elif d.get("speed_kph"):
                ttime[i] = length[i] / (float(d["speed_kph"]) / 3.6)
            else:
                raise ValueError(f"edge {(u, v, k)} has neither travel_time nor speed_kph")
        self._setup(crs, nodes, node_pos, node_xy, (eu, ev, keys), geoms, length, ttime)

    @classmethod
    def from_frames(cls, nodes: Any, edges: Any, crs: Any) -> RoadIndex:
        """Return the index of ``osmnx.convert.graph_from_gdfs(nodes, edges)``, without it.

        The graph (graph attribute ``crs``) is not built: the arrays are read from the frames.

        ``edges`` is indexed by (u, v, key) with ``geometry``, ``length`` and ``travel_time``
        or ``speed_kph`` columns; ``nodes`` by id with ``x`` and ``y``. Nodes and edges are
        taken in the graph's order (nodes as the edges first name them, then the nodes no
        edge touches; edges grouped by u, then by v in order of first appearance), so every
        array equals that of ``RoadIndex(graph)`` (tests/test_matching.py).
        """
        parts = frame_arrays(nodes, edges, crs)
        self = cls.__new__(cls)
        self._setup(crs, *parts)
        return self

    @classmethod
    def of_network(cls, net: Any) -> RoadIndex:
        """Return the index of ``net.graph`` (a folder ``Network``), read from its frames.

        The graph itself is not built (see :meth:`from_frames`).
        """
        return cls.from_frames(net.nodes, net.edges, net.edges.crs.to_string())

    def _setup(
        self,
        crs: Any,
        nodes: list[Hashable],
        node_pos: dict[Hashable, int],
        node_xy: np.ndarray,
        ends: tuple[np.ndarray, np.ndarray, list[Hashable]],
        geoms: np.ndarray,
        length: np.ndarray,
        ttime: np.ndarray,
    ) -> None:
        self.crs = crs
        self.node_ids = np.empty(len(nodes), dtype=object)
        self.node_ids[:] = nodes
        self.node_pos = node_pos
        self.node_xy = node_xy
        eu, ev, keys = ends
        m = len(eu)
        length = np.maximum(length, 0.0)
        ttime = np.maximum(ttime, _EPS)
        # geometry must run u -> v (osmnx convention); turn around any stored the other way
        first = shapely.get_coordinates(shapely.get_point(geoms, 0))
        last = shapely.get_coordinates(shapely.get_point(geoms, -1))
        fwd = np.hypot(*(first - self.node_xy[eu]).T) + np.hypot(*(last - self.node_xy[ev]).T)
        rev = np.hypot(*(first - self.node_xy[ev]).T) + np.hypot(*(last - self.node_xy[eu]).T)
        flip = rev + 1e-6 < fwd
        if flip.any():
            logger.warning(
                "RoadIndex turned %d edge geometries around to run u -> v", int(flip.sum())
            )
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
            c = coords[bounds[i] : bounds[i + 1]]
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
        return tuple(
            zip(u.tolist(), v.tolist(), [self.edge_key[int(p)] for p in positions], strict=True)
        )

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
        self,
        xy: np.ndarray,
        radius: float | np.ndarray,
        *,
        spread: float | np.ndarray | None = None,
        max_per_point: int | None = None,
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
            (self._time_keys, self._time_edge)
            if weight == "time"
            else (self._len_keys, self._len_edge)
        )
        pos = np.searchsorted(keys, a * self.n_nodes + b)
        return [int(e) for e in edge[pos]]
