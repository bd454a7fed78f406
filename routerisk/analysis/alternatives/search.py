"""Array shortest paths and the supported points of a leg's time / risk Pareto front.

The supported points are found exactly by the dichotomic weighted-sum search (Aneja, Y.P. and
Nair, K.P.K. (1979), "Bicriteria transportation problem", Management Science 25(1):73-78); every
shortest path is a Dijkstra run of ``scipy.sparse.csgraph`` on arrays. See
:mod:`routerisk.analysis.alternatives` for how the search is bounded.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import dijkstra

from routerisk.analysis.scoring import Scorer

EPS = 1e-9
_TINY = 1e-12  # csgraph needs positive arc costs


class Arcs:
    """Directed arcs between ``n`` nodes, ready for repeated Dijkstra runs on new costs.

    Arcs are sorted by (source, target) once; parallel arcs are collapsed to the cheapest
    for each cost vector. Costs passed to :meth:`solve` are aligned with :attr:`rows`.

    Parameters
    ----------
    src, dst
        Node positions (``0 .. n-1``) of each arc.
    n
        Number of nodes.
    rows
        An identifier of each arc (the network's edge row); kept in arc order.
    """

    def __init__(self, src: np.ndarray, dst: np.ndarray, n: int, rows: np.ndarray) -> None:
        order = np.lexsort((dst, src))
        s, d = src[order], dst[order]
        self.rows = np.asarray(rows)[order]
        self.src, self.dst, self.n = s, d, int(n)
        new = np.ones(len(s), dtype=bool)
        new[1:] = (s[1:] != s[:-1]) | (d[1:] != d[:-1])
        self.starts = np.flatnonzero(new)
        self.group = np.cumsum(new) - 1
        self.multi = len(self.starts) < len(s)
        pair_s = s[self.starts]
        self.indices = d[self.starts].astype(np.int32)
        self.indptr = np.searchsorted(pair_s, np.arange(self.n + 1)).astype(np.int32)
        self.key = pair_s.astype(np.int64) * self.n + self.indices

    def matrix(self, cost: np.ndarray) -> tuple[csr_matrix, np.ndarray]:
        """Return the cheapest-arc matrix for ``cost`` and the arc chosen for each pair."""
        if self.multi:
            pmin = np.minimum.reduceat(cost, self.starts) if len(cost) else cost
            hit = np.flatnonzero(cost <= pmin[self.group])
            g = self.group[hit]
            first = np.ones(len(hit), dtype=bool)
            first[1:] = g[1:] != g[:-1]
            best = hit[first]
        else:
            pmin, best = cost, np.arange(len(cost))
        mat = csr_matrix(
            (np.maximum(pmin, _TINY), self.indices, self.indptr), shape=(self.n, self.n)
        )
        return mat, best

    def solve(
        self, cost: np.ndarray, origin: int, limit: float = np.inf
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Return (distance, predecessor, chosen arc per pair) from ``origin``.

        Arcs with infinite cost are closed; nodes farther than ``limit`` stay unreached.
        """
        mat, best = self.matrix(cost)
        dist, pred = dijkstra(
            mat, directed=True, indices=origin, return_predecessors=True, limit=limit
        )
        return dist, pred, best

    def path(
        self, pred: np.ndarray, best: np.ndarray, origin: int, target: int
    ) -> np.ndarray | None:
        """Return the arc positions of the path ``origin -> target`` (None if unreached)."""
        if origin == target:
            return np.zeros(0, dtype=np.int64)
        if pred[target] < 0:
            return None
        nodes = [target]
        while nodes[-1] != origin:
            nodes.append(int(pred[nodes[-1]]))
        nodes.reverse()
        a = np.asarray(nodes, dtype=np.int64)
        pair = np.searchsorted(self.key, a[:-1] * self.n + a[1:])
        return best[pair]


class RouteGraph:
    """Array form of the network for fast shortest paths (one row per directed edge)."""

    def __init__(self, scorer: Scorer) -> None:
        self.scorer = scorer
        idx = scorer.index
        u = idx.get_level_values(0).to_numpy()
        v = idx.get_level_values(1).to_numpy()
        self.node_ids = np.unique(np.concatenate([u, v]))
        self.node_of = {int(n): i for i, n in enumerate(self.node_ids)}
        self.src = np.searchsorted(self.node_ids, u)
        self.dst = np.searchsorted(self.node_ids, v)
        self.keys = idx.get_level_values(2).to_numpy()
        self.n = len(self.node_ids)
        self.m = len(u)
        rows = np.arange(self.m)
        self.arcs = Arcs(self.src, self.dst, self.n, rows)
        self._tt_mats: tuple[csr_matrix, csr_matrix] | None = None

    def shortest(
        self, cost: np.ndarray, origin: int, limit: float = np.inf
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Return (distance, predecessor, chosen arc per pair) from ``origin`` on ``cost``.

        ``cost`` has one value per edge row; infinite costs close edges. Parallel edges keep
        the cheapest. Pass the result to :meth:`path_edges`.
        """
        return self.arcs.solve(np.asarray(cost, dtype=float)[self.arcs.rows], origin, limit)

    def path_edges(
        self, pred: np.ndarray, best: np.ndarray, origin: int, target: int
    ) -> list[int] | None:
        """Return the edge rows of the path from ``origin`` to ``target`` (None if none)."""
        arcs = self.arcs.path(pred, best, origin, target)
        return None if arcs is None else [int(r) for r in self.arcs.rows[arcs]]

    def as_tuples(self, rows: Any) -> list[tuple[int, int, int]]:
        """Return (u, v, key) tuples of edge rows."""
        rows = np.asarray(rows, dtype=np.int64)
        u = self.node_ids[self.src[rows]]
        v = self.node_ids[self.dst[rows]]
        return [(int(a), int(b), int(k)) for a, b, k in zip(u, v, self.keys[rows], strict=True)]

    def time_tree(self, node: int, limit_s: float = np.inf, *, reverse: bool = False) -> np.ndarray:
        """Return the fastest times (seconds) from ``node``, or to it with ``reverse``.

        Nodes farther than ``limit_s`` are left at infinity (the search stops there).
        """
        if self._tt_mats is None:
            fwd, _ = self.arcs.matrix(self.scorer.tt[self.arcs.rows])
            self._tt_mats = (fwd, fwd.T.tocsr())
        mat = self._tt_mats[1 if reverse else 0]
        return dijkstra(mat, directed=True, indices=node, limit=limit_s)

    def leg(
        self,
        origin: int,
        target: int,
        budget_s: float = np.inf,
        *,
        d_from: np.ndarray | None = None,
    ) -> Leg | None:
        """Return the part of the network on paths ``origin -> target`` within ``budget_s``.

        An edge ``(u, v)`` is kept when the fastest time to ``u`` plus the edge plus the
        fastest time from ``v`` to the target fits the budget, so every path within the
        budget stays. ``d_from`` may pass the times from ``origin`` already computed (with a
        limit of at least ``budget_s``). Returns None when the target cannot be reached.
        """
        if d_from is None:
            d_from = self.time_tree(origin, budget_s)
        if not np.isfinite(d_from[target]) or d_from[target] > budget_s * (1 + 1e-9) + 1e-6:
            return None
        d_to = self.time_tree(target, budget_s, reverse=True)
        if origin == target:
            return Leg(self, None, origin, target, np.zeros(0), 0.0)
        through = d_from[self.src] + self.scorer.tt + d_to[self.dst]
        keep = np.isfinite(through)
        if np.isfinite(budget_s):
            keep &= through <= budget_s * (1 + 1e-9) + 1e-6
        rows = np.flatnonzero(keep)
        nodes = np.unique(np.concatenate([self.src[rows], self.dst[rows]]))
        arcs = Arcs(
            np.searchsorted(nodes, self.src[rows]),
            np.searchsorted(nodes, self.dst[rows]),
            len(nodes),
            rows,
        )
        o, t = int(np.searchsorted(nodes, origin)), int(np.searchsorted(nodes, target))
        return Leg(self, arcs, o, t, d_from[self.src[arcs.rows]], float(d_from[target]))


@dataclass
class Leg:
    """The searchable part of one leg: arcs (with network rows), ends, entry times."""

    graph: RouteGraph
    arcs: Arcs | None  # None for a leg that starts where it ends
    origin: int
    target: int
    enter_s: np.ndarray  # fastest arrival at each arc's start (seconds), aligned with arcs
    fastest_s: float

    @property
    def rows(self) -> np.ndarray:
        """Network edge rows of the arcs."""
        return np.zeros(0, dtype=np.int64) if self.arcs is None else self.arcs.rows

    def front(self, tt: np.ndarray, risk: np.ndarray) -> list[np.ndarray]:
        """Return the supported (time, risk) points, fast to safe, as edge rows.

        ``tt`` and ``risk`` are aligned with :attr:`rows`; infinite values close arcs.
        """
        if self.arcs is None:
            return [np.zeros(0, dtype=np.int64)]
        arcs = self.arcs

        def solve(
            a: float, b: float, bound: float = np.inf
        ) -> tuple[float, float, np.ndarray] | None:
            cost = a * tt + b * risk
            lim = bound * (1 + 1e-6) + 1e-9 if np.isfinite(bound) else np.inf
            _, pred, best = arcs.solve(cost, self.origin, lim)
            p = arcs.path(pred, best, self.origin, self.target)
            if p is None:
                return None
            return float(tt[p].sum()), float(risk[p].sum()), p

        fast = solve(1.0, 1e-9)
        safe = solve(1e-9, 1.0)
        if fast is None or safe is None:
            return []
        points = {fast[2].tobytes(): fast, safe[2].tobytes(): safe}
        stack = [(fast, safe)]
        while stack:
            p, q = stack.pop()
            # weight making p and q equal: a*(tp - tq) = b*(rq - rp)
            a, b = p[1] - q[1], q[0] - p[0]
            if a <= EPS or b <= EPS:
                continue
            line = a * p[0] + b * p[1]
            r = solve(a, b, line)
            if r is None or r[2].tobytes() in points:
                continue
            if a * r[0] + b * r[1] < line - 1e-9 * line:
                points[r[2].tobytes()] = r
                stack.extend([(p, r), (r, q)])
        out = sorted(points.values(), key=lambda x: (x[0], x[1]))
        return [arcs.rows[x[2]] for x in out]


def front_by_brute_force(pairs: list[tuple[float, float]]) -> list[tuple[float, float]]:
    """Return the supported points (lower convex hull of the non-dominated set) of pairs."""
    pts = sorted(set(pairs))
    nd = []
    for t, r in pts:
        if not nd or r < nd[-1][1] - 1e-12:
            nd.append((t, r))
    hull: list[tuple[float, float]] = []
    for p in nd:
        while len(hull) >= 2:
            (x1, y1), (x2, y2) = hull[-2], hull[-1]
            if (x2 - x1) * (p[1] - y1) - (y2 - y1) * (p[0] - x1) <= 1e-12:
                hull.pop()
            else:
                break
        hull.append(p)
    return hull
