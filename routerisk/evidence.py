"""Plan the test distance a statistical safety claim needs.

The claim is "the automated fleet's event rate is below a target", where the target is a
benchmark rate (for example human-driver deaths per distance) made better by an improvement
share. The module answers four questions:

1. How far must the fleet drive with no event at all to be confident, at level ``C``, that its
   rate is below the target? Exact Poisson answer ``-ln(1 - C) / target``
   (``= chi2.ppf(C, 2) / (2 target)``), with the binomial form ``ln(1 - C) / ln(1 - r)`` of
   Kalra and Paddock (2016) beside it.
2. The same when ``k`` events are allowed: ``chi2.ppf(C, 2k + 2) / (2 target)``, from the exact
   upper limit of a Poisson mean (Garwood 1936).
3. How far must it drive to have probability ``P`` (the power) of showing, at confidence ``C``,
   that it beats the benchmark, when its true rate equals the target? A normal approximation
   (the Kalra and Paddock figure) and the exact Poisson test.
4. Given ``M`` distance driven with ``K`` events, what is the exact one-sided upper limit of the
   rate, and is it below the target?

Each distance is also given in fleet-years. :func:`distance_by_exposure` splits a drive log
(the scored segments of ``routerisk score``) by exposure band and category influence, so a
safety case can say how much of the driving was near schools or busy streets.

All rates inside the module are events per unit distance (per mile or per kilometre); the
:class:`EvidencePlan` reports them per the user's ``per`` distance.
"""

from __future__ import annotations

import io
import json
import logging
import math
from dataclasses import asdict, dataclass, field, replace
from pathlib import Path
from typing import Any, Literal

import numpy as np
import pandas as pd
from scipy import stats

from . import CAUTION
from ._io import provenance_line, write_bytes_atomic
from .errors import InputFileError, OptionError

logger = logging.getLogger(__name__)

__all__ = [
    "DAYS_PER_YEAR",
    "MAX_ALLOWED_EVENTS",
    "METRES_PER_UNIT",
    "EvidenceInputs",
    "EvidencePlan",
    "ExactPower",
    "ExposureEvidence",
    "distance_allowed_events",
    "distance_by_exposure",
    "distance_power_exact",
    "distance_power_normal",
    "distance_zero_events",
    "describe",
    "distance_zero_events_binomial",
    "fleet_distance_per_year",
    "plan_evidence",
    "plot_upper_limit",
    "read_segments",
    "upper_rate",
]

DAYS_PER_YEAR = 365
"""Days a year the fleet drives in the fleet-year figures."""

METRES_PER_UNIT = {"mi": 1609.344, "km": 1000.0}
"""Length of one distance unit in metres (international mile)."""

MAX_ALLOWED_EVENTS = 1_000_000
"""Largest event count accepted in the "k events allowed" table."""

_MAX_EXACT_COUNT = 10**12  # beyond this the exact power search stops (improvement too small)
_SCAN_EXACT_COUNT = 1 << 22  # up to this critical count every count is tried (no bisection)

SURPRISE_P = 1e-6
"""Warn when at least the observed events would happen with less probability at the benchmark."""

NORMAL_GAP = 0.10
"""Warn when the normal approximation differs from the exact power distance by more."""


# ---------------------------------------------------------------------------------------------
# Formulas (rates per unit distance)
# ---------------------------------------------------------------------------------------------


def distance_zero_events(target: float, confidence: float) -> float:
    """Return the distance to drive with no event to show a rate below ``target``.

    With no event in distance ``n`` the exact one-sided upper limit of a Poisson rate at
    confidence ``C`` is ``-ln(1 - C) / n`` (equal to ``chi2.ppf(C, 2) / (2 n)``), so the limit
    falls below ``target`` once ``n = -ln(1 - C) / target``.

    Parameters
    ----------
    target
        Target rate, events per unit distance.
    confidence
        Confidence level ``C`` in (0, 1).

    Returns
    -------
    float
        Distance in the units of ``target``'s denominator.
    """
    return -math.log1p(-confidence) / target


def distance_zero_events_binomial(target: float, confidence: float) -> float | None:
    """Return the binomial form ``ln(1 - C) / ln(1 - r)`` of the zero-event distance.

    Kalra and Paddock (2016) treat each unit of distance as a trial that fails with probability
    ``r``; for small ``r`` the result equals :func:`distance_zero_events`.

    Parameters
    ----------
    target
        Target rate ``r``, events per unit distance.
    confidence
        Confidence level ``C`` in (0, 1).

    Returns
    -------
    float or None
        The distance, or None when ``r >= 1`` (the form then has no meaning).
    """
    if target >= 1.0:
        return None
    return math.log1p(-confidence) / math.log1p(-target)


def distance_allowed_events(target: float, confidence: float, events: int) -> float:
    """Return the distance to drive with ``events`` events to show a rate below ``target``.

    Garwood's (1936) exact upper limit of a Poisson mean after ``k`` events is
    ``chi2.ppf(C, 2k + 2) / 2``; divided by the distance it bounds the rate.

    Parameters
    ----------
    target
        Target rate, events per unit distance.
    confidence
        Confidence level ``C`` in (0, 1).
    events
        Number of events ``k`` seen (allowed) in that distance.

    Returns
    -------
    float
        ``chi2.ppf(C, 2k + 2) / (2 target)``.
    """
    return float(stats.chi2.ppf(confidence, 2 * events + 2)) / (2.0 * target)


