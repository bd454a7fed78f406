"""Lower-exposure alternatives to a planned route: the travel-time / risk trade-off.

The supported points of the bi-objective (time, risk) Pareto front are found exactly by the
dichotomic weighted-sum search (Aneja, Y.P. and Nair, K.P.K. (1979), "Bicriteria
transportation problem", Management Science 25(1):73-78): between two known points the weight
is set so both have equal weighted cost, and a new point is kept if it lies strictly below that
line. Diversity comes from a penalty method: the edges of chosen paths cost more in the next
searches, so later alternatives differ from earlier ones. Every shortest path is a Dijkstra run
of ``scipy.sparse.csgraph`` on arrays; networkx is not on the hot path.

The search runs on the part of the network that can lie on a path within the time bound: an
edge ``(u, v)`` of a leg from ``a`` to ``b`` is kept when the fastest time ``a -> u``, plus the
edge, plus the fastest time ``v -> b`` fits the leg's share of the bound (two Dijkstra runs
bounded by that time, one on the reversed network). No path within the bound is lost, and on a
city graph the kept part is a small ellipse around the plan. Only when nothing within the
bounds lowers the risk is the search repeated on a wider part (three times the plan's time) to
show the best candidate that breaks the fewest bounds.

The edge risk used during the search is evaluated at the time the vehicle is expected to reach
the edge (the fastest arrival from the start, plus the route's own earlier legs); every
candidate is then checked exactly edge by edge (entry time from its own cumulative travel
time), and a candidate that breaks a hard rule at the time it drives an edge is repaired by
closing that edge and searching again, never returned as rule-abiding. The chosen
alternatives are scored in full with :class:`routerisk.analysis.scoring.Scorer`.
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

from routerisk.analysis.scoring import RouteScore, Scorer
from routerisk.profile import MINUTES_PER_WEEK

log = logging.getLogger(__name__)

HARD_RULES = "hard rules"  # the bound a candidate breaks when no detour avoids a rule zone
PENALTY = 1.6  # cost factor on the edges of already chosen paths (diversity)
MAX_REPAIRS = 8
EPS = 1e-9
#: Where nothing within the bounds lowers the risk, candidates up to this many times the
#: plan's travel time are searched to show the best one that breaks the fewest bounds.
RELAXED_TIME_FACTOR = 3.0
#: An alternative this much shorter than the plan (share of length) gets a caveat: the risk
#: it saves may come from driving less, not from safer streets.
SHORTER_CAVEAT = 0.2
_TINY = 1e-12  # csgraph needs positive arc costs
#: The plan's fixed partial ends: (head rows, head shares, tail rows, tail shares), or None.
_Ends = tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray] | None


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
    bounds_broken: list[str] = field(default_factory=list)
    caveats: list[str] = field(default_factory=list)
    fractions: np.ndarray | None = None  # share of each edge driven (None: all whole)

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form of ``routerisk suggest``."""
        d = self.score.to_dict()
        d.pop("name")
        d.update(
            {
                "label": self.label,
                "risk_change_pct": round(self.risk_change_pct, 3),
                "time_change_pct": round(self.time_change_pct, 3),
                "length_change_pct": round(self.length_change_pct, 3),
                "shared_length_with_plan": round(self.overlap_with_plan, 4),
                "within_bounds": self.within_bounds,
                "bounds_broken": list(self.bounds_broken),
                "caveats": list(self.caveats),
            }
        )
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
    planned_fractions: np.ndarray | None = None  # share of each planned edge driven
    #: why no alternative met every bound (plain sentences; empty when some did)
    reasons: list[str] = field(default_factory=list)
    #: what the user can change to get one (plain sentences)
    next_steps: list[str] = field(default_factory=list)
    #: nearest departures (ISO, area time) at which the planned route breaks no hard rule
    rule_free_departures: dict[str, str | None] | None = None

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form of one route of ``routerisk suggest``."""
        return {
            "name": self.name,
            "planned": self.planned.to_dict(),
            "alternatives": [a.to_dict() for a in self.alternatives],
            "note": self.note,
            "reasons": list(self.reasons),
            "next_steps": list(self.next_steps),
            "rule_free_departures": self.rule_free_departures,
            "front": [[round(t, 4), round(r, 6)] for t, r in self.front],
        }


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


def _shared_share(
    a: np.ndarray, b: np.ndarray, km: np.ndarray, a_frac: np.ndarray | None = None
) -> float:
    """Return the share of path ``a``'s length that path ``b`` also drives.

    ``a_frac`` gives the share of each of ``a``'s edges driven (partial first and last edges).
    """
    a = np.asarray(a, dtype=np.int64)
    la_e = km[a] if a_frac is None else km[a] * np.asarray(a_frac, dtype=float)
    la = la_e.sum()
    if la == 0:
        return 1.0
    common = np.isin(a, np.asarray(b, dtype=np.int64))
    return float(la_e[common].sum() / la)


@dataclass
class _Candidate:
    """A candidate path with its quick score and the bounds it breaks.

    ``hard rules`` among the bounds: no detour was found around a rule zone in force.
    """

    rows: np.ndarray  # the whole route: the plan's partial ends (if any) included
    fractions: np.ndarray  # share of each row driven
    risk: float
    minutes: float
    km: float
    overlap: float
    broken: list[str]


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
        self._sev_km = sc.sev * sc.km
        # baseline and crossings at multiplier 1 (each has its own optional time profile)
        self._base_risk = sc.sev * sc.km * sc.base
        self._cross_risk = sc.sev * sc.profile.crossing_weight * sc.cross
        if sc.profile.rules:
            # minutes in force, counted cumulatively over three copies of the week, so a
            # window around any minute is one subtraction
            three = np.tile(sc.rule_time.astype(np.int32), 3)
            self._rule_cum = np.concatenate(
                [
                    np.zeros((len(sc.profile.rules), 1), dtype=np.int32),
                    np.cumsum(three, axis=1, dtype=np.int32),
                ],
                axis=1,
            )

    # -- costs -------------------------------------------------------------------------
    def _risk_at(self, minutes: np.ndarray, rows: np.ndarray | None = None) -> np.ndarray:
        """Return the risk of edges (all, or ``rows``) entered at the given minutes."""
        sc = self.scorer
        sel = slice(None) if rows is None else rows
        m = np.asarray(minutes) % MINUTES_PER_WEEK
        mult = sc.mult_table[:, m].T  # (k, C)
        cat = self._sev_km[sel][:, None] * sc.w[None, :] * mult * sc.exp[sel]
        return (
            self._base_risk[sel] * sc.base_mult[m]
            + self._cross_risk[sel] * sc.cross_mult[m]
            + cat.sum(axis=1)
        )

    def _closed(
        self, minutes: np.ndarray, slack_min: float, rows: np.ndarray | None = None
    ) -> np.ndarray:
        """Return edges covered by a rule in force within +-slack of the expected minute."""
        sc = self.scorer
        n = self.g.m if rows is None else len(rows)
        if not sc.profile.rules:
            return np.zeros(n, dtype=bool)
        sel = slice(None) if rows is None else rows
        s = min(int(slack_min), MINUTES_PER_WEEK)
        t = np.asarray(minutes, dtype=np.int64) % MINUTES_PER_WEEK + MINUTES_PER_WEEK
        near = (self._rule_cum[:, t + s + 1] - self._rule_cum[:, t - s]) > 0  # (R, k)
        return (sc.rule_cover[sel] & near.T).any(axis=1)

    def _leg_costs(self, leg: Leg, m0: float, slack_min: float) -> tuple[np.ndarray, np.ndarray]:
        """Risk and closure of the leg's edges at their expected entry minutes."""
        minutes = np.floor(m0 + leg.enter_s / 60.0).astype(np.int64)
        return self._risk_at(minutes, leg.rows), self._closed(minutes, slack_min, leg.rows)

    # -- the search --------------------------------------------------------------------
    def _legs_within(self, anchors: list[int], budget_s: float) -> list[Leg] | None:
        """Return the searchable part of every leg for a route time budget (None if none)."""
        g = self.g
        pairs = list(zip(anchors[:-1], anchors[1:], strict=True))
        trees = [g.time_tree(a, budget_s) for a, _ in pairs]
        fastest = [float(d[b]) for d, (_, b) in zip(trees, pairs, strict=True)]
        if not all(np.isfinite(fastest)):
            return None
        total = sum(fastest)
        legs = []
        for (a, b), d, f in zip(pairs, trees, fastest, strict=True):
            leg = g.leg(a, b, budget_s - (total - f), d_from=d)
            if leg is None:
                return None
            legs.append(leg)
        return legs

    def _paths(
        self,
        legs: list[Leg],
        m0: float,
        slack: float,
        penalty: np.ndarray,
        extra_closed: np.ndarray | None,
        cache: dict[Any, Any],
        *,
        rules: bool = True,
    ) -> list[np.ndarray]:
        """Return candidate full paths through the legs (supported points per leg).

        ``rules=False`` ignores the hard rules (only to show what breaks them).
        """
        fronts: list[list[np.ndarray]] = []
        t = m0
        for i, leg in enumerate(legs):
            key = (i, t)
            if key not in cache:
                cache[key] = self._leg_costs(leg, t, slack)
            risk, closed = cache[key]
            if not rules:
                closed = np.zeros(len(closed), dtype=bool)
            rows = leg.rows
            shut = closed if extra_closed is None else closed | extra_closed[rows]
            pen = penalty[rows]
            front = leg.front(
                np.where(shut, np.inf, self.tt[rows] * pen), np.where(shut, np.inf, risk * pen)
            )
            if not front:
                return []
            fronts.append(front)
            t += float(self.tt[front[0]].sum()) / 60.0
        # combine legs: pair the i-th point of each leg's front (from fast to safe)
        k = max(len(f) for f in fronts)
        paths = []
        for i in range(k):
            parts = [
                f[min(i, len(f) - 1) if k == 1 else round(i * (len(f) - 1) / max(k - 1, 1))]
                for f in fronts
            ]
            paths.append(np.concatenate(parts).astype(np.int64))
        return paths

    def _breaking(self, rows: np.ndarray, depart: dt.datetime, ends: _Ends = None) -> np.ndarray:
        """Return the rows a path drives while a hard rule covering them is in force.

        ``ends`` = (head rows, head shares, tail rows, tail shares): the plan's fixed partial
        ends driven before and after ``rows``; times run from ``depart`` over the whole route,
        and only rows of the searched part are returned (the ends cannot be avoided).
        """
        sc = self.scorer
        if not sc.profile.rules or not len(rows):
            return np.zeros(0, dtype=np.int64)
        if ends is None:
            minutes = sc._timeline(rows, depart, None)[5]
        else:
            h, hf, t, tf = ends
            full = np.concatenate([h, rows, t]).astype(np.int64)
            minutes = sc._timeline(full, depart, np.concatenate([hf, np.ones(len(rows)), tf]))[5][
                len(h) : len(h) + len(rows)
            ]
        hit = (sc.rule_cover[rows] & sc.rule_time[:, minutes].T).any(axis=1)
        return rows[hit]

    def _search(
        self,
        legs: list[Leg],
        depart: dt.datetime,
        m0: float,
        slack: float,
        rounds: int,
        judge: Any,
        ends: _Ends = None,
    ) -> tuple[list[_Candidate], list[tuple[float, float]]]:
        """Run the penalty rounds on the legs; return rule-abiding candidates and the front."""
        penalty = np.ones(self.g.m)
        cache: dict[Any, Any] = {}
        seen: dict[bytes, _Candidate] = {}
        front: list[tuple[float, float]] = []
        for rnd in range(rounds):
            for rows in self._paths(legs, m0, slack, penalty, None, cache):
                rows, abiding = self._repair(rows, legs, depart, m0, slack, penalty, cache, ends)
                if not len(rows):
                    continue
                cand = judge(rows)
                if not abiding:
                    # kept only to show the user what was found and why it failed
                    cand.broken.append(HARD_RULES)
                    seen.setdefault(rows.tobytes(), cand)
                    continue
                if rnd == 0:
                    front.append((cand.minutes, cand.risk))
                seen.setdefault(rows.tobytes(), cand)
                penalty[rows] *= PENALTY
        return list(seen.values()), front

    def _repair(
        self,
        rows: np.ndarray,
        legs: list[Leg],
        depart: dt.datetime,
        m0: float,
        slack: float,
        penalty: np.ndarray,
        cache: dict[Any, Any],
        ends: _Ends = None,
    ) -> tuple[np.ndarray, bool]:
        """Close the edges a path drives against a rule and search again.

        Return the path and whether it abides by every hard rule; when no repair works the
        path as found is returned with ``False`` (shown to the user, never as rule-abiding).
        """
        extra: np.ndarray | None = None
        found = rows
        for _ in range(MAX_REPAIRS):
            bad = self._breaking(rows, depart, ends)
            if not len(bad):
                return rows, True
            if extra is None:
                extra = np.zeros(self.g.m, dtype=bool)
            extra[bad] = True
            paths = self._paths(legs, m0, slack, penalty, extra, cache)
            if not paths:
                return found, False
            rows = paths[-1]  # the lowest-risk point of the repaired front
        return found, False

    def suggest(
        self,
        name: str,
        planned: list[tuple[int, int, int]],
        depart: dt.datetime,
        *,
        fractions: np.ndarray | None = None,
        via: list[int] | None = None,
        count: int = 3,
        max_extra_time: float = 0.25,
        max_extra_length: float | None = None,
        min_difference: float = 0.3,
        rounds: int = 4,
    ) -> Suggestion:
        """Return up to ``count`` alternatives to ``planned`` that lower exposure.

        Parameters
        ----------
        name
            Route name.
        planned
            The planned route's edges.
        depart
            Departure time (aware).
        fractions
            Share of each planned edge driven, as the matcher gives it (partial first and last
            edges); the plan is scored with them exactly as ``routerisk score`` does. A partial
            first (last) edge is where the vehicle starts (ends), so every alternative drives
            the same part of it and the search runs from its end (to its start) node.
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
        n_plan = len(planned)
        frac = np.ones(n_plan) if fractions is None else np.asarray(fractions, dtype=float).copy()
        plan = sc.score(name, planned, depart, fractions=frac)
        plan_rows = sc.positions(planned)
        g = self.g
        # a partial first / last edge is fixed: every alternative starts (ends) on it as the
        # plan does, so the plan and its alternatives cover the same start and end points
        head = 1 if n_plan and frac[0] < 1.0 - 1e-12 else 0
        tail = 1 if n_plan > head and frac[-1] < 1.0 - 1e-12 else 0
        head_rows, tail_rows = plan_rows[:head], plan_rows[n_plan - tail :]
        head_frac, tail_frac = frac[:head], frac[n_plan - tail :]
        middle = planned[head : n_plan - tail]
        start = planned[0][1] if head else planned[0][0]
        end = planned[-1][0] if tail else planned[-1][1]
        head_s = float((sc.tt[head_rows] * head_frac).sum())
        ends_s = head_s + float((sc.tt[tail_rows] * tail_frac).sum())
        depart_mid = depart + dt.timedelta(seconds=head_s)
        ends = (head_rows, head_frac, tail_rows, tail_frac) if head or tail else None
        via = list(via or [])
        if not via and middle and start == end:
            # a loop: keep its far half by passing the node halfway along it
            mid_rows = plan_rows[head : n_plan - tail]
            half = np.searchsorted(np.cumsum(sc.km[mid_rows]), sc.km[mid_rows].sum() / 2)
            via = [middle[min(int(half), len(middle) - 1)][1]]
        anchors = [g.node_of[start], *[g.node_of[int(n)] for n in via], g.node_of[end]]
        local = depart_mid.astimezone(sc.tz)
        m0 = local.weekday() * 1440 + local.hour * 60 + local.minute + local.second / 60.0
        slack = max(2.0, plan.duration_min * max_extra_time + 1.0)
        t_max = plan.duration_min * (1 + max_extra_time) + 1e-9
        l_max = None if max_extra_length is None else plan.length_km * (1 + max_extra_length)

        def judge(rows: np.ndarray) -> _Candidate:
            full = np.concatenate([head_rows, rows, tail_rows]).astype(np.int64)
            ffrac = np.concatenate([head_frac, np.ones(len(rows)), tail_frac])
            risk, minutes, _ = sc.quick(full, depart, fractions=ffrac)
            km = float((self.km[full] * ffrac).sum())
            overlap = _shared_share(full, plan_rows, self.km, ffrac)
            broken = []
            if minutes > t_max:
                broken.append("extra time")
            if l_max is not None and km > l_max + 1e-9:
                broken.append("extra length")
            if 1.0 - overlap < min_difference - 1e-12:
                broken.append("difference from the plan")
            if not risk < plan.risk - 1e-12:
                broken.append("lower risk")
            return _Candidate(full, ffrac, risk, minutes, km, overlap, broken)

        # the legs' share of the time bound: the fixed partial ends take their own time
        budget = plan.duration_min * 60.0 * (1 + max_extra_time) * (1 + 1e-9) + 1e-6 - ends_s
        legs = self._legs_within(anchors, budget)
        cands, front = (
            self._search(legs, depart, m0, slack, rounds, judge, ends) if legs else ([], [])
        )
        chosen = self._diverse([c for c in cands if not c.broken], count, min_difference)
        note = ""
        why = _Why()
        if not chosen:
            within = list(cands)
            if not cands and legs and sc.profile.rules:
                # every path is shut by a rule in force: show the best path that breaks it
                cands = self._rule_breaking(legs, depart, m0, slack, judge, ends)
            wide = plan.duration_min * 60.0 * RELAXED_TIME_FACTOR - ends_s
            if wide > budget:
                wider = self._legs_within(anchors, wide)
                if wider:
                    more, _ = self._search(wider, depart, m0, slack, rounds, judge, ends)
                    known = {c.rows.tobytes() for c in cands}
                    cands += [c for c in more if c.rows.tobytes() not in known]
            same = plan_rows.tobytes()
            pool = sorted(
                (c for c in cands if c.rows.tobytes() != same),  # not the plan
                key=lambda c: (HARD_RULES in c.broken, len(c.broken), c.risk, c.minutes),
            )
            note = (
                (
                    "no alternative lowers the risk within the bounds (extra time, length, "
                    "hard rules, difference from the plan); shown: the best candidate, the one "
                    "that breaks the fewest"
                )
                if pool
                else "no alternative route found"
            )
            chosen = pool[:1]
            why = self._why_none(plan, within, cands, legs is not None, max_extra_time)
        ends_note = self._ends_in_force(plan, head, tail)
        if ends_note:
            why.reasons.append(ends_note)
            why.steps.append(
                "move the start or the end of the route out of the rule zone, or "
                "depart when the rule is not in force"
            )
        departures = None
        if plan.rule_breaks and (ends_note or not any(HARD_RULES not in c.broken for c in chosen)):
            departures = self._rule_free_departures(plan_rows, frac, depart)
            why.steps.append(_departure_step(departures, depart))
        alts = [
            self._alternative(name, c, plan, depart, f"alternative {i}")
            for i, c in enumerate(chosen, 1)
        ]
        return Suggestion(
            name,
            plan,
            planned,
            alts,
            sorted(set(front)),
            note,
            planned_fractions=frac,
            reasons=why.reasons,
            next_steps=why.steps,
            rule_free_departures=None
            if departures is None
            else {
                k: (None if t is None else t.isoformat(timespec="seconds"))
                for k, t in departures.items()
            },
        )

    def _rule_breaking(
        self, legs: list[Leg], depart: dt.datetime, m0: float, slack: float, judge: Any, ends: _Ends
    ) -> list[_Candidate]:
        """Return the trade-off paths found with the hard rules ignored, marked as such."""
        out = []
        for rows in self._paths(legs, m0, slack, np.ones(self.g.m), None, {}, rules=False):
            if not len(rows):
                continue
            cand = judge(rows)
            if len(self._breaking(rows, depart, ends)):
                cand.broken.append(HARD_RULES)
            out.append(cand)
        return out

    # -- saying why nothing was found ---------------------------------------------------
    def _why_none(
        self,
        plan: RouteScore,
        within: list[_Candidate],
        every: list[_Candidate],
        joined: bool,
        max_extra_time: float,
    ) -> _Why:
        """Explain in plain sentences why no candidate met every bound, and what to change."""
        why = _Why()
        if not joined:
            why.reasons.append(
                "no route joins the start, the via points and the end within "
                f"the time bound (+{100 * max_extra_time:.0f} % of the plan's "
                "time)"
            )
        plan_rows = plan.segments["_pos"].to_numpy(dtype=np.int64).tobytes()
        only_plan = bool(within) and all(c.rows.tobytes() == plan_rows for c in within)
        if only_plan:
            why.reasons.append("the only route found within the time bound is the plan itself")
            within = []
        others = [c for c in every if c.rows.tobytes() != plan_rows]
        if joined and not others and len(plan.segments) > 2:
            why.steps.append(
                f"no other route was found within {RELAXED_TIME_FACTOR:g} times "
                "the plan's time either: the streets here leave no other way; "
                "move the start or the end, or add via points elsewhere"
            )
        n = len(within)
        if n:
            counts = {b: sum(b in c.broken for c in within) for b in _BOUND_WORDS}
            parts = [f"{k} {_BOUND_WORDS[b]}" for b, k in counts.items() if k]
            why.reasons.append(
                f"{n} candidate route{'s' if n != 1 else ''} within the time "
                "bound: " + "; ".join(parts)
            )
            if counts[HARD_RULES] == n:
                why.reasons.append(
                    "no path within the time bound avoids the rule zones while "
                    "their rules are in force"
                )
        elif only_plan:
            pass
        elif joined and every and all(HARD_RULES in c.broken for c in every):
            why.reasons.append(
                "no path within the time bound avoids the rule zones while "
                "their rules are in force: each one is closed on every way "
                "through"
            )
        elif joined and plan.segments is not None and len(plan.segments) <= 2:
            why.reasons.append(
                "the route drives only its partial first and last edges, which "
                "every alternative keeps: there is no part to change"
            )
        elif joined:
            why.reasons.append("the search found no candidate route within the time bound")
        # the least extra time at which a rule-abiding, lower-risk, different route exists
        ok = [c for c in every if not set(c.broken) - {"extra time"} and "extra time" in c.broken]
        if ok:
            best = min(ok, key=lambda c: c.minutes)
            need = best.minutes / plan.duration_min - 1.0 if plan.duration_min else 0.0
            share = float(np.ceil(need * 100.0 + 1e-9) / 100.0)
            why.steps.append(
                f"a rule-abiding alternative with lower risk needs more time: "
                f"--max-extra-time {share:.2f} (it takes {best.minutes:.1f} min "
                f"against the plan's {plan.duration_min:.1f})"
            )
        elif every and all(
            "difference from the plan" in c.broken
            for c in every
            if HARD_RULES not in c.broken and "lower risk" not in c.broken
        ):
            if any(HARD_RULES not in c.broken and "lower risk" not in c.broken for c in every):
                why.steps.append(
                    "lower-risk routes exist but share most of the plan: a "
                    "smaller --min-difference would show them"
                )
        return why

    def _ends_in_force(self, plan: RouteScore, head: int, tail: int) -> str:
        """Return a sentence when the fixed partial start or end lies in a rule zone in force."""
        if not plan.rule_breaks or not (head or tail):
            return ""
        seq = plan.segments["seq"].to_numpy()
        last = int(seq[-1]) if len(seq) else -1
        fixed = {0: "starts"} if head else {}
        if tail:
            fixed[last] = "ends"
        said = []
        for b in plan.rule_breaks:
            i = _seq_of(plan, b)
            if i in fixed:
                said.append(
                    f"the route {fixed.pop(i)} on {b['street'] or 'an unnamed street'}"
                    f" inside the zone of the rule '{b['rule']}' while it is in force"
                )
        if not said:
            return ""
        return (
            "; ".join(said) + ": every route from this start or to this end breaks it "
            "there, the alternatives too"
        )

    def _rule_free_departures(
        self, rows: np.ndarray, frac: np.ndarray, depart: dt.datetime
    ) -> dict[str, dt.datetime | None]:
        """Return the nearest departures at which the planned route breaks no hard rule.

        Earlier and later, in whole minutes of shift, within a week.
        """
        sc = self.scorer
        minutes = sc._timeline(rows, depart, frac)[5]
        bad = np.zeros(MINUTES_PER_WEEK, dtype=bool)
        for r in range(len(sc.profile.rules)):
            for m in np.unique(minutes[sc.rule_cover[rows, r]]):
                bad |= np.roll(sc.rule_time[r], -int(m))  # bad[d]: in force at m + d
        shift = np.arange(1, MINUTES_PER_WEEK)
        later = shift[~bad[shift]]
        earlier = shift[~bad[(MINUTES_PER_WEEK - shift) % MINUTES_PER_WEEK]]
        local = depart.astimezone(sc.tz)
        return {
            "earlier": (local - dt.timedelta(minutes=int(earlier[0]))) if len(earlier) else None,
            "later": (local + dt.timedelta(minutes=int(later[0]))) if len(later) else None,
        }

    def _alternative(
        self, name: str, c: _Candidate, plan: RouteScore, depart: dt.datetime, label: str
    ) -> Alternative:
        """Score a chosen candidate in full and state its changes against the plan."""
        edges = self.g.as_tuples(c.rows)
        s = self.scorer.score(name, edges, depart, fractions=c.fractions)

        def change(new: float, old: float) -> float:
            return 100.0 * (new - old) / old if old else 0.0

        length_change = change(s.length_km, plan.length_km)
        caveats = []
        if length_change < -100.0 * SHORTER_CAVEAT:
            caveats.append(
                f"{-length_change:.0f} % shorter than the plan (risk per km "
                f"{change(s.risk_per_km, plan.risk_per_km):+.0f} %): check it still covers "
                "the driving the test needs, or mark required points in the route file"
            )
        return Alternative(
            edges=edges,
            score=s,
            risk_change_pct=change(s.risk, plan.risk),
            time_change_pct=change(s.duration_min, plan.duration_min),
            length_change_pct=length_change,
            overlap_with_plan=c.overlap,
            within_bounds=not {"extra time", "extra length", HARD_RULES} & set(c.broken),
            label=label,
            bounds_broken=list(c.broken),
            caveats=caveats,
            fractions=c.fractions,
        )

    def _diverse(
        self, pool: list[_Candidate], count: int, min_difference: float
    ) -> list[_Candidate]:
        """Pick, lowest risk first, candidates that differ enough from each other."""
        chosen: list[_Candidate] = []
        for c in sorted(pool, key=lambda c: (c.risk, c.minutes)):
            if any(
                1.0 - _shared_share(c.rows, d.rows, self.km, c.fractions) < min_difference
                for d in chosen
            ):
                continue
            chosen.append(c)
            if len(chosen) == count:
                break
        return chosen


@dataclass
class _Why:
    reasons: list[str] = field(default_factory=list)
    steps: list[str] = field(default_factory=list)


#: the bounds a candidate can break, as the explanation counts them
_BOUND_WORDS = {
    HARD_RULES: "pass a rule zone while its rule is in force and no detour avoids it",
    "extra time": "take longer than the time bound",
    "extra length": "are longer than the length bound",
    "difference from the plan": "share too much of the plan",
    "lower risk": "do not lower the risk",
}


def _seq_of(plan: RouteScore, brk: dict[str, Any]) -> int:
    """Return the position in the route of the edge a rule-break record names."""
    seg = plan.segments
    u, v, k = brk["edge"]
    hit = seg.index[
        (seg["u"] == u) & (seg["v"] == v) & (seg["key"] == k) & (seg["time"] == brk["time"])
    ]
    return int(seg.loc[hit[0], "seq"]) if len(hit) else -1


def _departure_step(deps: dict[str, dt.datetime | None], depart: dt.datetime) -> str:
    """Say the nearest departures at which the planned route breaks no hard rule."""
    said = [
        f"at {_readable(t)} ({_shift(t - depart)} {w})"
        for w, t in (("later", deps["later"]), ("earlier", deps["earlier"]))
        if t
    ]
    if not said:
        return "no departure in the week avoids the rules on this route"
    return "the planned route breaks no hard rule if it departs " + " or ".join(said)


def _shift(d: dt.timedelta) -> str:
    """Return a shift of departure in words: '1 h 5 min'."""
    mins = abs(int(round(d.total_seconds() / 60.0)))
    days, rest = divmod(mins, 1440)
    h, m = divmod(rest, 60)
    words = [f"{days} d"] * bool(days) + [f"{h} h"] * bool(h) + [f"{m} min"] * bool(m)
    return " ".join(words) or "0 min"


def _readable(t: dt.datetime) -> str:
    """Return a departure as people read it: 'Tue 9 Mar 2027 09:01 (UTC-03:00)'."""
    off = t.utcoffset() or dt.timedelta(0)
    mins = int(off.total_seconds() // 60)
    sign = "+" if mins >= 0 else "-"
    return f"{t:%a} {t.day} {t:%b %Y %H:%M} (UTC{sign}{abs(mins) // 60:02d}:{abs(mins) % 60:02d})"


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


def suggest_routes(
    net: Any,
    routes: list[Any],
    departs: list[dt.datetime] | None = None,
    *,
    count: int = 3,
    max_extra_time: float = 0.25,
    max_extra_length: float | None = None,
    min_difference: float = 0.3,
    keep_every: int | None = None,
    index: Any = None,
    suggester: Suggester | None = None,
) -> list[Suggestion]:
    """Suggest alternatives for each planned route at each departure time.

    ``index`` and ``suggester`` (of ``net``) may be given to reuse them across calls.
    """
    from routerisk import matching
    from routerisk.errors import RouteInputError

    idx = index or matching.RoadIndex(net.graph)
    sug = suggester or Suggester(Scorer(net))
    out = []
    for r, m in zip(routes, matching.to_edges_many(idx, routes), strict=True):
        times = departs or ([r.depart] if r.depart is not None else [])
        if not times:
            raise RouteInputError(
                "no departure time: give --depart or a 'depart' property",
                path=r.source or None,
                field=f"route {r.name!r}",
            )
        via = via_nodes(m, r, every=keep_every)
        for t in times:
            out.append(
                sug.suggest(
                    r.name,
                    list(m.edges),
                    t,
                    fractions=np.asarray(m.fractions),
                    via=via,
                    count=count,
                    max_extra_time=max_extra_time,
                    max_extra_length=max_extra_length,
                    min_difference=min_difference,
                )
            )
    return out
