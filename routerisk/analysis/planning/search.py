"""The scheduling heuristic: insertion starts and local improvement.

Three deterministic starts, each followed by local improvement: insertion guided by the
linear relaxation's solution; regret insertion (repeatedly place the job that would lose most
by waiting, i.e. the largest risk difference between its best and second-best fitting start;
a job with one fitting start goes first); and earliest-end insertion (good for the job
count). Local improvement repeats until nothing improves: insert unplaced jobs (directly or by
moving the one job in the way), let an unplaced job replace a placed job of higher risk, move
one job to a better start, move a job to a better start held by one other job which moves
elsewhere. The best result serves as the incumbent of the exact method
(:mod:`routerisk.analysis.planning.integer_program`), and is the answer when the model has more than
``max_exact_vars`` variables; then the gap is reported against the linear relaxation (least
risk over fractional schedules placing at least as many jobs), a proven bound on how far from
optimal it can be.
"""

from __future__ import annotations

import bisect
import math
from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING

import numpy as np

from routerisk.analysis.planning.model import _Opt

if TYPE_CHECKING:
    from routerisk.analysis.planning.integer_program import _Model


_Placement = tuple[_Opt, int]  # (option, vehicle index)


class _Timeline:
    """Busy intervals of each vehicle and the jobs in them, sorted by start (never overlapping)."""

    def __init__(self, n_vehicles: int) -> None:
        self.starts: list[list[int]] = [[] for _ in range(n_vehicles)]
        self.ends: list[list[int]] = [[] for _ in range(n_vehicles)]
        self.jobs: list[list[int]] = [[] for _ in range(n_vehicles)]

    def fits(self, v: int, s: int, e: int) -> bool:
        starts, ends = self.starts[v], self.ends[v]
        i = bisect.bisect_right(starts, s)
        if i > 0 and ends[i - 1] > s:
            return False
        return not (i < len(starts) and starts[i] < e)

    def blockers(self, v: int, s: int, e: int) -> list[int]:
        """Return the jobs on ``v`` whose occupancy overlaps ``[s, e)``."""
        starts, ends, jobs = self.starts[v], self.ends[v], self.jobs[v]
        i = bisect.bisect_right(ends, s)  # ends are sorted too, as intervals do not overlap
        found = []
        while i < len(starts) and starts[i] < e:
            found.append(jobs[i])
            i += 1
        return found

    def add(self, v: int, s: int, e: int, job: int) -> None:
        i = bisect.bisect_right(self.starts[v], s)
        self.starts[v].insert(i, s)
        self.ends[v].insert(i, e)
        self.jobs[v].insert(i, job)

    def remove(self, v: int, job: int) -> None:
        i = self.jobs[v].index(job)
        del self.starts[v][i], self.ends[v][i], self.jobs[v][i]


_EPS_RISK = 1e-9  # a move must lower the risk by more than this to count as an improvement