def distance_power_normal(
    benchmark: float,
    target: float,
    confidence: float,
    power: float,
    *,
    variance: Literal["alternative", "score"] = "alternative",
) -> float:
    """Return the distance for a test against ``benchmark`` with the given power (normal form).

    The test is one-sided, H0: rate >= benchmark (``lambda0``), at level ``alpha = 1 - C``;
    the true rate is the target (``lambda1 < lambda0``). With ``x`` events in distance ``n`` the
    estimated rate ``x / n`` is approximately normal.

    ``variance="alternative"`` (default; the Kalra and Paddock figure). The test statistic is the
    Wald form ``Z = (lambda0 - x/n) / sqrt(lambda_hat / n)`` with the variance taken from the
    observed rate; when the true rate is ``lambda1``, ``lambda_hat`` is about ``lambda1``. The
    test rejects when ``x/n < lambda0 - z_C sqrt(lambda1 / n)``, which happens with
    probability ``Phi((lambda0 - lambda1) sqrt(n / lambda1) - z_C)``. Setting that to ``P``
    gives::

        n = (z_C + z_P)**2 * lambda1 / (lambda0 - lambda1)**2

    For ``lambda0 = 1.09`` per 100 million miles, a 20 % improvement, ``C = 0.95`` and
    ``P = 0.8`` this gives 11.34 billion miles, 518.0 years for 100 vehicles x 24 h x 25 mph,
    which reproduces the figures quoted from Kalra and Paddock (2016) (about 11 billion miles,
    about 518 years; seen only in a secondary copy, the paper itself was not at hand).

    ``variance="score"``. The score form uses the variance under H0 for the critical value
    and the variance under H1 for the power::

        n = ((z_C sqrt(lambda0) + z_P sqrt(lambda1)) / (lambda0 - lambda1))**2

    For the same inputs this gives 13.18 billion miles (602 years); it does not reproduce the
    quoted figures and is kept only for comparison. :func:`distance_power_exact` gives the
    exact Poisson answer.

    Parameters
    ----------
    benchmark
        Benchmark rate ``lambda0``, events per unit distance.
    target
        True (target) rate ``lambda1 < lambda0``, events per unit distance.
    confidence
        Confidence level ``C`` in (0, 1).
    power
        Power ``P`` in (0, 1).
    variance
        Which variance the normal approximation uses (see above).

    Returns
    -------
    float
        Distance in the units of the rates' denominator.
    """
    if not target < benchmark:
        raise OptionError("the target must be below the benchmark", field="--improvement")
    z_c = float(stats.norm.ppf(confidence))
    z_p = float(stats.norm.ppf(power))
    gap = benchmark - target
    if variance == "alternative":
        return (z_c + z_p) ** 2 * target / gap**2
    if variance == "score":
        return ((z_c * math.sqrt(benchmark) + z_p * math.sqrt(target)) / gap) ** 2
    raise ValueError(f"unknown variance {variance!r}; use 'alternative' or 'score'")


@dataclass(frozen=True)
class ExactPower:
    """Result of the exact Poisson power search.

    Attributes
    ----------
    distance
        Smallest distance at which the exact test has at least the asked power.
    max_events
        The claim is shown at that distance if at most this many events happen.
    achieved
        The exact power at that distance.
    """

    distance: float
    max_events: int
    achieved: float


def _exact_power_at(count: int, confidence: float, ratio: float) -> tuple[float, float]:
    """Return (expected count at the benchmark, power) where ``count`` first becomes critical."""
    mean0 = float(stats.chi2.ppf(confidence, 2 * count + 2)) / 2.0
    return mean0, float(stats.poisson.cdf(count, ratio * mean0))


def distance_power_exact(
    benchmark: float, target: float, confidence: float, power: float
) -> ExactPower | None:
    """Return the smallest distance at which the exact Poisson test has the asked power.

    The exact one-sided test of H0: rate >= benchmark after ``x`` events in distance ``n``
    rejects when ``P(X <= x | benchmark n) <= 1 - C``, that is when Garwood's upper limit
    ``chi2.ppf(C, 2x + 2) / (2 n)`` is below the benchmark. Its critical count ``c(n)`` is the
    largest ``c`` with ``n >= n_c = chi2.ppf(C, 2c + 2) / (2 benchmark)``, and its power
    ``P(X <= c(n) | target n)`` falls between the jumps ``n_c`` (a saw-tooth in ``n``). The
    smallest distance with power ``P`` is therefore one of the ``n_c``: the first ``c`` with
    ``poisson.cdf(c, target n_c) >= P``. That power at ``n_c`` rises with ``c`` (checked
    numerically over a grid of confidences and improvements). ``c`` is bracketed by doubling,
    then every count up to the bracket is tried (no monotonicity assumed) up to 2**22; beyond
    that the bracket is bisected. The result is never shorter than the zero-event distance
    ``-ln(1 - C) / benchmark`` of the same test (checked).

    Because of the saw-tooth, a slightly longer distance can have slightly less power.

    Parameters
    ----------
    benchmark
        Benchmark rate, events per unit distance.
    target
        True (target) rate below the benchmark, events per unit distance.
    confidence
        Confidence level ``C`` in (0, 1).
    power
        Power ``P`` in (0, 1).

    Returns
    -------
    ExactPower or None
        None when the improvement is so small that more than 10**12 events would be needed.
    """
    if not target < benchmark:
        raise OptionError("the target must be below the benchmark", field="--improvement")
    ratio = target / benchmark

    def reached(c: int) -> bool:
        return _exact_power_at(c, confidence, ratio)[1] >= power

    if reached(0):
        best = 0
    else:
        lo, hi = 0, 1
        while not reached(hi):
            lo, hi = hi, hi * 2
            if hi > _MAX_EXACT_COUNT:
                return None
        if hi <= _SCAN_EXACT_COUNT:  # scan every count: no monotonicity assumed
            counts = np.arange(0, hi + 1)
            mean0s = stats.chi2.ppf(confidence, 2 * counts + 2) / 2.0
            powers = stats.poisson.cdf(counts, ratio * mean0s)
            best = int(np.flatnonzero(powers >= power)[0])
        else:
            while hi - lo > 1:  # invariant: not reached(lo), reached(hi)
                mid = (lo + hi) // 2
                lo, hi = (lo, mid) if reached(mid) else (mid, hi)
            best = hi
    mean0, achieved = _exact_power_at(best, confidence, ratio)
    distance = mean0 / benchmark
    # soundness: any exact test needs at least the zero-event distance at the same level
    floor = distance_zero_events(benchmark, confidence)
    if distance < floor * (1.0 - 1e-12):
        raise AssertionError(f"exact power distance {distance:g} below the zero-event "
                             f"distance {floor:g}")
    return ExactPower(distance=distance, max_events=best, achieved=achieved)


