"""Plan a day of test runs, and plan the miles of evidence a safety claim needs."""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from typing import TYPE_CHECKING, Literal

from routerisk._params import parameters
from routerisk.errors import OptionError
from routerisk.results import EvidenceResult, PlanResult, Routes, Runs

if TYPE_CHECKING:
    import pandas as pd

    from routerisk.network.folder import Network


def plan_day(
    network: Network,
    runs: Runs,
    date: dt.date | str,
    *,
    vehicles: int = 2,
    step_min: int = 15,
    turnaround_min: float = 15.0,
) -> PlanResult:
    """Schedule a day's test runs over vehicles and start times at the least exposure.

    The same schedule as ``routerisk plan``: every run scored at every start, an integer
    program over vehicles, and the naive plan for comparison.

    Parameters
    ----------
    network
        The tagged network.
    runs
        Runs from :func:`read_runs`.
    date
        The day to plan (a date or ``"YYYY-MM-DD"``).
    vehicles
        Number of vehicles, named av-1, av-2, ...
    step_min
        Minutes between candidate start times (1 to 240).
    turnaround_min
        Minutes a vehicle needs between runs (>= 0).

    Returns
    -------
    PlanResult
        ``to_frame()`` is the schedule; ``to_map()`` draws the runs.

    Examples
    --------
    >>> import routerisk as rr
    >>> net = rr.build_network(rr.datasets.get_path("town"), timezone="Etc/GMT+3")
    >>> plan = rr.plan_day(net, rr.read_runs(rr.datasets.get_path("runs")), "2027-03-09")
    >>> plan.to_dict()["status"]
    'optimal'
    """
    from routerisk.analysis.dayplan import plan_day as _plan

    if isinstance(date, str):
        try:
            date = dt.date.fromisoformat(date)
        except ValueError as exc:
            raise OptionError(f"not a date YYYY-MM-DD: {date!r}", field="date") from exc
    if isinstance(date, dt.datetime) or not isinstance(date, dt.date):
        raise OptionError(f"must be a date, got {type(date).__name__}", field="date")
    for name, value in (("vehicles", vehicles), ("step_min", step_min)):
        if not isinstance(value, int):
            raise OptionError(f"must be a whole number, got {value!r}", field=name)
    with parameters({"--step": "step_min", "--turnaround": "turnaround_min"}):
        found = _plan(
            network,
            list(runs),
            date,
            vehicles=vehicles,
            step_min=step_min,
            turnaround_min=turnaround_min,
        )
    return PlanResult(found, network)


def plan_evidence(
    *,
    benchmark: float,
    per: float,
    improvement: float = 0.2,
    confidence: float = 0.95,
    power: float = 0.8,
    units: Literal["mi", "km"] = "mi",
    fleet: float = 100.0,
    hours_per_day: float = 24.0,
    speed: float = 25.0,
    observed: float | None = None,
    events: int | None = None,
    allowed_events: Sequence[int] = (0, 1, 2, 3),
    network: Network | None = None,
    drives: Routes | None = None,
    segments: pd.DataFrame | None = None,
) -> EvidenceResult:
    """Plan how many test miles a statistical safety claim needs.

    The same figures as ``routerisk evidence`` (Kalra and Paddock 2016; exact Poisson limits
    after Garwood 1936), optionally split by exposure band and category.

    Parameters
    ----------
    benchmark
        Benchmark rate: ``benchmark`` events per ``per`` distance units (> 0).
    per
        Distance the benchmark is stated per, e.g. 1e9 (> 0).
    improvement
        Share by which the fleet should beat the benchmark, in [0, 1).
    confidence, power
        Confidence level and power, each in (0, 1).
    units
        ``"mi"`` or ``"km"``; every distance and the speed are in it.
    fleet
        Vehicles in the fleet (> 0).
    hours_per_day
        Hours a day each vehicle drives, in (0, 24].
    speed
        Average speed in ``units`` per hour (> 0).
    observed, events
        Distance driven so far and events seen in it (together, or neither).
    allowed_events
        Event counts of the "k events allowed" table.
    network, drives
        Recorded drives (from :func:`read_drives`) and the network to match them to, to
        split the evidence by exposure.
    segments
        Instead of drives: scored segments, e.g. ``score_routes(...).to_geodataframe()``.

    Returns
    -------
    EvidenceResult
        ``to_dict()`` holds every figure; ``to_frame()`` the "k events allowed" table.

    Examples
    --------
    >>> import routerisk as rr
    >>> plan = rr.plan_evidence(benchmark=11.0, per=1e9)
    >>> round(plan.to_dict()["miles_no_failure"] / 1e6)
    340
    """
    from routerisk.analysis import evidence

    if drives is not None and segments is not None:
        raise OptionError("give drives or segments, not both", field="drives")
    if drives is not None and network is None:
        raise OptionError("drives need the network to match them to", field="network")
    with parameters({"--per": "per"}):
        inputs = evidence.EvidenceInputs(
            benchmark=benchmark,
            per=per,
            improvement=improvement,
            confidence=confidence,
            power=power,
            units=units,
            fleet=fleet,
            hours_per_day=hours_per_day,
            speed=speed,
            observed=observed,
            events=events,
            allowed_events=tuple(allowed_events),
        )
        plan = evidence.plan_evidence(inputs)
        if drives is not None and network is not None:
            frame = evidence.segments_of_drives(network, list(drives))
            plan = plan.with_exposure(
                evidence.distance_by_exposure(
                    frame, needed=plan.miles_no_failure, units=inputs.units
                )
            )
        if segments is not None:
            plan = plan.with_exposure(
                evidence.distance_by_exposure(
                    segments, needed=plan.miles_no_failure, units=inputs.units
                )
            )
    return EvidenceResult(plan)
