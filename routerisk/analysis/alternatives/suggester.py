"""The search for lower-exposure alternatives: costs in time, penalty rounds, repairs.

See :mod:`routerisk.analysis.alternatives` for the method.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

import numpy as np

from routerisk.analysis.alternatives.explain import (
    RELAXED_TIME_FACTOR,
    Why,
    departure_step,
    ends_in_force,
    rule_free_departures,
    why_none,
)
from routerisk.analysis.alternatives.result import HARD_RULES, Alternative, Candidate, Suggestion
from routerisk.analysis.alternatives.search import Leg, RouteGraph
from routerisk.analysis.scoring import RouteScore, Scorer
from routerisk.profile import MINUTES_PER_WEEK

PENALTY = 1.6  # cost factor on the edges of already chosen paths (diversity)
MAX_REPAIRS = 8
#: An alternative this much shorter than the plan (share of length) gets a caveat: the risk
#: it saves may come from driving less, not from safer streets.
SHORTER_CAVEAT = 0.2
#: The plan's fixed partial ends: (head rows, head shares, tail rows, tail shares), or None.
_Ends = tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray] | None


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
    ) -> tuple[list[Candidate], list[tuple[float, float]]]:
        """Run the penalty rounds on the legs; return rule-abiding candidates and the front."""
        penalty = np.ones(self.g.m)
        cache: dict[Any, Any] = {}
        seen: dict[bytes, Candidate] = {}
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

        def judge(rows: np.ndarray) -> Candidate:
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
            return Candidate(full, ffrac, risk, minutes, km, overlap, broken)

        # the legs' share of the time bound: the fixed partial ends take their own time
        budget = plan.duration_min * 60.0 * (1 + max_extra_time) * (1 + 1e-9) + 1e-6 - ends_s
        legs = self._legs_within(anchors, budget)
        cands, front = (
            self._search(legs, depart, m0, slack, rounds, judge, ends) if legs else ([], [])
        )
        chosen = self._diverse([c for c in cands if not c.broken], count, min_difference)
        note = ""
        why = Why()
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
            why = why_none(plan, within, cands, legs is not None, max_extra_time)
        ends_note = ends_in_force(plan, head, tail)
        if ends_note:
            why.reasons.append(ends_note)
            why.steps.append(
                "move the start or the end of the route out of the rule zone, or "
                "depart when the rule is not in force"
            )
        departures = None
        if plan.rule_breaks and (ends_note or not any(HARD_RULES not in c.broken for c in chosen)):
            departures = rule_free_departures(sc, plan_rows, frac, depart)
            why.steps.append(departure_step(departures, depart))
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
    ) -> list[Candidate]:
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

    def _alternative(
        self, name: str, c: Candidate, plan: RouteScore, depart: dt.datetime, label: str
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

    def _diverse(self, pool: list[Candidate], count: int, min_difference: float) -> list[Candidate]:
        """Pick, lowest risk first, candidates that differ enough from each other."""
        chosen: list[Candidate] = []
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

    idx = index or matching.RoadIndex.of_network(net)
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
