"""The test-distance formulas: exact Poisson limits and the power of the test.

The claim is "the automated fleet's event rate is below a target", where the target is a
benchmark rate (for example human-driver deaths per distance) made better by an improvement
share. The formulas answer four questions:

1. How far must the fleet drive with no event at all to be confident, at level ``C``, that its
   rate is below the target? Exact Poisson answer ``-ln(1 - C) / target``
   (``= chi2.ppf(C, 2) / (2 target)``), with the binomial form ``ln(1 - C) / ln(1 - r)`` of
   Kalra and Paddock (2016) beside it (:func:`distance_zero_events`,
   :func:`distance_zero_events_binomial`).
2. The same when ``k`` events are allowed: ``chi2.ppf(C, 2k + 2) / (2 target)``, from the exact
   upper limit of a Poisson mean (Garwood 1936; :func:`distance_allowed_events`).
3. How far must it drive to have probability ``P`` (the power) of showing, at confidence ``C``,
   that it beats the benchmark, when its true rate equals the target? A normal approximation
   (the Kalra and Paddock figure, :func:`distance_power_normal`) and the exact Poisson test
   (:func:`distance_power_exact`).
4. Given ``M`` distance driven with ``K`` events, what is the exact one-sided upper limit of the
   rate (:func:`upper_rate`), and is it below the target?

All rates here are events per unit distance (per mile or per kilometre);
:func:`fleet_distance_per_year` turns distances into fleet-years.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np
from scipy import stats

from routerisk.errors import OptionError

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
        raise AssertionError(
            f"exact power distance {distance:g} below the zero-event distance {floor:g}"
        )
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