def upper_rate(distance: float, events: int, confidence: float) -> float:
    """Return the exact one-sided upper limit of a Poisson rate (Garwood 1936).

    Parameters
    ----------
    distance
        Distance driven (``inf`` rate when 0).
    events
        Events seen in that distance.
    confidence
        Confidence level ``C`` in (0, 1).

    Returns
    -------
    float
        ``chi2.ppf(C, 2K + 2) / (2 M)``, events per unit distance.
    """
    count = float(stats.chi2.ppf(confidence, 2 * events + 2)) / 2.0
    return math.inf if distance == 0 else count / distance


def fleet_distance_per_year(fleet: float, hours_per_day: float, speed: float) -> float:
    """Return the distance a fleet covers in a year of :data:`DAYS_PER_YEAR` days.

    Parameters
    ----------
    fleet
        Number of vehicles.
    hours_per_day
        Hours each vehicle drives a day.
    speed
        Average speed, distance units per hour.

    Returns
    -------
    float
        ``fleet x hours_per_day x 365 x speed``.
    """
    return fleet * hours_per_day * DAYS_PER_YEAR * speed


# ---------------------------------------------------------------------------------------------
# Validated inputs and the plan
# ---------------------------------------------------------------------------------------------


def _real(value: Any, option: str) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float | np.integer | np.floating):
        raise OptionError(f"must be a number, got {value!r}", field=option)
    out = float(value)
    if not math.isfinite(out):
        raise OptionError(f"must be a finite number, got {value!r}", field=option)
    return out


def _count(value: Any, option: str, *, limit: float) -> int:
    out = _real(value, option)
    if out < 0 or out != int(out):
        raise OptionError(f"must be a whole number of events >= 0, got {value!r}", field=option)
    if out > limit:
        raise OptionError(
            f"{int(out)} events is more than is meaningful here (at most {limit:.6g})",
            field=option,
        )
    return int(out)


@dataclass(frozen=True)
class EvidenceInputs:
    """Validated inputs of :func:`plan_evidence`.

    Build it with keyword arguments; every value is checked and a bad one raises
    :class:`~routerisk.errors.OptionError` naming the command-line option.

    Attributes
    ----------
    benchmark
        Benchmark rate: ``benchmark`` events per ``per`` distance units (> 0).
    per
        Distance the benchmark is stated per, e.g. 1e9 for "per billion miles" (> 0).
    improvement
        Share by which the fleet should beat the benchmark, in [0, 1). With 0 the target is the
        benchmark itself; the zero-event figures remain defined but the power figures are not
        (they are reported as None with a note).
    confidence
        Confidence level in (0, 1).
    power
        Power in (0, 1).
    units
        ``"mi"`` or ``"km"``; every distance (and the speed) is in this unit.
    fleet
        Number of vehicles (> 0).
    hours_per_day
        Hours a day each vehicle drives, in (0, 24].
    speed
        Average speed in ``units`` per hour (> 0).
    observed
        Distance already driven (>= 0), or None.
    events
        Events seen in ``observed`` (whole number >= 0; > 0 needs ``observed > 0``), or None;
        given together with ``observed``. Far more events than the benchmark predicts are
        accepted with a warning in :attr:`EvidencePlan.warnings`.
    allowed_events
        Event counts of the "k events allowed" table (default 0..3).
    """

    benchmark: float
    per: float
    improvement: float = 0.2
    confidence: float = 0.95
    power: float = 0.8
    units: str = "mi"
    fleet: float = 100.0
    hours_per_day: float = 24.0
    speed: float = 25.0
    observed: float | None = None
    events: int | None = None
    allowed_events: tuple[int, ...] = (0, 1, 2, 3)

    def __post_init__(self) -> None:
        """Check every value; raise OptionError naming the option."""
        put = object.__setattr__
        for name, option in (
            ("benchmark", "--benchmark"),
            ("per", "--per"),
            ("fleet", "--fleet"),
            ("speed", "--speed"),
        ):
            value = _real(getattr(self, name), option)
            if value <= 0:
                raise OptionError(f"must be > 0, got {value:g}", field=option)
            put(self, name, value)
        for name, option in (("confidence", "--confidence"), ("power", "--power")):
            value = _real(getattr(self, name), option)
            if not 0 < value < 1:
                raise OptionError(f"must be between 0 and 1 (exclusive), got {value:g}",
                                  field=option)
            put(self, name, value)
        improvement = _real(self.improvement, "--improvement")
        if not 0 <= improvement < 1:
            raise OptionError(f"must be in [0, 1), got {improvement:g}", field="--improvement")
        put(self, "improvement", improvement)
        hours = _real(self.hours_per_day, "--hours-per-day")
        if not 0 < hours <= 24:
            raise OptionError(f"must be in (0, 24], got {hours:g}", field="--hours-per-day")
        put(self, "hours_per_day", hours)
        if self.units not in METRES_PER_UNIT:
            raise OptionError(f"must be 'mi' or 'km', got {self.units!r}", field="--units")
        if (self.observed is None) != (self.events is None):
            missing = "--events" if self.events is None else "--observed"
            raise OptionError("--observed and --events go together", field=missing)
        if self.observed is not None:
            observed = _real(self.observed, "--observed")
            if observed < 0:
                raise OptionError(f"must be >= 0, got {observed:g}", field="--observed")
            put(self, "observed", observed)
            events = _count(self.events, "--events", limit=math.inf)
            if observed == 0 and events > 0:
                raise OptionError(f"{events} events in a distance of 0 is impossible; give the "
                                  "distance driven with --observed", field="--events")
            put(self, "events", events)
        allowed = [_count(k, "--allowed-events", limit=MAX_ALLOWED_EVENTS)
                   for k in self.allowed_events]
        if not allowed:
            raise OptionError("needs at least one event count", field="--allowed-events")
        put(self, "allowed_events", tuple(sorted(set(allowed))))

    @property
    def benchmark_per_unit(self) -> float:
        """Benchmark rate, events per unit distance."""
        return self.benchmark / self.per

    @property
    def target_per_unit(self) -> float:
        """Target rate ``(1 - improvement) x benchmark``, events per unit distance."""
        return (1.0 - self.improvement) * self.benchmark_per_unit


