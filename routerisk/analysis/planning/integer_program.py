"""The exact method: a 0/1 integer programme solved with HiGHS, its relaxation and fixing.

A 0/1 integer programme solved with :func:`scipy.optimize.milp` (HiGHS). A variable ``x`` is
one (job, candidate, vehicle) triple; each job takes at most one. Candidate ``i`` *occupies*
its vehicle over the half-open interval ``[start, start + duration + turnaround)``.

No-overlap is written in time-indexed form as a flow over time: the time points are the
distinct starts and occupancy ends of the candidates; a vehicle either idles from one point to
the next (continuous variable ``y``) or drives a candidate from the point of its start to the
point of its occupancy end; flow is conserved at every point. Over each stretch between two
points the vehicles busy with candidates plus the idle ones equal the fleet, so no two
candidates on one vehicle overlap. Because the points are the candidates' own start and end
instants rather than a fixed grid, this is exact for any start times and durations, with no
rounding of occupancy to a grid (and no more rows than needed). Times are compared on a
1/1000-minute integer scale, rounded outwards (starts down, ends up), so rounding can only
forbid, never allow, an overlap. The flow form has the same linear relaxation as the clique
constraints "at most V candidates occupy each start instant" but is sparser, and HiGHS solves
it faster.

When no job or candidate restricts its vehicles, the vehicles are interchangeable and the
model is aggregated: one variable per (job, candidate) and a single flow of size ``V``, so at
most ``V`` candidates occupy any instant. That is exact because interval graphs are perfect:
intervals of which at most ``V`` contain any point can be coloured with ``V`` colours, and
greedy colouring in order of start time does it; the vehicles are assigned that way
(:mod:`routerisk.analysis.planning.solve`). When any restriction exists, each vehicle has its own
unit flow and its own variables.

Before the integer programme, the linear relaxation gives an upper bound on the number of
jobs that fit and a lower bound on the risk; a heuristic (:mod:`routerisk.analysis.planning.search`)
gives an incumbent; and *reduced-cost fixing* removes every variable that the relaxation
proves cannot be 1 in any schedule better than the incumbent. Stage 1 is skipped when the
heuristic already places as many jobs as the relaxation allows; stage 2 when the heuristic
meets the risk bound.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import sparse
from scipy.optimize import Bounds, LinearConstraint, linprog, milp

from routerisk.analysis.planning.model import _Opt


@dataclass
class _Model:
    """The 0/1 programme in time-expanded flow form (see the module docstring).

    Columns are the candidate variables ``x`` (``n_x`` of them: one per usable (job,
    candidate), or per (job, candidate, vehicle)) followed by continuous idle variables ``y``.
    ``flow @ z == flow_rhs`` holds flow conservation, ``jobs @ x <= 1`` the one-start-per-job
    rows.
    """

    opts: list[_Opt]
    vehicle: np.ndarray  # vehicle index per x variable, -1 when aggregated
    risk: np.ndarray  # cost of the x variables
    flow: sparse.csr_array
    flow_rhs: np.ndarray
    jobs: sparse.csr_array
    y_upper: np.ndarray
    aggregated: bool

    @property
    def n_x(self) -> int:
        return self.risk.size

    @property
    def n_jobs(self) -> int:
        return int(self.jobs.shape[0])

    def cost(self, c_x: np.ndarray) -> np.ndarray:
        """Return the full cost vector for costs ``c_x`` of the x variables (idle costs 0)."""
        return np.concatenate([c_x, np.zeros(self.y_upper.size)])


def _build_model(usable: Sequence[Sequence[_Opt]], n_vehicles: int) -> _Model:
    """Build the flow model: one flow of ``V`` identical vehicles, or one unit per vehicle.

    The time points of a flow are the distinct starts and occupancy ends of its candidates.
    At each point, vehicles idle since the previous point plus vehicles arriving (candidates
    ending there) equal vehicles idling on plus vehicles leaving (candidates starting there);
    idling before the first point is the flow's size.
    """
    everyone = tuple(range(n_vehicles))
    aggregated = all(o.vehicles == everyone for opts in usable for o in opts)
    var_opt: list[_Opt] = []
    var_veh: list[int] = []
    job_row: list[int] = []
    n_jobs = 0
    for opts in usable:
        if not opts:
            continue
        for o in opts:
            for v in [-1] if aggregated else o.vehicles:
                var_opt.append(o)
                var_veh.append(v)
                job_row.append(n_jobs)
        n_jobs += 1
    n = len(var_opt)
    veh = np.asarray(var_veh, dtype=np.int64)
    s = np.asarray([o.s for o in var_opt], dtype=np.int64)
    e = np.asarray([o.e for o in var_opt], dtype=np.int64)

    rows: list[np.ndarray] = []
    cols: list[np.ndarray] = []
    vals: list[np.ndarray] = []
    rhs: list[np.ndarray] = []
    y_upper: list[np.ndarray] = []
    n_rows, n_cols = 0, n
    for v, size in [(-1, n_vehicles)] if aggregated else [(v, 1) for v in everyone]:
        members = np.flatnonzero(veh == v)
        if members.size == 0:
            continue
        points = np.unique(np.concatenate([s[members], e[members]]))
        k = points.size
        leave = n_rows + np.searchsorted(points, s[members])
        arrive = n_rows + np.searchsorted(points, e[members])
        idle = np.arange(k)  # y after point i, i = 0..k-1 (the last returns to the depot)
        rows += [leave, arrive, n_rows + idle, n_rows + idle[1:]]
        cols += [members, members, n_cols + idle, n_cols + idle[:-1]]
        vals += [-np.ones(members.size), np.ones(members.size), -np.ones(k), np.ones(k - 1)]
        b = np.zeros(k)
        b[0] = -size
        rhs.append(b)
        y_upper.append(np.full(k, float(size)))
        n_rows += k
        n_cols += k
    flow = sparse.csr_array(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n_rows, n_cols)
    )
    jobs = sparse.csr_array(
        (np.ones(n), (np.asarray(job_row, dtype=np.int64), np.arange(n))), shape=(n_jobs, n_cols)
    )
    risk = np.asarray([o.risk for o in var_opt], dtype=float)
    return _Model(
        var_opt, veh, risk, flow, np.concatenate(rhs), jobs, np.concatenate(y_upper), aggregated
    )


@dataclass
class _LP:
    """Linear relaxation: optimum, x part of the solution, reduced costs of the x bounds."""

    value: float
    x: np.ndarray
    cost_up: np.ndarray  # objective rise per unit of a variable raised from 0 (>= 0)
    cost_down: np.ndarray  # objective rise per unit of a variable lowered from 1 (>= 0)


def _lp(model: _Model, c_x: np.ndarray, *, min_count: int | None) -> _LP:
    a_ub, b_ub = model.jobs, np.ones(model.n_jobs)
    if min_count is not None:
        count = sparse.csr_array(
            (-np.ones(model.n_x), (np.zeros(model.n_x, dtype=np.int64), np.arange(model.n_x))),
            shape=(1, a_ub.shape[1]),
        )
        a_ub = sparse.vstack([a_ub, count]).tocsr()
        b_ub = np.append(b_ub, -float(min_count))
    bounds = np.column_stack(
        [
            np.zeros(model.n_x + model.y_upper.size),
            np.concatenate([np.ones(model.n_x), model.y_upper]),
        ]
    )
    res = linprog(
        model.cost(c_x),
        A_ub=a_ub,
        b_ub=b_ub,
        A_eq=model.flow,
        b_eq=model.flow_rhs,
        bounds=bounds,
        method="highs-ipm",
    )
    if res.status != 0:  # cannot happen: the empty schedule (or a found one) is feasible
        raise RuntimeError(f"linear relaxation failed: {res.message}")
    n = model.n_x
    return _LP(
        float(res.fun),
        np.asarray(res.x[:n]),
        np.asarray(res.lower.marginals[:n]),
        -np.asarray(res.upper.marginals[:n]),
    )


def _reduced_cost_fixing(lp: _LP, slack: float) -> tuple[np.ndarray, np.ndarray]:
    """Return (x variables that may be 1, x variables that must be 1) within ``slack``.

    For any 0/1 solution x, ``c @ x >= lp.value + cost_up @ x + cost_down @ (1 - x)`` (LP
    duality). So a solution at most ``slack`` above the LP optimum has ``x_i = 0`` where
    ``cost_up_i > slack`` and ``x_i = 1`` where ``cost_down_i > slack``. A small margin covers
    the LP's tolerances.
    """
    limit = slack + 1e-6 * max(1.0, abs(lp.value))
    return lp.cost_up <= limit, lp.cost_down > limit


@dataclass
class _Result:
    x: np.ndarray | None
    status: str  # "optimal", "infeasible" or "time_limit"
    value: float | None
    bound: float | None


def _mip(
    model: _Model,
    c_x: np.ndarray,
    *,
    min_count: int,
    keep: np.ndarray,
    fix_one: np.ndarray,
    time_limit: float,
    mip_rel_gap: float,
) -> _Result:
    """Solve the 0/1 programme with the x variables outside ``keep`` set to 0, ``fix_one`` to 1."""
    n = model.n_x
    n_y = model.y_upper.size
    lower = np.concatenate([fix_one & keep, np.zeros(n_y)]).astype(float)
    upper = np.concatenate([keep.astype(float), model.y_upper])
    job_lower = np.ones(model.n_jobs) if min_count >= model.n_jobs else np.zeros(model.n_jobs)
    constraints = [
        LinearConstraint(model.flow, model.flow_rhs, model.flow_rhs),
        LinearConstraint(model.jobs, job_lower, 1.0),  # every job placed: rows are equalities
    ]
    if 0 < min_count < model.n_jobs:
        count = np.concatenate([np.ones(n), np.zeros(n_y)])[None, :]
        constraints.append(LinearConstraint(count, min_count, np.inf))
    res = milp(
        model.cost(c_x),
        integrality=np.concatenate([np.ones(n), np.zeros(n_y)]),
        bounds=Bounds(lower, upper),
        constraints=constraints,
        options={"disp": False, "time_limit": max(time_limit, 0.05), "mip_rel_gap": mip_rel_gap},
    )
    x = None if res.x is None else np.round(np.asarray(res.x[:n]))
    value = None if x is None else float(c_x @ x)
    bound = getattr(res, "mip_dual_bound", None)
    bound = None if bound is None or not math.isfinite(bound) else float(bound)
    if res.status == 0:
        return _Result(x, "optimal", value, value if bound is None else bound)
    if res.status == 2:
        return _Result(None, "infeasible", None, None)
    return _Result(x, "time_limit", value, bound)