class _Search:
    """A schedule under construction or improvement: placements and vehicle timelines."""

    def __init__(self, usable: Sequence[Sequence[_Opt]], n_vehicles: int) -> None:
        self.usable = usable
        self.tl = _Timeline(n_vehicles)
        self.sol: dict[int, _Placement] = {}

    @property
    def risk(self) -> float:
        return _risk(self.sol)

    def key(self) -> tuple[int, float]:
        """Return the sort key of the objective: more placed jobs first, then less risk."""
        return -len(self.sol), self.risk

    def place(self, j: int, p: _Placement) -> None:
        self.tl.add(p[1], p[0].s, p[0].e, j)
        self.sol[j] = p

    def lift(self, j: int) -> _Placement:
        p = self.sol.pop(j)
        self.tl.remove(p[1], j)
        return p

    def vehicle_for(self, o: _Opt) -> int | None:
        """Return the fitting vehicle leaving the least idle time before ``o`` (best fit)."""
        best, best_idle = None, 0
        s, e = o.s, o.e
        for v in o.vehicles:  # Timeline.fits inlined, with the idle time before (hot loop)
            starts, ends = self.tl.starts[v], self.tl.ends[v]
            i = bisect.bisect_right(starts, s)
            if (i > 0 and ends[i - 1] > s) or (i < len(starts) and starts[i] < e):
                continue
            idle = s - ends[i - 1] if i > 0 else s + 10**12
            if best is None or idle < best_idle:
                best, best_idle = v, idle
        return best

    def best_insert(self, j: int) -> _Placement | None:
        """Return the least-risk fitting placement of job ``j`` (options sorted by risk)."""
        for o in self.usable[j]:
            v = self.vehicle_for(o)
            if v is not None:
                return o, v
        return None

    def regret_fill(self) -> None:
        """Place the unplaced jobs one at a time, the one with the largest regret first.

        The regret of a job is the risk difference between its second-best and best start
        that still fit; a job with a single fitting start has infinite regret.
        """
        pending = {
            j: [o for o in opts if self.vehicle_for(o) is not None]
            for j, opts in enumerate(self.usable)
            if opts and j not in self.sol
        }
        while True:
            best_key: tuple[float, int, float, int] | None = None
            for j, opts in pending.items():
                if opts:
                    second = opts[1].risk if len(opts) > 1 else math.inf
                    key = (-(second - opts[0].risk), len(opts), opts[0].risk, j)
                    if best_key is None or key < best_key:
                        best_key = key
            if best_key is None:
                return
            j = best_key[3]
            pending.pop(j)
            placement = self.best_insert(j)
            if placement is not None:
                self.place(j, placement)
                o, v = placement
                for k, opts in pending.items():  # only starts overlapping o on v can be lost
                    pending[k] = [
                        p
                        for p in opts
                        if not (v in p.vehicles and p.s < o.e and o.s < p.e)
                        or self.vehicle_for(p) is not None
                    ]

    def guided_fill(self, model: _Model, x: np.ndarray) -> None:
        """Place jobs following a fractional (LP) solution ``x`` of ``model``, then the rest.

        Jobs whose LP value is most concentrated go first; each tries its starts (and, per
        vehicle, its vehicles) in order of LP value.
        """
        prefs: dict[int, list[tuple[float, float, _Opt, int]]] = {}
        for i in np.flatnonzero(x > 1e-6):
            o, v = model.opts[i], int(model.vehicle[i])
            prefs.setdefault(o.job, []).append((-float(x[i]), o.risk, o, v))
        order = sorted(prefs, key=lambda j: (min(p[0] for p in prefs[j]), len(self.usable[j]), j))
        for j in order:
            for _, _, o, v in sorted(prefs[j], key=lambda p: (p[0], p[1], p[2].cand, p[3])):
                if v < 0:
                    chosen = self.vehicle_for(o)
                else:
                    chosen = v if self.tl.fits(v, o.s, o.e) else None
                if chosen is not None:
                    self.place(j, (o, chosen))
                    break
        self.regret_fill()

    def earliest_end_fill(self) -> None:
        """Place jobs greedily by the earliest end of a fitting start, ties by lower risk.

        Earliest end first is the classic greedy rule for fitting many intervals.
        """
        while True:
            best: _Placement | None = None
            best_key: tuple[float, float, int] = (math.inf, math.inf, 0)
            for j, opts in enumerate(self.usable):
                if j in self.sol:
                    continue
                for o in opts:
                    key = (o.e, o.risk, j)
                    if key < best_key and (v := self.vehicle_for(o)) is not None:
                        best, best_key = (o, v), key
            if best is None:
                return
            self.place(best[0].job, best)

    def improve(self, *, rounds: int = 20) -> None:
        """Apply improving moves until none is left (or ``rounds`` passes)."""
        for _ in range(rounds):
            changed = self._insert_unplaced()
            changed = self._swap_in() or changed
            changed = self._move_one() or changed
            changed = self._move_two() or changed
            if not changed:
                return

    def _insert_unplaced(self) -> bool:
        """Insert unplaced jobs, directly or by moving the single job that blocks a start."""
        changed = False
        others: dict[int, list[_Placement]] = {}
        for u, opts in enumerate(self.usable):
            if u in self.sol or not opts:
                continue
            p = self.best_insert(u)
            if p is not None:
                self.place(u, p)
                changed = True
                continue
            if self._eject_for(u, others):
                changed = True
                others.clear()
        return changed

    def _other_places(self, j: int) -> list[_Placement]:
        """Return the placements of placed job ``j`` that fit if it moved, by risk."""
        here = self.lift(j)
        found = [
            (o, v)
            for o in self.usable[j]
            for v in o.vehicles
            if (o, v) != here and self.tl.fits(v, o.s, o.e)
        ]
        self.place(j, here)
        return found

    def _eject_for(self, u: int, others: dict[int, list[_Placement]]) -> bool:
        """Place ``u`` where exactly one job is in the way, if that job can move elsewhere.

        ``others`` caches each blocker's other fitting placements; placements only get added
        while it is kept (the caller clears it after a move), so it stays a superset.
        """
        for o in self.usable[u]:
            for v in o.vehicles:
                blocking = self.tl.blockers(v, o.s, o.e)
                if len(blocking) != 1:
                    continue
                b = blocking[0]
                if b not in others:
                    others[b] = self._other_places(b)
                if not others[b]:
                    continue
                old = self.lift(b)
                self.place(u, (o, v))
                pb = next((p for p in others[b] if self.tl.fits(p[1], p[0].s, p[0].e)), None)
                if pb is not None:
                    self.place(b, pb)
                    return True
                self.lift(u)
                self.place(b, old)
        return False

    def _swap_in(self) -> bool:
        """Let an unplaced job take the place of a single placed job of higher risk."""
        changed = False
        for u, opts in enumerate(self.usable):
            if u in self.sol:
                continue
            for o in opts:
                done = False
                for v in o.vehicles:
                    blocking = self.tl.blockers(v, o.s, o.e)
                    if len(blocking) == 1 and o.risk < self.sol[blocking[0]][0].risk - _EPS_RISK:
                        self.lift(blocking[0])
                        self.place(u, (o, v))
                        done = changed = True
                        break
                if done:
                    break
        return changed

    def _move_one(self) -> bool:
        """Move each job to its least-risk fitting start."""
        changed = False
        for j in sorted(self.sol):
            old = self.lift(j)
            new = self.best_insert(j) or old
            if new[0].risk < old[0].risk - _EPS_RISK:
                changed = True
            else:
                new = old
            self.place(j, new)
        return changed

    def _move_two(self) -> bool:
        """Move a job to a better start held by one other job, which moves elsewhere."""
        changed = False
        for a in sorted(self.sol):
            cur = self.sol[a][0].risk
            moved = False
            for o in self.usable[a]:
                if moved or o.risk >= cur - _EPS_RISK:
                    break
                for v in o.vehicles:
                    blocking = [b for b in self.tl.blockers(v, o.s, o.e) if b != a]
                    if len(blocking) != 1:
                        continue
                    b = blocking[0]
                    old_a, old_b = self.lift(a), self.lift(b)
                    if self.tl.fits(v, o.s, o.e):
                        self.place(a, (o, v))
                        pb = self.best_insert(b)
                        if pb is not None and o.risk + pb[0].risk < cur + old_b[0].risk - _EPS_RISK:
                            self.place(b, pb)
                            moved = changed = True
                            break
                        self.lift(a)
                    self.place(a, old_a)
                    self.place(b, old_b)
        return changed


def _risk(sol: Mapping[int, _Placement]) -> float:
    return float(sum(p[0].risk for p in sol.values()))