@dataclass(frozen=True)
class EvidencePlan:
    """Distances a safety claim needs, from :func:`plan_evidence`.

    Distances are in ``inputs.units`` (miles or kilometres, even in the fields named
    ``miles_*``); rates are events per ``inputs.per`` distance units; years are fleet-years.

    Attributes
    ----------
    inputs
        The validated inputs.
    target_rate
        ``(1 - improvement) x benchmark``, per ``per`` units.
    fleet_miles_per_year
        Distance the fleet covers in a year.
    miles_no_failure, years_no_failure
        Distance (and fleet-years) with no event to show a rate below the target (exact).
    miles_no_failure_binomial
        The binomial form ``ln(1 - C) / ln(1 - r)`` of the same figure (None when r >= 1).
    allowed_events
        ``[{"events": k, "miles": n_k, "years": y_k}, ...]`` (Garwood limits).
    miles_power, years_power
        Distance to show the improvement over the benchmark with the asked power, from the
        exact Poisson test (the headline); None when ``improvement == 0`` or the exact search
        gives up.
    miles_power_normal_approx, years_power_normal_approx
        The same from the normal approximation of Kalra and Paddock (2016), for comparison;
        a warning is added when it differs from the exact figure by more than 10 %.
    miles_power_exact, years_power_exact, events_power_exact, power_exact_achieved
        The exact Poisson test: its distance (same as ``miles_power``), the most events it may
        see there, its power.
    power_note
        Why the power figures are None, else None.
    upper_rate
        Exact upper limit of the rate from the observed distance and events, per ``per``
        units; None without observations or when the observed distance is 0 (limit infinite).
    shown
        ``upper_rate < target_rate`` (False when the limit is infinite), None without
        observations.
    upper_rate_note
        Why ``upper_rate`` is None although observations were given, else None.
    warnings
        One-line warnings (surprising event counts, a poor normal approximation).
    strata
        Number of strata (bands plus categories) with exposure tables, else None. Each must
        reach the distance on its own; ``by_band`` and ``by_category`` rows carry ``needed``
        (unadjusted), ``needed_bonferroni`` and ``needed_holm`` (confidence adjusted for the
        number of strata) with the matching ``still_needed*``.
    """

    inputs: EvidenceInputs
    target_rate: float
    fleet_miles_per_year: float
    miles_no_failure: float
    years_no_failure: float
    miles_no_failure_binomial: float | None
    allowed_events: list[dict[str, float]]
    miles_power: float | None
    years_power: float | None
    miles_power_exact: float | None
    years_power_exact: float | None
    events_power_exact: int | None
    power_exact_achieved: float | None
    power_note: str | None
    upper_rate: float | None
    shown: bool | None
    upper_rate_note: str | None = None
    miles_power_normal_approx: float | None = None
    years_power_normal_approx: float | None = None
    warnings: list[str] = field(default_factory=list)
    by_band: list[dict[str, Any]] | None = field(default=None)
    by_category: list[dict[str, Any]] | None = field(default=None)
    strata: int | None = None

    def to_json(self) -> dict[str, Any]:
        """Return the plan as a JSON-ready dict (inputs under ``"inputs"``)."""
        out = asdict(self)
        inputs = out.pop("inputs")
        inputs["allowed_events"] = list(inputs["allowed_events"])
        out["inputs"] = inputs
        out["units"] = self.inputs.units
        out["per"] = self.inputs.per
        out["benchmark_rate"] = self.inputs.benchmark
        return out

    def with_exposure(self, exposure: ExposureEvidence) -> EvidencePlan:
        """Return a copy carrying the exposure-stratified tables as lists of records."""
        by_band = _records(exposure.by_band)
        by_category = _records(exposure.by_category)
        strata = _adjust_strata(by_band + by_category, self.inputs.target_per_unit,
                                self.inputs.confidence)
        return replace(self, by_band=by_band, by_category=by_category, strata=strata)


