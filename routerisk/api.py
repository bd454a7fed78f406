"""The top-level functions: build or load a network, read inputs, score, suggest, review, plan.

Each function is a thin, typed wrapper over the library functions the commands call, so it
gives the same numbers as the command. Inputs are objects and frames; reading a file is a
separate step (:func:`read_routes`, :func:`read_events`, :func:`read_drives`,
:func:`read_areas`, :func:`read_runs`). Results convert with ``to_frame()``,
``to_geodataframe()``, ``to_dict()`` and ``to_map()`` (see :mod:`routerisk.results`).

A bad value raises a :class:`routerisk.errors.RouteriskError` whose ``field`` names the
parameter (``"departs"``, ``"fdr"``), never a command-line option.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Literal

from routerisk._params import parameters
from routerisk.errors import OptionError
from routerisk.inputs import read_areas, read_drives, read_events, read_routes, read_runs
from routerisk.results import (
    Areas,
    Events,
    EvidenceResult,
    PlanResult,
    ReviewResult,
    Routes,
    Runs,
    ScoreResult,
    SuggestResult,
    WatchResult,
)

if TYPE_CHECKING:
    import pandas as pd

    from routerisk.io.routes import PlannedRoute
    from routerisk.network.folder import Network
    from routerisk.profile import Profile

__all__ = [
    "build_network",
    "load_network",
    "read_routes",
    "read_drives",
    "read_events",
    "read_areas",
    "read_runs",
    "score_routes",
    "suggest_routes",
    "review_areas",
    "plan_day",
    "plan_evidence",
    "watch_events",
]

#: A departure: an aware datetime, or a naive one / ISO 8601 text read in the network's zone.
Departure = dt.datetime | str


def _profile(profile: Profile | str | Path | None) -> Profile | None:
    from routerisk.profile import Profile, load_profile

    if profile is None or isinstance(profile, Profile):
        return profile
    return load_profile(profile)


def _departs(net: Network, departs: Sequence[Departure] | Departure) -> list[dt.datetime]:
    from routerisk.analysis.scoring import parse_depart

    items = [departs] if isinstance(departs, str | dt.datetime) else list(departs)
    out = []
    for d in items:
        if not isinstance(d, str | dt.datetime):
            raise OptionError(
                f"must be datetimes or ISO 8601 text, got {type(d).__name__}", field="departs"
            )
        with parameters({"--depart": "departs"}):
            out.append(parse_depart(d if isinstance(d, str) else d.isoformat(), net.timezone))
    return out


def _share(value: float | None, name: str) -> None:
    """Refuse a share that is not a number between 0 and 5 (the command's bound)."""
    if value is None:
        return
    if not isinstance(value, int | float) or not 0.0 <= float(value) <= 5.0:
        raise OptionError(
            f"must be a share between 0 and 5, got {value!r} (0.25 means 25 %)", field=name
        )


# ---------------------------------------------------------------------------- network


def build_network(
    source: str | Path,
    *,
    profile: Profile | str | Path | None = None,
    timezone: str | None = None,
    largest_component: bool = True,
) -> Network:
    """Build a tagged road network from an OpenStreetMap file, offline.

    The same as ``routerisk build SOURCE`` (without writing the folder; save it with
    :func:`routerisk.network.folder.save_network`).

    Parameters
    ----------
    source
        An ``.osm``, ``.osm.bz2``, ``.osm.gz`` or ``.osm.pbf`` file.
    profile
        The exposure profile, or a YAML/TOML file of one (default: the bundled profile).
    timezone
        The area's IANA time zone (default: looked up offline from the extract's location).
    largest_component
        Keep only the largest strongly connected part.

    Returns
    -------
    Network
        Edges, nodes, sources and crossings (GeoDataFrames in the local UTM zone) and the
        profile; ``to_geodataframe()`` gives the edges, ``to_map()`` the exposure map.

    Examples
    --------
    >>> import routerisk as rr
    >>> net = rr.build_network(rr.datasets.get_path("town"), timezone="Etc/GMT+3")
    >>> net.summary()["edges"] > 0
    True
    """
    from routerisk.network import folder as network

    with parameters({"--timezone": "timezone"}):
        zone = None if timezone is None else network.check_timezone(timezone)
        return network.build_network(
            source, profile=_profile(profile), timezone=zone, largest_component=largest_component
        )


def load_network(
    folder: str | Path,
    *,
    profile: Profile | str | Path | None = None,
    overlay: str | Path | None = None,
) -> Network:
    """Load a network folder written by ``routerisk build``.

    Parameters
    ----------
    folder
        The network folder (``network.gpkg``, ``meta.json``, ``profile.yaml``).
    profile
        Re-tag the network with this profile (or profile file); default: its own.
    overlay
        An overlay file from ``routerisk watch --out`` (extra weight or closures).

    Returns
    -------
    Network
        The tagged network, as every command uses it.

    Examples
    --------
    >>> import routerisk as rr
    >>> from routerisk.network.folder import save_network
    >>> built = rr.build_network(rr.datasets.get_path("town"), timezone="Etc/GMT+3")
    >>> folder = save_network(built, "corvane-net")  # what routerisk build --out writes
    >>> rr.load_network(folder).summary() == built.summary()
    True
    """
    from routerisk.network.folder import load_network as _load

    net = _load(folder, profile=_profile(profile))
    if overlay is not None:
        from routerisk.network.overlay import apply_overlay

        with parameters():
            net = apply_overlay(net, overlay)
    return net


# ---------------------------------------------------------------------------- analyses


def score_routes(
    network: Network,
    routes: Sequence[PlannedRoute],
    *,
    departs: Sequence[Departure] | Departure = (),
) -> ScoreResult:
    """Score routes or recorded drives at their departure times.

    The same numbers as ``routerisk score``: each edge is scored at the time the vehicle
    reaches it; sparse waypoints are joined by the fastest path, dense traces map-matched.

    Parameters
    ----------
    network
        The tagged network.
    routes
        Routes from :func:`read_routes` (or :class:`routerisk.io.routes.PlannedRoute` objects).
    departs
        Departure times to compare (each route is scored at each); without any, each
        route's own ``depart``. Text or naive datetimes are read in the network's zone.

    Returns
    -------
    ScoreResult
        ``to_frame()`` ranks the routes; ``to_geodataframe()`` gives the scored segments.

    Examples
    --------
    >>> import routerisk as rr
    >>> net = rr.build_network(rr.datasets.get_path("town"), timezone="Etc/GMT+3")
    >>> routes = rr.read_routes(rr.datasets.get_path("routes"), timezone=net.timezone)
    >>> scores = rr.score_routes(net, routes, departs=["2027-03-09T08:05"])
    >>> list(scores.to_frame().columns[:3])
    ['rank', 'name', 'depart']
    """
    from routerisk.analysis.scoring import score_routes as _score

    times = _departs(network, departs)
    with parameters({"--depart": "departs"}):
        return ScoreResult(tuple(_score(network, list(routes), times)), network)


def suggest_routes(
    network: Network,
    routes: Sequence[PlannedRoute],
    *,
    departs: Sequence[Departure] | Departure = (),
    count: int = 3,
    max_extra_time: float = 0.25,
    max_extra_length: float | None = None,
    min_difference: float = 0.3,
    keep_every: int | None = None,
) -> SuggestResult:
    """Suggest lower-exposure alternatives within a time bound, keeping the via points.

    The same numbers as ``routerisk suggest``; the plan is scored as :func:`score_routes`
    scores it.

    Parameters
    ----------
    network
        The tagged network.
    routes
        Planned routes from :func:`read_routes`.
    departs
        Departure times (default: each route's own ``depart``).
    count
        Alternatives per route and departure (at least 1).
    max_extra_time
        Bound on extra travel time as a share of the plan's (0.25 = 25 %).
    max_extra_length
        Optional bound on extra length as a share of the plan's.
    min_difference
        Share of length by which alternatives differ from the plan and each other.
    keep_every
        Also keep every Nth waypoint as a required via point.

    Returns
    -------
    SuggestResult
        ``to_frame()`` lists plan and alternatives; ``to_map()`` draws them.

    Examples
    --------
    >>> import routerisk as rr
    >>> net = rr.build_network(rr.datasets.get_path("town"), timezone="Etc/GMT+3")
    >>> routes = rr.read_routes(rr.datasets.get_path("routes"), timezone=net.timezone)
    >>> alts = rr.suggest_routes(net, routes[:1], departs="2027-03-09T08:05", count=2)
    >>> alts.to_frame()["option"].iloc[0]
    'planned'
    """
    from routerisk.analysis.alternatives import suggest_routes as _suggest

    if not isinstance(count, int) or count < 1:
        raise OptionError(f"must be a whole number of at least 1, got {count!r}", field="count")
    if keep_every is not None and (not isinstance(keep_every, int) or keep_every < 1):
        raise OptionError(
            f"must be a whole number of at least 1, got {keep_every!r}", field="keep_every"
        )
    _share(max_extra_time, "max_extra_time")
    _share(max_extra_length, "max_extra_length")
    _share(min_difference, "min_difference")
    times = _departs(network, departs)
    with parameters({"--depart": "departs"}):
        found = _suggest(
            network,
            list(routes),
            times,
            count=count,
            max_extra_time=max_extra_time,
            max_extra_length=max_extra_length,
            min_difference=min_difference,
            keep_every=keep_every,
        )
    return SuggestResult(tuple(found), network)


def review_areas(
    network: Network,
    areas: Areas,
    *,
    at: str | None = None,
    what_ifs: Sequence[Sequence[str]] = (),
    top: int = 10,
    high_from: str | None = None,
) -> ReviewResult:
    """Review proposed test areas: exposure, hot spots, closures under the hard rules.

    The same figures as ``routerisk review``.

    Parameters
    ----------
    network
        The tagged network (its profile is the one reported).
    areas
        Areas from :func:`read_areas`, read with ``crs=network.crs``.
    at
        A time of the week (``"wed 08:15"``) at which to report the connectivity too.
    what_ifs
        Scenarios, each a list of changes such as ``["rule:school surroundings at school
        hours=off"]`` or ``["weight:school=5", "weight:retail=0"]``.
    top
        Hot spots per area (>= 0).
    high_from
        Lowest band counted as high for clusters (default: the upper half of the bands).

    Returns
    -------
    ReviewResult
        ``to_frame()`` compares the areas; ``to_map()`` draws them.

    Examples
    --------
    >>> import routerisk as rr
    >>> net = rr.build_network(rr.datasets.get_path("town"), timezone="Etc/GMT+3")
    >>> areas = rr.read_areas(rr.datasets.get_path("area"), crs=net.crs)
    >>> review = rr.review_areas(net, areas, at="wed 08:15")
    >>> list(review.to_frame()["area"])
    ['corvane-main', 'corvane-northwest']
    """
    import pyproj

    from routerisk.analysis import review

    if not isinstance(top, int) or top < 0:
        raise OptionError(f"must be a whole number >= 0, got {top!r}", field="top")
    if isinstance(what_ifs, str) or any(isinstance(w, str) for w in what_ifs):
        raise OptionError(
            "must be a list of scenarios, each a list of changes (e.g. [['weight:school=5']])",
            field="what_ifs",
        )
    if pyproj.CRS.from_user_input(areas.crs) != pyproj.CRS.from_user_input(network.crs):
        raise OptionError(
            "the areas are in another CRS than the network; read them with "
            "read_areas(path, crs=network.crs)",
            field="areas",
        )
    minute = None
    if at is not None:
        minute = review.parse_time(at, option="at")
    with parameters({"--high-from": "high_from", "--what-if": "what_ifs"}):
        high = review.high_bands_from(network.profile, high_from) if high_from else None
        scenarios = [review.parse_what_if(list(specs), network.profile) for specs in what_ifs]
        found = review.review_areas(
            network, list(areas), at=minute, what_ifs=scenarios, top=top, high_bands=high
        )
    return ReviewResult(found)


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


def watch_events(
    network: Network,
    events: Events,
    drives: Routes,
    *,
    fdr: float = 0.1,
    shift: float = 2.0,
    arl0: float = 500.0,
    group: Literal["street", "band", "hour"] = "street",
    unit: Literal["block", "segment"] = "block",
    test: Literal["auto", "negbin", "poisson"] = "auto",
    expected: Literal["modelled", "distance"] = "modelled",
    arl0_family: float | None = None,
) -> WatchResult:
    """Flag segments and groups where logged safety events run ahead of the miles driven.

    The same figures as ``routerisk watch``: events placed on the edges driven at their
    times, empirical Bayes rates, Benjamini-Hochberg flags and a Poisson CUSUM per group.

    Parameters
    ----------
    network
        The tagged network.
    events
        The event log from :func:`read_events`.
    drives
        The recorded drives (with times) from :func:`read_drives`.
    fdr
        False discovery rate for the segment flags, in (0, 1).
    shift
        Rate ratio the CUSUM is tuned to detect (> 1).
    arl0
        In-control average run length of the CUSUM, in days (> 1).
    group
        CUSUM groups: ``"street"``, ``"band"`` or ``"hour"`` (of the week).
    unit
        Unit of discovery: ``"block"`` (both directions of a street block, merged between
        intersections) or ``"segment"`` (each directed edge).
    test
        P-values: ``"auto"`` (negative binomial when the counts are over-dispersed),
        ``"negbin"`` or ``"poisson"``.
    expected
        Expected counts by ``"modelled"`` exposure or by ``"distance"`` driven only.
    arl0_family
        In-control run length of the whole family of CUSUM charts, in days (optional).

    Returns
    -------
    WatchResult
        ``to_frame()`` lists the driven segments; ``to_map()`` draws the flagged ones.

    Examples
    --------
    >>> import routerisk as rr
    >>> net = rr.build_network(rr.datasets.get_path("town"), timezone="Etc/GMT+3")
    >>> events = rr.read_events(rr.datasets.get_path("events"), timezone=net.timezone)
    >>> drives = rr.read_drives(rr.datasets.get_path("drives"), timezone=net.timezone)
    >>> rr.watch_events(net, events, drives).to_dict()["events_matched"] > 0
    True
    """
    from routerisk.analysis import watch

    with parameters({"--fdr": "fdr", "--drives": "drives", "--arl0-family": "arl0_family"}):
        watch.check_settings(
            q=fdr,
            shift=shift,
            arl0=arl0,
            arl0_family=arl0_family,
            group=group,
            unit=unit,
            test=test,
            expected=expected,
        )
        if not len(drives):
            raise OptionError("holds no drive", field="drives")
        matched = watch.match_drives(network, list(drives))
        found = watch.watch_matched(
            network,
            events.events,
            events.rejected,
            matched,
            q=fdr,
            shift=shift,
            arl0=arl0,
            arl0_family=arl0_family,
            group=group,
            unit=unit,
            test=test,
            expected=expected,
        )
    return WatchResult(found, network)
