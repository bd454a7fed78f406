"""Scheduling input and output, and the time axis the solvers share.

A *job* (:class:`Job`) is one repetition of a run with its candidate placements
(:class:`Candidate`: start, duration, risk, hard-rule breaks, allowed vehicles); a
:class:`Schedule` holds the chosen :class:`Assignment` of each placed job and an
:class:`Unplaced` row, with its reason, for each other job. :func:`jobs_for_runs` expands
runs into jobs; :func:`overlaps` checks a schedule.

Times
-----
Candidate starts are either numbers (minutes after local midnight) or :class:`datetime`
objects (all naive or all aware); durations and the turnaround are in minutes. A schedule
reports starts and ends in the type it was given. Internally times are integer ticks of
1/1000 minute from a common origin (:class:`_Axis`), rounded outwards (starts down, ends up),
so rounding can only forbid, never allow, an overlap.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from typing import Any

from routerisk.errors import OptionError
from routerisk.io.runs import RunSpec

TimeLike = float | int | datetime


@dataclass(frozen=True)
class Candidate:
    """One possible placement of a job.

    Attributes
    ----------
    start
        Minutes after local midnight, or a datetime.
    duration
        Minutes from start to end of the run (without the turnaround).
    risk
        Exposure risk of driving the run at this start.
    rule_breaks
        Number of hard-rule breaks; a candidate with any is never chosen.
    vehicles
        Ids of the vehicles this candidate may use; None allows every vehicle.
    planned
        True for the run's planned route (what :func:`naive_schedule` uses), False for an
        alternative.
    """

    start: TimeLike
    duration: float
    risk: float
    rule_breaks: int = 0
    vehicles: frozenset[str] | None = None
    planned: bool = True


@dataclass(frozen=True)
class Job:
    """One repetition of a run and its candidate placements.

    Attributes
    ----------
    run
        Name of the run.
    candidates
        Candidate placements (start, duration, risk, ...).
    repetition
        Which repetition of the run this is, from 1.
    vehicle
        Id of the vehicle the job must use; None lets the planner choose.
    earliest, latest
        Optional window (same time type as the starts): a candidate must start at or after
        ``earliest`` and end at or before ``latest``.
    """

    run: str
    candidates: tuple[Candidate, ...]
    repetition: int = 1
    vehicle: str | None = None
    earliest: TimeLike | None = None
    latest: TimeLike | None = None


@dataclass(frozen=True)
class Assignment:
    """A placed job: which candidate, on which vehicle, from when to when."""

    job: int
    run: str
    repetition: int
    vehicle: str
    start: TimeLike
    end: TimeLike
    risk: float
    candidate: int
    rule_breaks: int = 0


@dataclass(frozen=True)
class Unplaced:
    """A job left out of the schedule, and why."""

    job: int
    run: str
    repetition: int
    reason: str


@dataclass(frozen=True)
class Schedule:
    """A day plan.

    Attributes
    ----------
    assignments
        Placed jobs, sorted by vehicle and start.
    unplaced
        Jobs left out, with the reason.
    total_risk
        Sum of the placed candidates' risk.
    status
        ``"optimal"`` (proven), ``"time_limit"`` (the solver stopped; ``gap`` bounds the
        loss), ``"heuristic"`` (too large for the exact method; ``gap`` is against the linear
        relaxation), ``"infeasible"`` (there are jobs but none can be placed), or ``"naive"``
        (from :func:`naive_schedule`).
    gap
        Relative gap ``(total_risk - lower_bound) / |total_risk|`` (0 when both are 0) at
        the number of placed jobs; None for a naive plan.
    lower_bound
        Proven lower bound on the total risk of any schedule placing as many jobs.
    method
        ``"milp-aggregated"``, ``"milp-per-vehicle"``, ``"heuristic"``, ``"naive"``, or
        ``"none"`` when no job has a usable candidate.
    notes
        Remarks: unproven job counts, overlaps and rule breaks of a naive plan, ...
    seconds
        Wall time of the solve (not part of :meth:`to_dict`, which stays reproducible).
    """

    assignments: tuple[Assignment, ...]
    unplaced: tuple[Unplaced, ...]
    total_risk: float
    status: str
    gap: float | None
    lower_bound: float | None = None
    method: str = ""
    notes: tuple[str, ...] = ()
    seconds: float = field(default=0.0, compare=False)

    @property
    def placed(self) -> int:
        """Return the number of placed jobs."""
        return len(self.assignments)

    def to_dict(self) -> dict[str, Any]:
        """Return a JSON-ready dict (times as ISO strings or minutes after midnight)."""

        def t(value: TimeLike) -> str | float:
            return value.isoformat() if isinstance(value, datetime) else float(value)

        return {
            "assignments": [
                {
                    "job": a.job,
                    "run": a.run,
                    "repetition": a.repetition,
                    "vehicle": a.vehicle,
                    "start": t(a.start),
                    "end": t(a.end),
                    "risk": a.risk,
                    "candidate": a.candidate,
                    "rule_breaks": a.rule_breaks,
                }
                for a in self.assignments
            ],
            "unplaced": [
                {"job": u.job, "run": u.run, "repetition": u.repetition, "reason": u.reason}
                for u in self.unplaced
            ],
            "total_risk": self.total_risk,
            "status": self.status,
            "gap": self.gap,
            "lower_bound": self.lower_bound,
            "method": self.method,
            "notes": list(self.notes),
        }


def jobs_for_runs(
    runs: Sequence[RunSpec], candidates: Mapping[str, Sequence[Candidate]]
) -> list[Job]:
    """Expand runs into jobs (one per repetition) with their candidates and windows.

    Parameters
    ----------
    runs
        Runs from :func:`read_runs`.
    candidates
        Candidate placements by run name (a run without an entry gets none). When the starts
        are datetimes, the run's window is put on the day (and zone) of its first candidate.

    Returns
    -------
    list of Job
        In run order, repetitions 1..repeat.
    """
    jobs = []
    for run in runs:
        cands = tuple(candidates.get(run.name, ()))
        earliest: TimeLike = run.earliest
        latest: TimeLike = run.latest
        if cands and isinstance(cands[0].start, datetime):
            day = cands[0].start.replace(hour=0, minute=0, second=0, microsecond=0)
            earliest = day + timedelta(minutes=run.earliest)
            latest = day + timedelta(minutes=run.latest)
        for k in range(1, run.repeat + 1):
            jobs.append(Job(run.name, cands, k, run.vehicle, earliest, latest))
    return jobs


_TICKS = 1000  # integer time units per minute; times are compared exactly on this scale
_MINUTE = timedelta(minutes=1)


def _minutes_between(a: TimeLike, b: TimeLike) -> float:
    """Return ``b - a`` in minutes (absolute time for aware datetimes)."""
    if isinstance(a, datetime) and isinstance(b, datetime):
        if (a.tzinfo is None) != (b.tzinfo is None):
            raise ValueError("candidate times mix naive and time-zone aware datetimes")
        if a.tzinfo is not None:
            return (b.timestamp() - a.timestamp()) / 60.0
        return (b - a) / _MINUTE
    if isinstance(a, datetime) or isinstance(b, datetime):
        raise ValueError("candidate times mix datetimes and numbers of minutes")
    return float(b) - float(a)


def _plus_minutes(t: TimeLike, minutes: float) -> TimeLike:
    if isinstance(t, datetime):
        if t.tzinfo is None:
            return t + timedelta(minutes=minutes)
        return (t.astimezone(UTC) + timedelta(minutes=minutes)).astimezone(t.tzinfo)
    return float(t) + minutes


class _Axis:
    """Map candidate times to integer ticks from a common origin."""

    def __init__(self, times: Iterable[TimeLike]) -> None:
        times = list(times)
        self.origin: TimeLike = 0.0
        if times and isinstance(times[0], datetime):
            self.origin = times[0]
        for t in times:  # checks that the kinds do not mix
            _minutes_between(self.origin, t)

    def floor(self, t: TimeLike, plus: float = 0.0) -> int:
        return math.floor((_minutes_between(self.origin, t) + plus) * _TICKS + 1e-6)

    def ceil(self, t: TimeLike, plus: float = 0.0) -> int:
        return math.ceil((_minutes_between(self.origin, t) + plus) * _TICKS - 1e-6)


@dataclass(frozen=True)
class _Opt:
    """A usable (job, candidate): occupancy in ticks and the allowed vehicle indices."""

    job: int
    cand: int
    s: int
    e: int
    risk: float
    vehicles: tuple[int, ...]


def _fleet(vehicles: int | Sequence[str]) -> list[str]:
    if isinstance(vehicles, bool):
        raise OptionError("vehicles must be a count or a list of vehicle ids", field="vehicles")
    if isinstance(vehicles, int):
        if vehicles < 1:
            raise OptionError(f"need at least one vehicle, got {vehicles}", field="vehicles")
        return [f"v{i}" for i in range(1, vehicles + 1)]
    fleet = [str(v) for v in vehicles]
    if not fleet:
        raise OptionError("need at least one vehicle", field="vehicles")
    if len(set(fleet)) != len(fleet):
        raise OptionError("vehicle ids must be unique", field="vehicles")
    return fleet


def _as_jobs(options: Sequence[Job | Sequence[Candidate]]) -> list[Job]:
    jobs = []
    for i, item in enumerate(options):
        if isinstance(item, Job):
            jobs.append(item)
        else:
            jobs.append(Job(run=f"job{i}", candidates=tuple(item)))
    return jobs


def _check_candidate(j: int, c: int, cand: Candidate) -> None:
    if not (math.isfinite(cand.duration) and cand.duration > 0):
        raise ValueError(f"job {j} candidate {c}: duration must be positive, got {cand.duration}")
    if not math.isfinite(cand.risk):
        raise ValueError(f"job {j} candidate {c}: risk must be finite, got {cand.risk}")
    if cand.rule_breaks < 0:
        raise ValueError(f"job {j} candidate {c}: rule_breaks must be >= 0")


def _allowed(job: Job, cand: Candidate, index: Mapping[str, int]) -> tuple[int, ...]:
    """Return the sorted fleet indices a candidate of ``job`` may use."""
    allowed = set(index.values())
    if job.vehicle is not None:
        allowed &= {index[job.vehicle]} if job.vehicle in index else set()
    if cand.vehicles is not None:
        allowed &= {index[v] for v in cand.vehicles if v in index}
    return tuple(sorted(allowed))


def _prepare(
    jobs: Sequence[Job], fleet: Sequence[str], turnaround_min: float
) -> tuple[list[list[_Opt]], dict[int, str]]:
    """Filter every job's candidates to the usable ones; give a reason for jobs with none."""
    axis = _Axis(
        [c.start for job in jobs for c in job.candidates]
        + [t for job in jobs for t in (job.earliest, job.latest) if t is not None]
    )
    index = {v: i for i, v in enumerate(fleet)}
    usable: list[list[_Opt]] = []
    reasons: dict[int, str] = {}
    for j, job in enumerate(jobs):
        opts: list[_Opt] = []
        reason = "window too short: no candidate start was given"
        for c, cand in enumerate(job.candidates):
            _check_candidate(j, c, cand)
        in_window = [
            (c, cand)
            for c, cand in enumerate(job.candidates)
            if (job.earliest is None or axis.floor(cand.start) >= axis.floor(job.earliest))
            and (
                job.latest is None or axis.ceil(cand.start, cand.duration) <= axis.ceil(job.latest)
            )
        ]
        if job.candidates and not in_window:
            reason = "window too short: no candidate start and end fit between earliest and latest"
        legal = [(c, cand) for c, cand in in_window if cand.rule_breaks == 0]
        if in_window and not legal:
            reason = "every start breaks a hard rule"
        for c, cand in legal:
            allowed = _allowed(job, cand, index)
            if allowed:
                s = axis.floor(cand.start)
                e = axis.ceil(cand.start, cand.duration + turnaround_min)
                opts.append(_Opt(j, c, s, e, float(cand.risk), allowed))
        if legal and not opts:
            if job.vehicle is not None and job.vehicle not in index:
                reason = f"required vehicle {job.vehicle!r} is not in the fleet"
            else:
                reason = "no vehicle of the fleet is allowed for any legal start"
        usable.append(sorted(opts, key=lambda o: (o.risk, o.s, o.cand)))
        if not opts:
            reasons[j] = reason
    return usable, reasons