def _adjust_strata(rows: list[dict[str, Any]], target: float, confidence: float) -> int:
    """Add unadjusted, Bonferroni and Holm zero-event distances to each stratum row (in place).

    With ``m`` strata and ``alpha = 1 - C``, Bonferroni asks every stratum for confidence
    ``1 - alpha / m``. Holm's step-down asks the stratum with the most driving (smallest
    p-value when no event happened) for ``1 - alpha / m``, the next for
    ``1 - alpha / (m - 1)``, ..., the least driven for ``C`` itself; a stratum's Holm figure
    holds once every stratum ranked before it has reached its own.
    """
    m = len(rows)
    alpha = 1.0 - confidence
    order = sorted(range(m), key=lambda i: -float(rows[i]["driven"]))  # stable for ties
    needed = distance_zero_events(target, confidence)
    bonf = distance_zero_events(target, 1.0 - alpha / m) if m else needed
    for rank, i in enumerate(order):
        row = rows[i]
        driven = float(row["driven"])
        holm = distance_zero_events(target, 1.0 - alpha / (m - rank))
        row.update(needed=needed, needed_bonferroni=bonf, needed_holm=holm,
                   still_needed_bonferroni=max(bonf - driven, 0.0),
                   still_needed_holm=max(holm - driven, 0.0))
    return m


def _records(frame: pd.DataFrame) -> list[dict[str, Any]]:
    rows = []
    for rec in frame.to_dict(orient="records"):
        rows.append({k: (v.item() if isinstance(v, np.generic) else v) for k, v in rec.items()})
    return rows


def plan_evidence(inputs: EvidenceInputs) -> EvidencePlan:
    """Compute every distance and limit of the evidence plan.

    Parameters
    ----------
    inputs
        Validated inputs.

    Returns
    -------
    EvidencePlan
        Distances in ``inputs.units``, rates per ``inputs.per`` units, fleet-years.
    """
    c = inputs.confidence
    lam0 = inputs.benchmark_per_unit
    lam1 = inputs.target_per_unit
    per_year = fleet_distance_per_year(inputs.fleet, inputs.hours_per_day, inputs.speed)

    n0 = distance_zero_events(lam1, c)
    table = []
    for k in inputs.allowed_events:
        n_k = distance_allowed_events(lam1, c, k)
        table.append({"events": k, "miles": n_k, "years": n_k / per_year})

    miles_power = years_power = normal_n = normal_years = None
    warnings: list[str] = []
    exact_n = exact_years = exact_achieved = None
    exact_events: int | None = None
    note = None
    if inputs.improvement == 0:
        note = ("with no improvement the target equals the benchmark, so no amount of "
                "driving gives power to show an improvement; power figures are not defined")
    else:
        normal_n = distance_power_normal(lam0, lam1, c, inputs.power)
        normal_years = normal_n / per_year
        exact = distance_power_exact(lam0, lam1, c, inputs.power)
        if exact is None:
            note = ("the improvement is too small for the exact power search; only the normal "
                    "approximation is given")
        else:
            exact_n, exact_events, exact_achieved = exact.distance, exact.max_events, exact.achieved
            exact_years = exact_n / per_year
            miles_power, years_power = exact_n, exact_years
            gap = normal_n / exact_n - 1.0
            if abs(gap) > NORMAL_GAP:
                warnings.append(
                    f"the normal approximation of the power distance ({normal_n:.4g} "
                    f"{inputs.units}) is {_pct(abs(gap))} {'above' if gap > 0 else 'below'} "
                    f"the exact Poisson figure ({exact_n:.4g} {inputs.units}, "
                    f"{max(normal_n, exact_n) / min(normal_n, exact_n):.3g} times the other); "
                    "use the exact figure")

    upper = shown = upper_note = None
    if inputs.observed is not None and inputs.events is not None:
        limit = upper_rate(inputs.observed, inputs.events, c)
        shown = bool(limit < lam1)
        expected = lam0 * inputs.observed
        if inputs.events > 0:
            surprise = float(stats.poisson.sf(inputs.events - 1, expected))
            if surprise < SURPRISE_P:
                warnings.append(
                    f"{inputs.events} events in {inputs.observed:.4g} {inputs.units} is far above "
                    f"the {expected:.3g} the benchmark predicts (probability "
                    f"{f'{surprise:.2g}' if surprise > 0 else 'below 1e-300'} of "
                    "at least that many at the benchmark rate); check --events, --observed, "
                    "--benchmark and --per")
        if math.isfinite(limit):
            upper = limit * inputs.per
        else:
            upper_note = "no distance driven yet: the upper limit is infinite"

    plan = EvidencePlan(
        inputs=inputs,
        target_rate=(1.0 - inputs.improvement) * inputs.benchmark,
        fleet_miles_per_year=per_year,
        miles_no_failure=n0,
        years_no_failure=n0 / per_year,
        miles_no_failure_binomial=distance_zero_events_binomial(lam1, c),
        allowed_events=table,
        miles_power=miles_power,
        years_power=years_power,
        miles_power_exact=exact_n,
        years_power_exact=exact_years,
        events_power_exact=exact_events,
        power_exact_achieved=exact_achieved,
        power_note=note,
        upper_rate=upper,
        shown=shown,
        upper_rate_note=upper_note,
        miles_power_normal_approx=normal_n,
        years_power_normal_approx=normal_years,
        warnings=warnings,
    )
    logger.info(
        "plan_evidence: target %.4g per %g %s, %.4g %s with no event (%.3g years)",
        plan.target_rate, inputs.per, inputs.units, n0, inputs.units, plan.years_no_failure,
    )
    return plan


# ---------------------------------------------------------------------------------------------
# Exposure-stratified evidence
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ExposureEvidence:
    """Distance driven per exposure band and per category influence.

    Attributes
    ----------
    by_band
        Columns ``band``, ``segments``, ``driven``, ``share`` (of all distance driven),
        ``still_needed`` (``needed - driven`` floored at 0), in ``units``.
    by_category
        Columns ``category``, ``driven`` (sum of ``length x infl_<category>``), ``share``,
        ``still_needed``.
    total
        All distance driven, in ``units``.
    units
        Distance unit of the tables.
    needed
        Distance each stratum needs (typically the zero-event distance).
    """

    by_band: pd.DataFrame
    by_category: pd.DataFrame
    total: float
    units: str
    needed: float


