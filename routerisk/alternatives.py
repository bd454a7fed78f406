"""Lower-exposure alternatives to a planned route: the travel-time / risk trade-off.

The supported points of the bi-objective (time, risk) Pareto front are found exactly by the
dichotomic weighted-sum search (Aneja, Y.P. and Nair, K.P.K. (1979), "Bicriteria
transportation problem", Management Science 25(1):73-78): between two known points the weight
is set so both have equal weighted cost, and a new point is kept if it lies strictly below that
line. Diversity comes from a penalty method: the edges of chosen paths cost more in the next
searches, so later alternatives differ from earlier ones. Every shortest path is a Dijkstra run
of ``scipy.sparse.csgraph`` on arrays; networkx is not on the hot path.

The edge risk used during the search is evaluated at the time the vehicle is expected to reach
the edge (the fastest arrival from the start, plus the route's own earlier legs); every
candidate is then re-scored exactly edge by edge with :class:`routerisk.scoring.Scorer`, and a
candidate that breaks a hard rule at the time it drives an edge is repaired by closing that
edge and searching again, never returned as rule-abiding.
"""

from __future__ import annotations

import datetime as dt
import logging
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import dijkstra

from .profile import MINUTES_PER_WEEK
from .scoring import RouteScore, Scorer

log = logging.getLogger(__name__)

PENALTY = 1.6  # cost factor on the edges of already chosen paths (diversity)
MAX_REPAIRS = 8
EPS = 1e-9


