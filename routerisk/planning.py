"""Plan a test day: which run starts when, on which vehicle, at least total exposure risk.

The module has two halves.

* :func:`read_runs` reads a RUNS file (YAML or CSV) into :class:`RunSpec` rows: the run's
  name, its route (a route file or start / end / via points), its time window, an optional
  required vehicle and a repeat count.
* :func:`solve_schedule` is the pure optimisation. It takes, for every run repetition (a
  *job*, :class:`Job`), a list of candidate placements (:class:`Candidate`: start, duration,
  risk, hard-rule breaks, allowed vehicles) and chooses at most one candidate per job and a
  vehicle for it, so that two jobs on one vehicle never overlap, counting the turnaround gap
  after each run. It places as many jobs as possible first and, among those schedules, the
  one of least total risk. :func:`naive_schedule` gives the plan one would make without it
  (every run at its earliest start), for comparison.

Objective
---------
Lexicographic, solved in two stages rather than with one big-M weighted objective: a big-M
weight makes the risk a tiny fraction of the objective, so the solver's relative gap
tolerance would swallow it. Stage 1 maximises the number of placed jobs; stage 2 minimises the
total risk subject to placing at least that many.

Exact method
------------
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
greedy colouring in order of start time does it; the vehicles are assigned that way. When any
restriction exists, each vehicle has its own unit flow and its own variables.

Before the integer programme, the linear relaxation gives an upper bound on the number of
jobs that fit and a lower bound on the risk; a heuristic (below) gives an incumbent; and
*reduced-cost fixing* removes every variable that the relaxation proves cannot be 1 in any
schedule better than the incumbent. Stage 1 is skipped when the heuristic already places as
many jobs as the relaxation allows; stage 2 when the heuristic meets the risk bound.

Heuristic
---------
Three deterministic starts, each followed by local improvement: insertion guided by the
linear relaxation's solution; regret insertion (repeatedly place the job that would lose most
by waiting, i.e. the largest risk difference between its best and second-best fitting start;
a job with one fitting start goes first); and earliest-end insertion (good for the job
count). Local improvement repeats until nothing improves: insert unplaced jobs (directly or by
moving the one job in the way), let an unplaced job replace a placed job of higher risk, move
one job to a better start, move a job to a better start held by one other job which moves
elsewhere. The best result serves as the incumbent of the exact method, and is the answer
when the model has more than ``max_exact_vars`` variables; then the gap is reported against
the linear relaxation (least risk over fractional schedules placing at least as many jobs),
a proven bound on how far from optimal it can be.

Times
-----
Candidate starts are either numbers (minutes after local midnight) or :class:`datetime`
objects (all naive or all aware); durations and the turnaround are in minutes. A schedule
reports starts and ends in the type it was given.
"""

from __future__ import annotations

import bisect
import csv
import io
import logging
import math
import re
import time
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime, timedelta, timezone
from pathlib import Path
from typing import Any

import numpy as np
import yaml
from scipy import sparse
from scipy.optimize import Bounds, LinearConstraint, linprog, milp

from .errors import InputFileError, OptionError

logger = logging.getLogger(__name__)

__all__ = [
    "Assignment",
    "Candidate",
    "Job",
    "RunSpec",
    "Schedule",
    "Unplaced",
    "format_clock",
    "jobs_for_runs",
    "naive_schedule",
    "overlaps",
    "parse_clock",
    "read_runs",
    "solve_schedule",
]

TimeLike = float | int | datetime

#: Route file suffixes a RUNS file may refer to (those :func:`routerisk.routes.read_routes`
#: recognises).
ROUTE_SUFFIXES = (".geojson", ".json", ".gpx", ".xml", ".csv", ".txt")
#: Columns of a CSV RUNS file (``route_name`` is accepted as an optional extra column).
CSV_COLUMNS = (
    "name",
    "route",
    "start_lat",
    "start_lon",
    "end_lat",
    "end_lon",
    "earliest",
    "latest",
    "vehicle",
    "repeat",
)
_CSV_EXTRA = ("route_name",)
_YAML_KEYS = (
    "name",
    "route",
    "route_name",
    "start",
    "end",
    "via",
    "earliest",
    "latest",
    "vehicle",
    "repeat",
)
_CLOCK_RE = re.compile(r"^\s*(\d{1,2}):(\d{2})\s*$")