def _column_error(message: str, column: str, path: str | Path | None) -> InputFileError:
    return InputFileError(message, path=path, field=column)


def _numeric(frame: pd.DataFrame, column: str, path: str | Path | None) -> pd.Series:
    values = pd.to_numeric(frame[column], errors="coerce")
    bad = values.isna() | ~np.isfinite(values.to_numpy(dtype=float, na_value=np.nan))
    if bad.any():
        row = int(np.flatnonzero(bad.to_numpy())[0])
        raise _column_error(
            f"segment {row} has no finite number ({frame[column].iloc[row]!r})", column, path
        )
    return values.astype(float)


def distance_by_exposure(
    segments: pd.DataFrame,
    *,
    needed: float,
    units: str = "mi",
    path: str | Path | None = None,
) -> ExposureEvidence:
    """Split driven distance by exposure band and by category influence.

    Each band is treated as its own stratum that must on its own reach ``needed`` (for a claim
    such as "below the target near schools, too"); ``still_needed = max(0, needed - driven)``.

    Parameters
    ----------
    segments
        One row per driven segment, with ``length_m`` (metres, >= 0), ``band`` (exposure band
        name) and any number of ``infl_<category>`` columns (share 0..1 of the segment length
        inside that category's influence). Other columns are ignored.
    needed
        Distance each stratum needs, in ``units``.
    units
        ``"mi"`` or ``"km"``.
    path
        File the segments came from, named in errors.

    Returns
    -------
    ExposureEvidence
        The two tables, in ``units``.
    """
    if units not in METRES_PER_UNIT:
        raise OptionError(f"must be 'mi' or 'km', got {units!r}", field="--units")
    for column in ("length_m", "band"):
        if column not in segments.columns:
            raise _column_error("the segments have no such column", column, path)
    length = _numeric(segments, "length_m", path)
    if (length < 0).any():
        row = int(np.flatnonzero((length < 0).to_numpy())[0])
        raise _column_error(f"segment {row} has a negative length", "length_m", path)
    band = segments["band"]
    bad_band = band.isna() | (band.astype(str).str.strip() == "")
    if bad_band.any():
        row = int(np.flatnonzero(bad_band.to_numpy())[0])
        raise _column_error(f"segment {row} has no band name", "band", path)
    band = band.astype(str)
    dist = length / METRES_PER_UNIT[units]
    total = float(dist.sum())

    def share(x: float) -> float:
        return x / total if total > 0 else 0.0

    grouped = pd.DataFrame({"band": band, "driven": dist}).groupby("band", sort=True)
    by_band = grouped.agg(segments=("driven", "size"), driven=("driven", "sum")).reset_index()
    if "risk" in segments.columns:  # order bands from the least to the most exposed
        risk = pd.to_numeric(segments["risk"], errors="coerce")
        order = risk.groupby(band).mean().reindex(by_band["band"]).to_numpy()
        if np.isfinite(order).all():
            by_band = by_band.iloc[np.argsort(order, kind="stable")].reset_index(drop=True)
    by_band["segments"] = by_band["segments"].astype(int)
    by_band["share"] = [share(x) for x in by_band["driven"]]
    by_band["still_needed"] = np.maximum(needed - by_band["driven"], 0.0)

    rows = []
    for column in sorted(c for c in segments.columns if str(c).startswith("infl_")):
        infl = _numeric(segments, column, path)
        outside = (infl < -1e-9) | (infl > 1 + 1e-9)
        if outside.any():
            row = int(np.flatnonzero(outside.to_numpy())[0])
            raise _column_error(
                f"segment {row} has a share {infl.iloc[row]:g} outside 0..1", column, path
            )
        driven = float((dist * infl.clip(0.0, 1.0)).sum())
        rows.append({"category": column[len("infl_"):], "driven": driven,
                     "share": share(driven), "still_needed": max(needed - driven, 0.0)})
    by_category = pd.DataFrame(rows, columns=["category", "driven", "share", "still_needed"])
    logger.info("distance_by_exposure: %d segments, %.4g %s in %d bands and %d categories",
                len(segments), total, units, len(by_band), len(by_category))
    return ExposureEvidence(by_band=by_band[["band", "segments", "driven", "share",
                                             "still_needed"]],
                            by_category=by_category, total=total, units=units, needed=needed)


