"""Choose a start and a vehicle for each job: most jobs placed, then least total risk.

:func:`solve_schedule` is the pure optimisation. It takes, for every run repetition (a *job*,
:class:`~routerisk.analysis.planning.model.Job`), a list of candidate placements and chooses at most
one candidate per job and a vehicle for it, so that two jobs on one vehicle never overlap,
counting the turnaround gap after each run. It places as many jobs as possible first and,
among those schedules, the one of least total risk.

Objective
---------
Lexicographic, solved in two stages rather than with one big-M weighted objective: a big-M
weight makes the risk a tiny fraction of the objective, so the solver's relative gap
tolerance would swallow it. Stage 1 maximises the number of placed jobs; stage 2 minimises the
total risk subject to placing at least that many. The linear relaxations, the 0/1 programme
and reduced-cost fixing are in :mod:`routerisk.analysis.planning.integer_program`; the heuristic
that gives the incumbent is in :mod:`routerisk.analysis.planning.search`.
"""

from __future__ import annotations

import logging
import math
import time
from collections.abc import Sequence

import numpy as np

from routerisk.analysis.planning.integer_program import (
    _build_model,
    _lp,
    _mip,
    _Model,
    _reduced_cost_fixing,
)
from routerisk.analysis.planning.model import (
    Candidate,
    Job,
    Schedule,
    _as_jobs,
    _check_turnaround,
    _fleet,
    _Opt,
    _prepare,
    _schedule,
)
from routerisk.analysis.planning.search import _EPS_RISK, _Placement, _risk, _Search

# The package's logger, so that log lines name ``routerisk.analysis.planning`` as before the split.
logger = logging.getLogger(__package__)


def _colour(picks: Sequence[_Opt], n_vehicles: int) -> dict[int, _Placement]:
    """Give vehicles to intervals of which at most ``n_vehicles`` overlap, greedily by start."""
    free_at = [-(10**18)] * n_vehicles
    sol: dict[int, _Placement] = {}
    for o in sorted(picks, key=lambda o: (o.s, o.e, o.job)):
        v = next(v for v in range(n_vehicles) if free_at[v] <= o.s)
        free_at[v] = o.e
        sol[o.job] = (o, v)
    return sol


def _search_from_x(
    model: _Model, x: np.ndarray, usable: Sequence[Sequence[_Opt]], n_vehicles: int
) -> _Search:
    chosen = np.flatnonzero(x > 0.5)
    if model.aggregated:
        sol = _colour([model.opts[i] for i in chosen], n_vehicles)
    else:
        sol = {model.opts[i].job: (model.opts[i], int(model.vehicle[i])) for i in chosen}
    search = _Search(usable, n_vehicles)
    for j, p in sol.items():
        search.place(j, p)
    return search


def _rel_gap(value: float, bound: float | None) -> float | None:
    if bound is None:
        return None
    diff = max(value - bound, 0.0)
    if diff <= 1e-9 * max(1.0, abs(value)):
        return 0.0
    return diff / max(abs(value), 1e-12)


def _optimise(
    model: _Model,
    usable: Sequence[Sequence[_Opt]],
    n_vehicles: int,
    *,
    exact: bool,
    time_limit: float,
    mip_rel_gap: float,
    notes: list[str],
) -> tuple[dict[int, _Placement], str, float | None]:
    """Find the schedule; return its placements, the status and a lower bound of its risk.

    1. Linear relaxations: the most jobs that fit fractionally (an upper bound on the count),
       and the least risk at that count (its solution guides the heuristic).
    2. Heuristic: LP-guided, regret and earliest-end insertion, each improved by local
       search; the best is the incumbent. Without ``exact`` it is returned with the LP bound.
    3. Stage 1 (only if the incumbent places fewer jobs than the bound): 0/1 programme for a
       schedule with one job more than the incumbent, over the variables reduced-cost fixing
       leaves; infeasible means the incumbent's count is the most.
    4. Stage 2: least risk at that count, again over the variables left by reduced-cost
       fixing with the incumbent's risk (skipped when the incumbent meets the LP bound).
    """
    deadline = time.perf_counter() + time_limit
    n = model.risk.size
    count_lp = _lp(model, -np.ones(n), min_count=None)
    most = min(model.n_jobs, math.floor(-count_lp.value + 1e-6))
    risk_lp = _lp(model, model.risk, min_count=most)

    starts = []
    for fill in ("guided", "regret", "earliest_end"):
        search = _Search(usable, n_vehicles)
        if fill == "guided":
            search.guided_fill(model, risk_lp.x)
        elif fill == "regret":
            search.regret_fill()
        else:
            search.earliest_end_fill()
        search.improve()
        starts.append(search)
    best = min(starts, key=_Search.key)
    status = "optimal" if exact else "heuristic"

    if len(best.sol) < most and exact:  # stage 1: can one more job be placed?
        k = len(best.sol)
        keep, fix_one = _reduced_cost_fixing(count_lp, -count_lp.value - (k + 1))
        res = _mip(
            model,
            -np.ones(n),
            min_count=k + 1,
            keep=keep,
            fix_one=fix_one,
            time_limit=deadline - time.perf_counter(),
            mip_rel_gap=0.0,
        )
        if res.x is not None:
            best = _search_from_x(model, res.x, usable, n_vehicles)
            best.improve()
        if res.status == "time_limit":
            status = "time_limit"
            up_to = most if res.bound is None else min(most, math.floor(-res.bound + 1e-6))
            notes.append(f"time limit: {len(best.sol)} jobs placed, up to {up_to} may fit")
    elif len(best.sol) < most:
        notes.append(
            f"the linear relaxation allows up to {most} placed jobs; the heuristic "
            f"placed {len(best.sol)} (more may fit)"
        )

    target = len(best.sol)
    lp = risk_lp if target == most else _lp(model, model.risk, min_count=target)
    bound = lp.value
    upper = best.risk
    if not exact or upper - bound <= max(1e-9, mip_rel_gap * abs(upper)):
        return best.sol, status, bound
    remaining = deadline - time.perf_counter()
    if remaining <= 0:
        notes.append(
            "time limit reached before the integer programme ran; "
            "the gap is against the linear relaxation"
        )
        return best.sol, "time_limit", bound
    keep, fix_one = _reduced_cost_fixing(lp, upper - bound)
    res = _mip(
        model,
        model.risk,
        min_count=target,
        keep=keep,
        fix_one=fix_one,
        time_limit=remaining,
        mip_rel_gap=mip_rel_gap,
    )
    if res.x is not None and res.value is not None and res.value < upper - _EPS_RISK:
        best = _search_from_x(model, res.x, usable, n_vehicles)
    if res.status == "infeasible":  # nothing better than the incumbent exists
        return best.sol, status, upper
    if res.status == "time_limit":
        status = "time_limit"
        notes.append("time limit reached before the least risk was proven")
    if res.bound is not None:
        bound = max(bound, min(upper, res.bound))
    return best.sol, status, bound