# --------------------------------------------------------------------------------------------
# RUNS file
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class RunSpec:
    """One run of a test day, as read from a RUNS file.

    Attributes
    ----------
    name
        Unique name of the run.
    earliest, latest
        Window in minutes after local midnight: the run starts at or after ``earliest`` and
        ends at or before ``latest`` (``latest`` may be 1440, written "24:00").
    route
        Route file (GeoJSON, GPX or CSV), resolved against the RUNS file's folder; or None
        when the route is given by points.
    route_name
        Which feature or track of ``route`` to use; None takes the file's only route.
    start, end
        ``(lat, lon)`` of the route's ends when no route file is given.
    via
        ``(lat, lon)`` points the route passes through, in order.
    vehicle
        Id or name of the vehicle the run must use; None lets the planner choose.
    repeat
        How many times the run is driven that day; each repetition is placed on its own.
    source, where
        The RUNS file and the place in it (``"runs[2]"`` or ``"line 4"``), for messages.
    """

    name: str
    earliest: int
    latest: int
    route: Path | None = None
    route_name: str | None = None
    start: tuple[float, float] | None = None
    end: tuple[float, float] | None = None
    via: tuple[tuple[float, float], ...] = ()
    vehicle: str | None = None
    repeat: int = 1
    source: Path | None = None
    where: str = ""


def parse_clock(text: str) -> int:
    """Return minutes after midnight of an ``"HH:MM"`` clock time ("24:00" is 1440).

    Raises
    ------
    ValueError
        If ``text`` is not a valid clock time.
    """
    m = _CLOCK_RE.match(text)
    if m is None:
        raise ValueError(f"{text!r} is not a clock time HH:MM")
    hours, minutes = int(m.group(1)), int(m.group(2))
    if (hours, minutes) == (24, 0):
        return 1440
    if hours > 23 or minutes > 59:
        raise ValueError(f"{text!r} is not a clock time between 00:00 and 24:00")
    return hours * 60 + minutes


def format_clock(minutes: float) -> str:
    """Return ``"HH:MM"`` for minutes after midnight (rounded to the minute)."""
    total = int(round(minutes))
    return f"{total // 60:02d}:{total % 60:02d}"


@dataclass(frozen=True)
class _Where:
    """Place of one run in its RUNS file, to build errors that name the file and field."""

    path: Path
    label: str
    csv: bool

    def error(self, key: str, message: str) -> InputFileError:
        if self.csv:
            return InputFileError(f"{self.label}: {message}", path=self.path, field=key)
        return InputFileError(message, path=self.path, field=f"{self.label}.{key}")


def read_runs(path: str | Path) -> list[RunSpec]:
    """Read a RUNS file (``.yaml`` / ``.yml`` or ``.csv``) into validated run specifications.

    YAML holds a list of runs, either at the top level or under a ``runs:`` key; each run is
    a mapping with the keys ``name``, ``route`` (file relative to the RUNS file) and optional
    ``route_name``, or ``start: [lat, lon]``, ``end: [lat, lon]`` and optional ``via: [[lat,
    lon], ...]``; ``earliest`` and ``latest`` as quoted ``"HH:MM"``; optional ``vehicle`` and
    ``repeat`` (default 1). A CSV file has the columns of :data:`CSV_COLUMNS` (only ``name``,
    ``earliest`` and ``latest`` are required; ``route_name`` may be added; ``via`` has no CSV
    form). YAML is read with :func:`yaml.safe_load`.

    Parameters
    ----------
    path
        The RUNS file.

    Returns
    -------
    list of RunSpec
        In file order.

    Raises
    ------
    InputFileError
        With ``path`` the RUNS file and ``field`` the key (``"runs[2].earliest"``, 0-based
        index) or the CSV column, for an unreadable file, an unknown key or column, a
        duplicate name, a missing or unreadable route, a bad time, ``earliest`` not before
        ``latest``, or ``repeat`` below 1.
    """
    p = Path(path)
    suffix = p.suffix.lower()
    if suffix in (".yaml", ".yml"):
        rows = _yaml_rows(p)
    elif suffix == ".csv":
        rows = _csv_rows(p)
    else:
        raise InputFileError("a RUNS file must end in .yaml, .yml or .csv", path=p)
    runs: list[RunSpec] = []
    seen: dict[str, str] = {}
    for where, row in rows:
        run = _run_from_row(where, row)
        if run.name in seen:
            raise where.error("name", f"duplicate run name {run.name!r} (also at {seen[run.name]})")
        seen[run.name] = where.label
        runs.append(run)
    if not runs:
        raise InputFileError("the RUNS file holds no runs", path=p)
    logger.info(
        "read_runs read %d runs (%d jobs) from %s", len(runs), sum(r.repeat for r in runs), p
    )
    return runs