def _check_turnaround(turnaround_min: float) -> None:
    if not (math.isfinite(turnaround_min) and turnaround_min >= 0):
        raise OptionError(
            f"turnaround must be 0 or more minutes, got {turnaround_min}", field="turnaround_min"
        )


def _schedule(
    jobs: Sequence[Job],
    fleet: Sequence[str],
    sol: Mapping[int, tuple[int, int]],
    reasons: Mapping[int, str],
    total: float,
    status: str,
    gap: float | None,
    bound: float | None,
    method: str,
    notes: Sequence[str],
    seconds: float,
    *,
    blocked: str,
) -> Schedule:
    """Assemble a Schedule; ``sol`` maps job -> (candidate index, vehicle index)."""
    assignments = []
    for j, (c, v) in sol.items():
        job = jobs[j]
        cand = job.candidates[c]
        assignments.append(
            Assignment(
                job=j,
                run=job.run,
                repetition=job.repetition,
                vehicle=fleet[v],
                start=cand.start,
                end=_plus_minutes(cand.start, cand.duration),
                risk=float(cand.risk),
                candidate=c,
                rule_breaks=cand.rule_breaks,
            )
        )
    origin = _Axis([a.start for a in assignments]).origin
    assignments.sort(
        key=lambda a: (fleet.index(a.vehicle), _minutes_between(origin, a.start), a.job)
    )
    unplaced = tuple(
        Unplaced(j, job.run, job.repetition, reasons.get(j, blocked))
        for j, job in enumerate(jobs)
        if j not in sol
    )
    return Schedule(
        assignments=tuple(assignments),
        unplaced=unplaced,
        total_risk=total,
        status=status,
        gap=gap,
        lower_bound=bound,
        method=method,
        notes=tuple(notes),
        seconds=seconds,
    )


def overlaps(
    assignments: Sequence[Assignment], *, turnaround_min: float
) -> list[tuple[Assignment, Assignment, float]]:
    """Return pairs of runs on one vehicle that overlap, with the overlap in minutes.

    Two runs on one vehicle overlap when the later one starts before the earlier one's end
    plus the turnaround.
    """
    found = []
    by_vehicle: dict[str, list[Assignment]] = {}
    for a in assignments:
        by_vehicle.setdefault(a.vehicle, []).append(a)
    for runs in by_vehicle.values():
        origin = _Axis([a.start for a in runs]).origin
        runs = sorted(runs, key=lambda a: _minutes_between(origin, a.start))
        for i, a in enumerate(runs):
            for b in runs[i + 1 :]:
                short = turnaround_min - _minutes_between(a.end, b.start)
                if short <= 1e-9:
                    break  # b and every later run start after a is done
                found.append((a, b, short))
    return found