def solve_schedule(
    options: Sequence[Job | Sequence[Candidate]],
    *,
    vehicles: int | Sequence[str],
    turnaround_min: float,
    max_exact_vars: int = 20000,
    time_limit: float = 60.0,
    mip_rel_gap: float = 1e-7,
) -> Schedule:
    """Choose a start and a vehicle for each job: most jobs placed, then least total risk.

    Parameters
    ----------
    options
        One entry per job: a :class:`Job`, or a plain sequence of :class:`Candidate` (then
        named ``job<i>``, repetition 1, no window, no vehicle requirement).
    vehicles
        Number of interchangeable vehicles (ids ``v1``, ``v2``, ...) or the list of ids.
    turnaround_min
        Minutes a vehicle needs between the end of one run and the start of the next.
    max_exact_vars
        Largest integer programme solved exactly; above it the heuristic is used.
    time_limit
        Seconds for the search (relaxations, heuristic and both integer programmes); when it
        runs out the best schedule found is returned with status ``"time_limit"``.
    mip_rel_gap
        Relative optimality tolerance of the risk stage.

    Returns
    -------
    Schedule
        See :class:`Schedule` for the meaning of ``status`` and ``gap``.

    Raises
    ------
    OptionError
        For a bad fleet or a negative turnaround.
    ValueError
        For a candidate with a non-positive duration, a non-finite risk or mixed time kinds.
    """
    clock = time.perf_counter()
    jobs = _as_jobs(options)
    fleet = _fleet(vehicles)
    _check_turnaround(turnaround_min)
    usable, reasons = _prepare(jobs, fleet, turnaround_min)
    notes: list[str] = []
    sol: dict[int, _Placement] = {}
    bound: float | None = 0.0
    n_vars = sum(len(o.vehicles) for opts in usable for o in opts)
    if n_vars == 0:
        status, method = ("infeasible" if jobs else "optimal"), "none"
    else:
        model = _build_model(usable, len(fleet))
        n_vars = model.n_x
        exact = n_vars <= max_exact_vars
        if exact:
            method = "milp-aggregated" if model.aggregated else "milp-per-vehicle"
        else:
            method = "heuristic"
            notes.append(
                f"{n_vars} variables exceed max_exact_vars={max_exact_vars}: "
                "heuristic used, gap against the linear relaxation"
            )
        sol, status, bound = _optimise(
            model,
            usable,
            len(fleet),
            exact=exact,
            time_limit=time_limit,
            mip_rel_gap=mip_rel_gap,
            notes=notes,
        )
    total = _risk(sol)
    schedule = _schedule(
        jobs,
        fleet,
        {j: (o.cand, v) for j, (o, v) in sol.items()},
        reasons,
        total,
        status,
        _rel_gap(total, bound),
        bound,
        method,
        notes,
        time.perf_counter() - clock,
        blocked="fleet busy: every usable start conflicts with the runs placed",
    )
    logger.info(
        "solve_schedule placed %d of %d jobs, total risk %.6g, status %s (%s, %d variables) "
        "in %.2f s",
        schedule.placed,
        len(jobs),
        total,
        status,
        method,
        n_vars,
        schedule.seconds,
    )
    return schedule