def read_segments(path: str | Path) -> pd.DataFrame:
    """Read the feature properties of a scored segments GeoJSON into a DataFrame.

    Parameters
    ----------
    path
        A GeoJSON FeatureCollection such as ``routerisk score --out DIR`` writes as
        ``DIR/segments.geojson``.

    Returns
    -------
    pandas.DataFrame
        One row per feature, one column per property (geometry dropped).
    """
    source = Path(path)
    try:
        data = json.loads(source.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise InputFileError("no such file", path=source) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputFileError(f"cannot be read ({exc.__class__.__name__})", path=source) from None
    except json.JSONDecodeError as exc:
        raise InputFileError(f"is not valid JSON (line {exc.lineno})", path=source) from None
    if not isinstance(data, dict) or data.get("type") != "FeatureCollection":
        raise InputFileError("is not a GeoJSON FeatureCollection", path=source, field="type")
    features = data.get("features")
    if not isinstance(features, list) or not features:
        raise InputFileError("holds no segment features", path=source, field="features")
    rows = []
    for i, feat in enumerate(features):
        props = feat.get("properties") if isinstance(feat, dict) else None
        if not isinstance(props, dict):
            raise InputFileError(f"feature {i} has no properties", path=source,
                                 field="properties")
        rows.append(props)
    return pd.DataFrame.from_records(rows)


# ---------------------------------------------------------------------------------------------
# Chart
# ---------------------------------------------------------------------------------------------


def _write_bytes_atomic(path: str | Path, data: bytes, *, force: bool = True) -> Path:
    return write_bytes_atomic(path, data, force=force)


def _upper_curve(plan: EvidencePlan, distances: np.ndarray) -> np.ndarray:
    count0 = float(stats.chi2.ppf(plan.inputs.confidence, 2)) / 2.0
    return np.asarray(count0 / distances * plan.inputs.per)


def plot_upper_limit(plan: EvidencePlan, path: str | Path, *, force: bool = True,
                     made_from: dict[str, Any] | None = None) -> Path:
    """Draw the zero-event upper limit of the rate against distance, with the target line.

    Uses matplotlib's Agg canvas directly (no pyplot, no global backend change) and writes
    the PNG atomically.

    Parameters
    ----------
    plan
        The evidence plan.
    path
        Output PNG file (replaced if present with ``force``, else refused).
    force
        Replace an existing file.
    made_from
        Provenance (:func:`routerisk._io.provenance`) to record in the PNG's
        ``Description`` text chunk.

    Returns
    -------
    Path
        The written file.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    inp = plan.inputs
    unit = inp.units
    n0 = plan.miles_no_failure
    lo, hi = n0 / 30.0, n0 * 30.0
    if inp.observed:
        lo, hi = min(lo, inp.observed / 3.0), max(hi, inp.observed * 3.0)
    xs = np.geomspace(lo, hi, 200)

    fig = Figure(figsize=(8.0, 5.2), dpi=100)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot(1, 1, 1)
    ax.loglog(xs, _upper_curve(plan, xs), color="#1f5f8b", lw=2,
              label=f"upper limit of the rate with no event ({inp.confidence:.0%} confidence)")
    ax.axhline(plan.target_rate, color="#b5462c", lw=1.5, ls="--",
               label=f"target: {plan.target_rate:.3g} per {_human(inp.per)} {unit}")
    ax.axvline(n0, color="#777777", lw=1, ls=":")
    ax.plot([n0], [plan.target_rate], "o", color="#b5462c")
    ax.annotate(f"{_human(n0)} {unit}", (n0, plan.target_rate), textcoords="offset points",
                xytext=(8, 8), fontsize=9)
    if inp.observed and plan.upper_rate is not None:
        ax.plot([inp.observed], [plan.upper_rate], "s", color="#2b7a3d",
                label=f"driven so far: {_human(inp.observed)} {unit}, {inp.events} events")
    ax.set_xlabel(f"distance driven ({unit})")
    ax.set_ylabel(f"events per {_human(inp.per)} {unit}")
    ax.set_title("How far to drive with no event to show a rate below the target")
    ax.grid(True, which="both", alpha=0.25)
    ax.legend(loc="upper right", fontsize=8)
    fig.text(0.01, 0.01, CAUTION, fontsize=6, wrap=True, va="bottom", color="#444444")
    fig.subplots_adjust(bottom=0.2)
    buf = io.BytesIO()
    meta: dict[str, str | None] = {"Software": None}
    if made_from is not None:
        meta["Description"] = provenance_line(made_from)
    fig.savefig(buf, format="png", metadata=meta)
    out = _write_bytes_atomic(path, buf.getvalue(), force=force)
    logger.info("plot_upper_limit wrote %s", out)
    return out


# ---------------------------------------------------------------------------------------------
# Plain-language text
# ---------------------------------------------------------------------------------------------


def _human(x: float) -> str:
    """Return a distance or count a non-statistician reads easily (275.0 million)."""
    ax = abs(x)
    for scale, word in ((1e12, "trillion"), (1e9, "billion"), (1e6, "million")):
        if ax >= scale:
            return f"{x / scale:,.1f} {word}".replace(".0 ", " ")
    if ax >= 100:
        return f"{x:,.0f}"
    return f"{x:.3g}"


def _pct(share: float) -> str:
    """Return a share as a percentage with enough digits, never rounded up to 0 % or 100 %.

    The number of decimals grows until the shown value is within 0.5 % of both the share and
    its distance to 100 % (so 0.999 is "99.9 %", 0.9994 is "99.94 %", 0.2 is "20 %").
    """
    value = 100.0 * share
    tol = 0.005 * min(abs(value), abs(100.0 - value)) if 0 < share < 1 else 0.0
    for decimals in range(13):
        text = f"{value:.{decimals}f}"
        if abs(float(text) - value) <= tol:
            break
    return f"{text}%"


def _years(y: float) -> str:
    if y < 0.1:
        return f"{y:.2g}"
    return f"{y:,.1f}" if y < 100 else f"{y:,.0f}"


def describe(plan: EvidencePlan) -> list[str]:
    """Return the plan as sentences a non-statistician can read, ending with the caution.

    Parameters
    ----------
    plan
        The evidence plan.

    Returns
    -------
    list of str
        One sentence per figure, then :data:`routerisk.CAUTION`.
    """
    inp = plan.inputs
    u = inp.units
    per = f"{_human(inp.per)} {u}"
    conf = _pct(inp.confidence)
    fleet = (f"{inp.fleet:g} vehicles driving {inp.hours_per_day:g} h a day at "
             f"{inp.speed:g} {u}/h, {DAYS_PER_YEAR} days a year "
             f"({_human(plan.fleet_miles_per_year)} {u} a year)")
    better = (f"which is {_pct(inp.improvement)} better than" if inp.improvement > 0
              else "the same as")
    lines = [
        f"Target: fewer than {plan.target_rate:.4g} events per {per}, {better} the benchmark "
        f"of {inp.benchmark:.4g} per {per}.",
        f"With no event at all, the fleet must drive {_human(plan.miles_no_failure)} {u} to be "
        f"{conf} sure that its rate is below the target"
        + (f" (the binomial form gives {_human(plan.miles_no_failure_binomial)} {u})."
           if plan.miles_no_failure_binomial is not None else "."),
        f"That takes {_years(plan.years_no_failure)} years for {fleet}.",
    ]
    for row in plan.allowed_events:
        if row["events"] == 0:
            continue
        lines.append(
            f"If {row['events']} {'event happens' if row['events'] == 1 else 'events happen'}"
            ", the "
            f"distance grows to {_human(row['miles'])} {u} ({_years(row['years'])} years)."
        )
    if (plan.miles_power is not None and plan.years_power is not None
            and plan.events_power_exact is not None):
        lines.append(
            f"To have a probability of {_pct(inp.power)} of showing, at {conf} confidence, that "
            f"the fleet beats the benchmark when it truly is {_pct(inp.improvement)} better, it "
            f"must drive {_human(plan.miles_power)} {u} ({_years(plan.years_power)} years; exact "
            "Poisson test), and the claim then holds if "
            + (f"no more than {plan.events_power_exact} events happen"
               if plan.events_power_exact else "no event happens")
            + " in that distance."
        )
    if plan.miles_power_normal_approx is not None and plan.years_power_normal_approx is not None:
        lines.append(
            f"The normal approximation of Kalra and Paddock (2016) gives "
            f"{_human(plan.miles_power_normal_approx)} {u} "
            f"({_years(plan.years_power_normal_approx)} years)."
        )
    if plan.power_note:
        lines.append(f"Power figures: {plan.power_note}.")
    if inp.observed is not None:
        if plan.upper_rate is not None:
            verdict = ("is below the target, so the claim is shown" if plan.shown else
                       "is not below the target, so the claim is not shown yet")
            lines.append(
                f"After {_human(inp.observed)} {u} with {inp.events} events, the rate is, "
                f"with {conf} confidence, at most {plan.upper_rate:.4g} per {per}; that "
                f"{verdict}."
            )
        else:
            lines.append(f"Driven so far: {plan.upper_rate_note}; the claim is not shown.")
    def still(row: dict[str, Any]) -> str:
        text = f"still needed {_human(row['still_needed'])} {u}"
        if "still_needed_bonferroni" in row:
            text += (f" (Bonferroni {_human(row['still_needed_bonferroni'])}, "
                     f"Holm {_human(row['still_needed_holm'])})")
        return text + "."

    if plan.by_band is not None:
        m = plan.strata
        lines.append(
            f"Every exposure band and every category must reach the figure separately: each "
            f"needs {_human(plan.miles_no_failure)} {u} with no event of its own"
            + (f"; to state all {m} results at once with {conf} familywise confidence, "
               f"Bonferroni asks "
               f"{_human(plan.by_band[0]['needed_bonferroni'])} {u} of each and Holm between "
               f"that and {_human(plan.miles_no_failure)} {u} (most driven stratum first)."
               if m and plan.by_band and "needed_bonferroni" in plan.by_band[0] else ".")
        )
        for row in plan.by_band:
            lines.append(
                f"  band {row['band']}: driven {_human(row['driven'])} {u} "
                f"({row['share']:.0%} of all), {still(row)}"
            )
    if plan.by_category:
        lines.append("Driving inside the influence of each category:")
        for row in plan.by_category:
            lines.append(
                f"  {row['category']}: driven {_human(row['driven'])} {u} "
                f"({row['share']:.0%} of all), {still(row)}"
            )
    lines.append(CAUTION)
    return lines



def segments_from_drives(net: Any, folder: str | Path) -> pd.DataFrame:
    """Map-match every GPX/GeoJSON/CSV drive in ``folder`` and return its driven segments.

    The frame has one row per driven edge piece with ``drive``, ``length_m``, ``band`` and
    ``infl_<category>`` from the network, the input :func:`distance_by_exposure` takes.
    """
    from . import matching, routes
    from .watch import drive_files

    idx = matching.RoadIndex(net.graph)
    frames = []
    for f in drive_files(folder):
        frames += _drive_segments(net, routes.read_routes(f, default_tz=net.timezone), idx)
    return pd.concat(frames, ignore_index=True)


def segments_of_drives(net: Any, drives: list[Any]) -> pd.DataFrame:
    """Map-match read drives (routes) and return their driven segments.

    The same frame as :func:`segments_from_drives`, for routes already read; each drive is
    named ``<file name>:<route name>``.
    """
    from . import matching

    if not drives:
        raise InputFileError("no drive given", field="drives")
    return pd.concat(_drive_segments(net, drives, matching.RoadIndex(net.graph)),
                     ignore_index=True)


def _drive_segments(net: Any, drives: list[Any], idx: Any) -> list[pd.DataFrame]:
    from . import matching

    edges = net.edges
    cats = net.profile.category_names
    frames = []
    for r in drives:
        m = matching.to_edges(idx, r)
        mi = pd.MultiIndex.from_tuples(list(m.edges), names=edges.index.names)
        pos = edges.index.get_indexer(mi)
        part = pd.DataFrame({
            "drive": f"{Path(r.source).name}:{r.name}",
            "length_m": edges["length"].to_numpy()[pos] * np.asarray(m.fractions),
            "band": edges["band"].to_numpy()[pos],
        })
        for c in cats:
            part[f"infl_{c}"] = edges[f"infl_{c}"].to_numpy()[pos]
        frames.append(part)
    return frames