@dataclass
class Alternative:
    """One suggested route with its exact score and the changes against the plan."""

    edges: list[tuple[int, int, int]]
    score: RouteScore
    risk_change_pct: float
    time_change_pct: float
    length_change_pct: float
    overlap_with_plan: float
    within_bounds: bool
    label: str = ""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form of ``routerisk suggest``."""
        d = self.score.to_dict()
        d.pop("name")
        d.update({
            "label": self.label,
            "risk_change_pct": round(self.risk_change_pct, 3),
            "time_change_pct": round(self.time_change_pct, 3),
            "length_change_pct": round(self.length_change_pct, 3),
            "shared_length_with_plan": round(self.overlap_with_plan, 4),
            "within_bounds": self.within_bounds,
        })
        return d


@dataclass
class Suggestion:
    """The plan, its alternatives, the trade-off points found, and a note."""

    name: str
    planned: RouteScore
    planned_edges: list[tuple[int, int, int]]
    alternatives: list[Alternative]
    front: list[tuple[float, float]] = field(default_factory=list)  # (minutes, risk)
    note: str = ""

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form of one route of ``routerisk suggest``."""
        return {"name": self.name, "planned": self.planned.to_dict(),
                "alternatives": [a.to_dict() for a in self.alternatives], "note": self.note,
                "front": [[round(t, 4), round(r, 6)] for t, r in self.front]}


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

    def shortest(self, cost: np.ndarray, origin: int, target: int | None = None
                 ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Return (distance, predecessor, best parallel edge) from ``origin`` on ``cost``.

        Edges with infinite cost are closed. Parallel edges keep the cheapest.
        """
        ok = np.isfinite(cost)
        s, d, c, e = self.src[ok], self.dst[ok], cost[ok], np.flatnonzero(ok)
        order = np.lexsort((c, d, s))
        s, d, c, e = s[order], d[order], c[order], e[order]
        first = np.ones(len(s), dtype=bool)
        first[1:] = (s[1:] != s[:-1]) | (d[1:] != d[:-1])
        s, d, c, e = s[first], d[first], c[first], e[first]
        # csgraph treats explicit zeros as missing edges: lift them to a tiny positive cost
        mat = csr_matrix((np.maximum(c, 1e-12), (s, d)), shape=(self.n, self.n))
        best = csr_matrix((e.astype(np.float64) + 1, (s, d)), shape=(self.n, self.n))
        dist, pred = dijkstra(mat, directed=True, indices=origin, return_predecessors=True,
                              min_only=False)
        return dist, pred, best

    def path_edges(self, pred: np.ndarray, best: csr_matrix, origin: int, target: int
                   ) -> list[int] | None:
        """Return the edge rows of the path from ``origin`` to ``target`` (None if none)."""
        if origin == target:
            return []
        if pred[target] < 0:
            return None
        nodes = [target]
        while nodes[-1] != origin:
            nodes.append(int(pred[nodes[-1]]))
        nodes.reverse()
        rows = [int(best[a, b]) - 1 for a, b in zip(nodes[:-1], nodes[1:], strict=True)]
        return rows

    def as_tuples(self, rows: list[int]) -> list[tuple[int, int, int]]:
        """Return (u, v, key) tuples of edge rows."""
        ids = self.node_ids
        return [(int(ids[self.src[r]]), int(ids[self.dst[r]]), int(self.keys[r])) for r in rows]


def _shared_share(a: list[int], b: list[int], km: np.ndarray) -> float:
    """Return the share of path ``a``'s length that path ``b`` also drives."""
    la = km[a].sum()
    if la == 0:
        return 1.0
    common = np.isin(a, np.asarray(b, dtype=np.int64))
    return float(km[np.asarray(a)[common]].sum() / la)


class Suggester:
    """Search lower-exposure alternatives on one network.

    Parameters
    ----------
    scorer
        The exact scorer of the network.
    """

    def __init__(self, scorer: Scorer) -> None:
        self.scorer = scorer
        self.g = RouteGraph(scorer)
        sc = scorer
        self.tt = sc.tt
        self.km = sc.km

    # -- costs -------------------------------------------------------------------------
    def _risk_at(self, minutes: np.ndarray) -> np.ndarray:
        sc = self.scorer
        mult = sc.mult_table[:, minutes % MINUTES_PER_WEEK].T  # (m, C)
        cat = (sc.sev * sc.km)[:, None] * sc.w[None, :] * mult * sc.exp
        return (sc.sev * sc.km * sc.base + cat.sum(axis=1)
                + sc.sev * sc.profile.crossing_weight * sc.cross)

    def _closed(self, minutes: np.ndarray, slack_min: float) -> np.ndarray:
        """Return edges covered by a rule in force within +-slack of the expected minute."""
        sc = self.scorer
        if not sc.profile.rules:
            return np.zeros(self.g.m, dtype=bool)
        closed = np.zeros(self.g.m, dtype=bool)
        offsets = np.arange(-int(slack_min), int(slack_min) + 1, 1)
        for off in offsets:
            t = (minutes + off) % MINUTES_PER_WEEK
            closed |= (sc.rule_cover & sc.rule_time[:, t].T).any(axis=1)
        return closed

    def _leg_costs(self, origin: int, m0: float, slack_min: float):
        """Risk and closure of every edge at its expected entry time on a leg from origin."""
        dist, _, _ = self.g.shortest(self.tt, origin)
        arrive = dist[self.g.src]
        arrive = np.where(np.isfinite(arrive), arrive, 0.0)
        minutes = np.floor(m0 + arrive / 60.0).astype(np.int64)
        return self._risk_at(minutes), self._closed(minutes, slack_min)

    # -- the search --------------------------------------------------------------------
    def _leg_front(self, origin: int, target: int, risk: np.ndarray, closed: np.ndarray,
                   penalty: np.ndarray) -> list[list[int]]:
        """Return the supported (time, risk) front of paths from origin to target."""
        tt = np.where(closed, np.inf, self.tt * penalty)
        rk = np.where(closed, np.inf, risk * penalty)

        def solve(a: float, b: float) -> tuple[float, float, list[int]] | None:
            cost = a * tt + b * rk
            _, pred, best = self.g.shortest(cost, origin)
            rows = self.g.path_edges(pred, best, origin, target)
            if rows is None:
                return None
            return float(tt[rows].sum()), float(rk[rows].sum()), rows

        fast = solve(1.0, 1e-9)
        safe = solve(1e-9, 1.0)
        if fast is None or safe is None:
            return []
        points = {tuple(fast[2]): fast, tuple(safe[2]): safe}
        stack = [(fast, safe)]
        while stack:
            p, q = stack.pop()
            # weight making p and q equal: a*(tp - tq) = b*(rq - rp)
            a, b = p[1] - q[1], q[0] - p[0]
            if a <= EPS or b <= EPS:
                continue
            r = solve(a, b)
            if r is None or tuple(r[2]) in points:
                continue
            if a * r[0] + b * r[1] < a * p[0] + b * p[1] - 1e-9 * (a * p[0] + b * p[1]):
                points[tuple(r[2])] = r
                stack.extend([(p, r), (r, q)])
        out = sorted(points.values(), key=lambda x: (x[0], x[1]))
        return [x[2] for x in out]

    def _legs(self, anchors: list[int], m0: float, slack: float, penalty: np.ndarray,
              extra_closed: np.ndarray) -> list[list[int]]:
        """Return candidate full paths through the anchors (supported points per leg)."""
        legs: list[list[list[int]]] = []
        t = m0
        for a, b in zip(anchors[:-1], anchors[1:], strict=True):
            risk, closed = self._leg_costs(a, t, slack)
            front = self._leg_front(a, b, risk, closed | extra_closed, penalty)
            if not front:
                return []
            legs.append(front)
            t += float(self.tt[front[0]].sum()) / 60.0
        # combine legs: pair the i-th point of each leg's front (from fast to safe)
        k = max(len(f) for f in legs)
        paths = []
        for i in range(k):
            rows: list[int] = []
            for f in legs:
                rows.extend(f[min(i, len(f) - 1) if k == 1 else
                              round(i * (len(f) - 1) / max(k - 1, 1))])
            paths.append(rows)
        return paths

    def suggest(self, name: str, planned: list[tuple[int, int, int]], depart: dt.datetime, *,
                via: list[int] | None = None, count: int = 3, max_extra_time: float = 0.25,
                max_extra_length: float | None = None, min_difference: float = 0.3,
                rounds: int = 4) -> Suggestion:
        """Return up to ``count`` alternatives to ``planned`` that lower exposure.

        Parameters
        ----------
        name
            Route name.
        planned
            The planned route's edges.
        depart
            Departure time (aware).
        via
            Node ids the alternative must pass in order (besides the start and the end).
        count
            How many alternatives at most.
        max_extra_time
            Bound on extra travel time, a share of the plan's (0.25 = 25 %).
        max_extra_length
            Optional bound on extra length, a share of the plan's.
        min_difference
            Share of length by which alternatives differ from the plan and from each other.
        rounds
            Penalty rounds for diverse alternatives.
        """
        sc = self.scorer
        plan = sc.score(name, planned, depart)
        plan_rows = list(sc.positions(planned))
        g = self.g
        via = list(via or [])
        if not via and planned[0][0] == planned[-1][1]:
            # a loop: keep its far half by passing the node halfway along it
            half = np.searchsorted(np.cumsum(sc.km[plan_rows]), sc.km[plan_rows].sum() / 2)
            via = [planned[min(int(half), len(planned) - 1)][1]]
        anchors = [g.node_of[planned[0][0]], *[g.node_of[int(n)] for n in via],
                   g.node_of[planned[-1][1]]]
        local = depart.astimezone(sc.tz)
        m0 = local.weekday() * 1440 + local.hour * 60 + local.minute + local.second / 60.0
        slack = max(2.0, plan.duration_min * max_extra_time + 1.0)
        t_max = plan.duration_min * (1 + max_extra_time) + 1e-9
        l_max = None if max_extra_length is None else plan.length_km * (1 + max_extra_length)
        penalty = np.ones(g.m)
        seen: dict[tuple[int, ...], Alternative] = {}
        front: list[tuple[float, float]] = []
        extra_closed = np.zeros(g.m, dtype=bool)
        for rnd in range(rounds):
            for rows in self._legs(anchors, m0, slack, penalty, extra_closed):
                alt = self._exact(name, rows, depart, plan, plan_rows, t_max, l_max,
                                  m0, slack, anchors, penalty)
                if alt is None:
                    continue
                key = tuple(sc.positions(alt.edges))
                if rnd == 0:
                    front.append((alt.score.duration_min, alt.score.risk))
                seen.setdefault(key, alt)
                penalty[list(key)] *= PENALTY
        pool = sorted(seen.values(), key=lambda a: (len(a.score.rule_breaks),
                                                    not a.within_bounds, a.score.risk,
                                                    a.score.duration_min))
        good = [a for a in pool if a.within_bounds and not a.score.rule_breaks
                and a.score.risk < plan.risk - 1e-12]
        chosen = self._diverse(good, plan_rows, count, min_difference)
        note = ""
        if not chosen:
            note = ("no alternative lowers the risk within the bounds (extra time, length, "
                    "hard rules, difference from the plan); shown: the best candidate, the one "
                    "that breaks the fewest") if pool else "no alternative route found"
            chosen = pool[:1]
        for i, a in enumerate(chosen, 1):
            a.label = f"alternative {i}"
        return Suggestion(name, plan, planned, chosen, sorted(set(front)), note)

    def _diverse(self, pool: list[Alternative], plan_rows: list[int], count: int,
                 min_difference: float) -> list[Alternative]:
        """Pick, lowest risk first, alternatives that differ enough from the plan and each other."""
        sc = self.scorer
        chosen: list[Alternative] = []
        for alt in sorted(pool, key=lambda a: (a.score.risk, a.score.duration_min)):
            rows = list(sc.positions(alt.edges))
            if 1.0 - alt.overlap_with_plan < min_difference:
                continue
            if any(1.0 - _shared_share(rows, list(sc.positions(c.edges)), sc.km) <
                   min_difference for c in chosen):
                continue
            chosen.append(alt)
            if len(chosen) == count:
                break
        return chosen

    def _exact(self, name, rows, depart, plan, plan_rows, t_max, l_max, m0, slack, anchors,
               penalty) -> Alternative | None:
        """Score a candidate exactly; close edges it drives against a rule and retry."""
        sc = self.scorer
        if not rows:
            return None
        extra = np.zeros(self.g.m, dtype=bool)
        for _ in range(MAX_REPAIRS):
            edges = self.g.as_tuples(rows)
            s = sc.score(name, edges, depart)
            if not s.rule_breaks:
                break
            for b in s.rule_breaks:
                extra[sc.positions([tuple(b["edge"])])[0]] = True
            paths = self._legs(anchors, m0, slack, penalty, extra)
            if not paths:
                return None
            rows = paths[-1]  # the lowest-risk point of the repaired front
        else:
            return None
        within = s.duration_min <= t_max and (l_max is None or s.length_km <= l_max + 1e-9)
        return Alternative(
            edges=edges, score=s,
            risk_change_pct=100.0 * (s.risk - plan.risk) / plan.risk if plan.risk else 0.0,
            time_change_pct=100.0 * (s.duration_min - plan.duration_min) / plan.duration_min
            if plan.duration_min else 0.0,
            length_change_pct=100.0 * (s.length_km - plan.length_km) / plan.length_km
            if plan.length_km else 0.0,
            overlap_with_plan=_shared_share(rows, plan_rows, sc.km),
            within_bounds=bool(within),
        )


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


def edges_frame(s: Suggestion) -> pd.DataFrame:
    """Return the alternatives' scored segments stacked, with an ``option`` column."""
    parts = [s.planned.segments.assign(option="planned")]
    parts += [a.score.segments.assign(option=a.label) for a in s.alternatives]
    return pd.concat(parts, ignore_index=True)


def via_nodes(matched: Any, route: Any, *, every: int | None = None) -> list[int]:
    """Return the nodes an alternative must pass: the route's required interior points.

    A required point is placed on the edge the matcher put it on; the edge's end node is kept.
    With ``every`` = N, every Nth waypoint is kept as well.
    """
    n = len(route.lonlat)
    keep = np.array(route.required, dtype=bool).copy()
    if every:
        keep[::every] = True
    keep[0] = keep[-1] = False
    out: list[int] = []
    for i in np.flatnonzero(keep):
        e = int(matched.point_edge[i])
        if e < 0 or e >= len(matched.edges) - 1:
            continue
        node = int(matched.edges[e][1])
        if not out or out[-1] != node:
            out.append(node)
    del n
    return out


def suggest_routes(net: Any, routes: list[Any], departs: list[dt.datetime] | None = None, *,
                   count: int = 3, max_extra_time: float = 0.25,
                   max_extra_length: float | None = None, min_difference: float = 0.3,
                   keep_every: int | None = None, index: Any = None) -> list[Suggestion]:
    """Suggest alternatives for each planned route at each departure time."""
    from . import matching
    from .errors import RouteInputError

    idx = index or matching.RoadIndex(net.graph)
    sug = Suggester(Scorer(net))
    out = []
    for r, m in zip(routes, matching.to_edges_many(idx, routes), strict=True):
        times = departs or ([r.depart] if r.depart is not None else [])
        if not times:
            raise RouteInputError("no departure time: give --depart or a 'depart' property",
                                  path=r.source or None, field=f"route {r.name!r}")
        via = via_nodes(m, r, every=keep_every)
        for t in times:
            out.append(sug.suggest(r.name, list(m.edges), t, via=via, count=count,
                                   max_extra_time=max_extra_time,
                                   max_extra_length=max_extra_length,
                                   min_difference=min_difference))
    return out