def _read_text(path: Path) -> str:
    try:
        return path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputFileError("file not found", path=path) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputFileError(f"cannot read the file ({exc})", path=path) from None


def _yaml_rows(path: Path) -> list[tuple[_Where, dict[str, Any]]]:
    try:
        data = yaml.safe_load(_read_text(path))
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        at = f" at line {mark.line + 1}" if mark is not None else ""
        raise InputFileError(f"not valid YAML{at}", path=path) from None
    prefix = "runs"
    if isinstance(data, dict):
        unknown = sorted(str(k) for k in data if k != "runs")
        if unknown:
            raise InputFileError(
                "unknown top-level key (expected only 'runs')", path=path, field=unknown[0]
            )
        data = data.get("runs")
    if not isinstance(data, list):
        raise InputFileError(
            "expected a list of runs (or a 'runs:' key holding one)", path=path, field=prefix
        )
    rows = []
    for i, item in enumerate(data):
        where = _Where(path, f"{prefix}[{i}]", csv=False)
        if not isinstance(item, dict):
            raise InputFileError("each run must be a mapping of keys", path=path, field=where.label)
        for key in item:
            if key not in _YAML_KEYS:
                raise where.error(str(key), f"unknown key (known: {', '.join(_YAML_KEYS)})")
        rows.append((where, dict(item)))
    return rows


def _csv_rows(path: Path) -> list[tuple[_Where, dict[str, Any]]]:
    reader = csv.reader(io.StringIO(_read_text(path), newline=""))
    try:
        header = [h.strip() for h in next(reader)]
    except StopIteration:
        raise InputFileError("the CSV file is empty", path=path) from None
    known = CSV_COLUMNS + _CSV_EXTRA
    for col in header:
        if col not in known:
            raise InputFileError(
                f"unknown column (known: {', '.join(known)})", path=path, field=col
            )
        if header.count(col) > 1:
            raise InputFileError("column given twice", path=path, field=col)
    for col in ("name", "earliest", "latest"):
        if col not in header:
            raise InputFileError("required column missing", path=path, field=col)
    rows = []
    for values in reader:
        line_no = reader.line_num
        if not any(v.strip() for v in values):
            continue
        where = _Where(path, f"line {line_no}", csv=True)
        if len(values) != len(header):
            raise InputFileError(
                f"line {line_no}: {len(values)} values for {len(header)} columns", path=path
            )
        cells = {h: v.strip() for h, v in zip(header, values, strict=True) if v.strip()}
        plain = ("name", "route", "route_name", "earliest", "latest", "vehicle", "repeat")
        row: dict[str, Any] = {k: cells[k] for k in plain if k in cells}
        for end in ("start", "end"):
            lat, lon = cells.get(f"{end}_lat"), cells.get(f"{end}_lon")
            if lat is None and lon is None:
                continue
            if lat is None or lon is None:
                col = f"{end}_lat" if lat is None else f"{end}_lon"
                raise where.error(col, f"{end}_lat and {end}_lon go together")
            row[end] = [_csv_float(where, f"{end}_lat", lat), _csv_float(where, f"{end}_lon", lon)]
        if "repeat" in row:
            try:
                row["repeat"] = int(row["repeat"])
            except ValueError:
                message = f"repeat {row['repeat']!r} is not a whole number"
                raise where.error("repeat", message) from None
        rows.append((where, row))
    return rows


def _csv_float(where: _Where, column: str, text: str) -> float:
    try:
        return float(text)
    except ValueError:
        raise where.error(column, f"{text!r} is not a number") from None


def _point_field(where: _Where, key: str) -> tuple[str, str]:
    """Return the field names of a point's latitude and longitude (CSV columns or YAML key)."""
    if where.csv:
        return f"{key}_lat", f"{key}_lon"
    return key, key


