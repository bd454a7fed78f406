"""The naive plan: every run at its earliest planned start, for comparison.

:func:`naive_schedule` gives the plan one would make without the optimiser
(:func:`routerisk.analysis.planning.solve.solve_schedule`): every job at its earliest start on its
planned route, vehicles assigned greedily, overlaps and rule breaks noted.
"""

from __future__ import annotations

import time
from collections.abc import Sequence

from routerisk.analysis.planning.model import (
    _TICKS,
    Candidate,
    Job,
    Schedule,
    _allowed,
    _as_jobs,
    _Axis,
    _check_candidate,
    _check_turnaround,
    _fleet,
    _minutes_between,
    _plus_minutes,
    _schedule,
)


def naive_schedule(
    options: Sequence[Job | Sequence[Candidate]],
    *,
    vehicles: int | Sequence[str],
    turnaround_min: float,
) -> Schedule:
    """Plan every job at its earliest planned start, vehicles assigned greedily, for comparison.

    Each job takes its earliest candidate on the planned route (``planned=True``; any
    candidate if none is marked planned), whatever its risk or rule breaks. In order of start,
    a job goes on the first allowed vehicle that is free (end of its previous run plus the
    turnaround); when none is free it goes on the allowed vehicle that frees up first, and the
    overlap is noted. Rule breaks and starts outside the window are noted too.

    Parameters
    ----------
    options, vehicles, turnaround_min
        As for :func:`solve_schedule`.

    Returns
    -------
    Schedule
        With status ``"naive"`` and no gap; jobs without any candidate, or without an allowed
        vehicle, are unplaced.
    """
    clock = time.perf_counter()
    jobs = _as_jobs(options)
    fleet = _fleet(vehicles)
    _check_turnaround(turnaround_min)
    axis = _Axis([c.start for job in jobs for c in job.candidates])
    index = {v: i for i, v in enumerate(fleet)}
    reasons: dict[int, str] = {}
    picks: list[tuple[int, int, int, int, tuple[int, ...]]] = []  # start, end, job, cand, vehicles
    notes: list[str] = []
    for j, job in enumerate(jobs):
        if not job.candidates:
            reasons[j] = "window too short: no candidate start was given"
            continue
        pool = [c for c, cand in enumerate(job.candidates) if cand.planned] or list(
            range(len(job.candidates))
        )
        c = min(pool, key=lambda c: (axis.floor(job.candidates[c].start), c))
        cand = job.candidates[c]
        _check_candidate(j, c, cand)
        allowed = _allowed(job, cand, index)
        if not allowed:
            reasons[j] = "no vehicle of the fleet is allowed for its earliest start"
            continue
        label = f"{job.run} #{job.repetition}"
        if cand.rule_breaks:
            notes.append(f"{label}: its earliest start breaks {cand.rule_breaks} hard rule(s)")
        end = _plus_minutes(cand.start, cand.duration)
        if job.earliest is not None and _minutes_between(job.earliest, cand.start) < -1e-9:
            notes.append(f"{label}: starts before its earliest time")
        if job.latest is not None and _minutes_between(job.latest, end) > 1e-9:
            notes.append(f"{label}: ends after its latest time")
        picks.append((axis.floor(cand.start), axis.ceil(end, turnaround_min), j, c, allowed))
    free_at = [-(10**18)] * len(fleet)
    sol: dict[int, tuple[int, int]] = {}
    for s, e, j, c, allowed in sorted(picks):
        free = [v for v in allowed if free_at[v] <= s]
        v = free[0] if free else min(allowed, key=lambda v: (free_at[v], v))
        if not free:
            notes.append(
                f"{jobs[j].run} #{jobs[j].repetition}: overlaps the previous run on vehicle "
                f"{fleet[v]} by {(free_at[v] - s) / _TICKS:.1f} min (turnaround included)"
            )
        free_at[v] = max(free_at[v], e)
        sol[j] = (c, v)
    total = float(sum(jobs[j].candidates[c].risk for j, (c, _) in sol.items()))
    return _schedule(
        jobs,
        fleet,
        sol,
        reasons,
        total,
        "naive",
        None,
        None,
        "naive",
        notes,
        time.perf_counter() - clock,
        blocked="",
    )