def _point(where: _Where, key: str, value: Any) -> tuple[float, float]:
    lat_field, lon_field = _point_field(where, key)
    if (
        not isinstance(value, list | tuple)
        or len(value) != 2
        or not all(isinstance(v, int | float) and not isinstance(v, bool) for v in value)
    ):
        raise where.error(key, "expected [lat, lon], two numbers")
    lat, lon = float(value[0]), float(value[1])
    if not (math.isfinite(lat) and -90.0 <= lat <= 90.0):
        raise where.error(lat_field, f"latitude {lat} is outside -90..90")
    if not (math.isfinite(lon) and -180.0 <= lon <= 180.0):
        raise where.error(lon_field, f"longitude {lon} is outside -180..180")
    return lat, lon


def _clock(where: _Where, key: str, value: Any) -> int:
    if value is None:
        raise where.error(key, f"missing {key} time (\"HH:MM\")")
    if isinstance(value, int) and not isinstance(value, bool):
        raise where.error(
            key,
            f"{key} must be a quoted \"HH:MM\" string; YAML reads an unquoted 10:30 as the "
            f"number {value}, so write it in quotes",
        )
    if not isinstance(value, str):
        raise where.error(key, f"{key} must be a \"HH:MM\" string")
    try:
        return parse_clock(value)
    except ValueError as exc:
        raise where.error(key, str(exc)) from None


def _text(where: _Where, key: str, value: Any) -> str | None:
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, str | int):
        raise where.error(key, f"{key} must be text")
    text = str(value).strip()
    return text or None


def _run_from_row(where: _Where, row: dict[str, Any]) -> RunSpec:
    name = _text(where, "name", row.get("name"))
    if name is None:
        raise where.error("name", "missing run name")

    route_ref = _text(where, "route", row.get("route"))
    route_name = _text(where, "route_name", row.get("route_name"))
    has_points = any(row.get(k) is not None for k in ("start", "end", "via"))
    route: Path | None = None
    start = end = None
    via: tuple[tuple[float, float], ...] = ()
    if route_ref is not None:
        if has_points:
            raise where.error("route", "give either route or start/end/via, not both")
        route = where.path.parent / route_ref
        if route.suffix.lower() not in ROUTE_SUFFIXES:
            raise where.error("route", f"route file must end in {', '.join(ROUTE_SUFFIXES)}")
        if not route.is_file():
            raise where.error("route", f"route file {route_ref!r} not found beside the RUNS file")
    else:
        if route_name is not None:
            raise where.error("route_name", "route_name needs a route file")
        if not has_points:
            raise where.error("route", "missing route: give route: FILE, or start: and end:")
        for key in ("start", "end"):
            if row.get(key) is None:
                raise where.error(_point_field(where, key)[0], f"missing {key} point")
        start = _point(where, "start", row["start"])
        end = _point(where, "end", row["end"])
        raw_via = row.get("via")
        if raw_via is not None:
            if not isinstance(raw_via, list):
                raise where.error("via", "expected a list of [lat, lon] points")
            via = tuple(_point(where, f"via[{i}]", v) for i, v in enumerate(raw_via))

    earliest = _clock(where, "earliest", row.get("earliest"))
    latest = _clock(where, "latest", row.get("latest"))
    if earliest >= latest:
        raise where.error(
            "latest",
            f"latest {format_clock(latest)} is not after earliest {format_clock(earliest)}",
        )
    repeat = row.get("repeat", 1)
    if repeat is None:
        repeat = 1
    if isinstance(repeat, bool) or not isinstance(repeat, int):
        raise where.error("repeat", "repeat must be a whole number")
    if repeat < 1:
        raise where.error("repeat", f"repeat is {repeat}; it must be 1 or more")
    return RunSpec(
        name=name,
        earliest=earliest,
        latest=latest,
        route=route,
        route_name=route_name,
        start=start,
        end=end,
        via=via,
        vehicle=_text(where, "vehicle", row.get("vehicle")),
        repeat=repeat,
        source=where.path,
        where=where.label,
    )


# --------------------------------------------------------------------------------------------
# Scheduling input and output
# --------------------------------------------------------------------------------------------


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


# --------------------------------------------------------------------------------------------
# Time axis
# --------------------------------------------------------------------------------------------

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
        return (t.astimezone(timezone.utc) + timedelta(minutes=minutes)).astimezone(t.tzinfo)
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
                job.latest is None
                or axis.ceil(cand.start, cand.duration) <= axis.ceil(job.latest)
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


# --------------------------------------------------------------------------------------------
# Heuristic
# --------------------------------------------------------------------------------------------

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
                        p for p in opts
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


# --------------------------------------------------------------------------------------------
# Integer programme
# --------------------------------------------------------------------------------------------


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
    return _Model(var_opt, veh, risk, flow, np.concatenate(rhs), jobs,
                  np.concatenate(y_upper), aggregated)


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
    bounds = np.column_stack([np.zeros(model.n_x + model.y_upper.size),
                              np.concatenate([np.ones(model.n_x), model.y_upper])])
    res = linprog(model.cost(c_x), A_ub=a_ub, b_ub=b_ub, A_eq=model.flow, b_eq=model.flow_rhs,
                  bounds=bounds, method="highs-ipm")
    if res.status != 0:  # cannot happen: the empty schedule (or a found one) is feasible
        raise RuntimeError(f"linear relaxation failed: {res.message}")
    n = model.n_x
    return _LP(float(res.fun), np.asarray(res.x[:n]), np.asarray(res.lower.marginals[:n]),
               -np.asarray(res.upper.marginals[:n]))


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


def _risk(sol: Mapping[int, _Placement]) -> float:
    return float(sum(p[0].risk for p in sol.values()))


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
        res = _mip(model, -np.ones(n), min_count=k + 1, keep=keep, fix_one=fix_one,
                   time_limit=deadline - time.perf_counter(), mip_rel_gap=0.0)
        if res.x is not None:
            best = _search_from_x(model, res.x, usable, n_vehicles)
            best.improve()
        if res.status == "time_limit":
            status = "time_limit"
            up_to = most if res.bound is None else min(most, math.floor(-res.bound + 1e-6))
            notes.append(f"time limit: {len(best.sol)} jobs placed, up to {up_to} may fit")
    elif len(best.sol) < most:
        notes.append(f"the linear relaxation allows up to {most} placed jobs; the heuristic "
                     f"placed {len(best.sol)} (more may fit)")

    target = len(best.sol)
    lp = risk_lp if target == most else _lp(model, model.risk, min_count=target)
    bound = lp.value
    upper = best.risk
    if not exact or upper - bound <= max(1e-9, mip_rel_gap * abs(upper)):
        return best.sol, status, bound
    remaining = deadline - time.perf_counter()
    if remaining <= 0:
        notes.append("time limit reached before the integer programme ran; "
                     "the gap is against the linear relaxation")
        return best.sol, "time_limit", bound
    keep, fix_one = _reduced_cost_fixing(lp, upper - bound)
    res = _mip(model, model.risk, min_count=target, keep=keep, fix_one=fix_one,
               time_limit=remaining, mip_rel_gap=mip_rel_gap)
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


# --------------------------------------------------------------------------------------------
# Public solvers
# --------------------------------------------------------------------------------------------


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
            notes.append(f"{n_vars} variables exceed max_exact_vars={max_exact_vars}: "
                         "heuristic used, gap against the linear relaxation")
        sol, status, bound = _optimise(model, usable, len(fleet), exact=exact,
                                       time_limit=time_limit, mip_rel_gap=mip_rel_gap, notes=notes)
    total = _risk(sol)
    schedule = _schedule(
        jobs, fleet, {j: (o.cand, v) for j, (o, v) in sol.items()}, reasons, total, status,
        _rel_gap(total, bound), bound, method, notes, time.perf_counter() - clock,
        blocked="fleet busy: every usable start conflicts with the runs placed",
    )
    logger.info(
        "solve_schedule placed %d of %d jobs, total risk %.6g, status %s (%s, %d variables) "
        "in %.2f s", schedule.placed, len(jobs), total, status, method, n_vars, schedule.seconds,
    )
    return schedule


def _check_turnaround(turnaround_min: float) -> None:
    if not (math.isfinite(turnaround_min) and turnaround_min >= 0):
        raise OptionError(f"turnaround must be 0 or more minutes, got {turnaround_min}",
                          field="turnaround_min")


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
        jobs, fleet, sol, reasons, total, "naive", None, None, "naive", notes,
        time.perf_counter() - clock, blocked="",
    )
