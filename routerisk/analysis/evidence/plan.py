"""Validated evidence inputs and the plan that answers them.

:class:`EvidenceInputs` checks the user's benchmark, improvement, confidence, power, units,
fleet and observations; :func:`plan_evidence` computes every distance of
:mod:`routerisk.analysis.evidence.formulas` into an :class:`EvidencePlan`, with its warnings, and
:meth:`EvidencePlan.with_exposure` adds the exposure-stratified tables of
:mod:`routerisk.analysis.evidence.exposure` (Bonferroni and Holm adjusted). The plan reports rates
per the user's ``per`` distance.
"""

from __future__ import annotations

import logging
import math
from dataclasses import asdict, dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from routerisk.analysis.evidence.exposure import ExposureEvidence
from routerisk.analysis.evidence.formulas import (
    MAX_ALLOWED_EVENTS,
    METRES_PER_UNIT,
    NORMAL_GAP,
    SURPRISE_P,
    distance_allowed_events,
    distance_power_exact,
    distance_power_normal,
    distance_zero_events,
    distance_zero_events_binomial,
    fleet_distance_per_year,
    upper_rate,
)
from routerisk.errors import OptionError
from routerisk.render.evidence_text import _pct

# The package's logger, so that log lines name ``routerisk.analysis.evidence`` as before the split.
logger = logging.getLogger(__package__)


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
                raise OptionError(
                    f"must be between 0 and 1 (exclusive), got {value:g}", field=option
                )
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
                raise OptionError(
                    f"{events} events in a distance of 0 is impossible; give the "
                    "distance driven with --observed",
                    field="--events",
                )
            put(self, "events", events)
        allowed = [
            _count(k, "--allowed-events", limit=MAX_ALLOWED_EVENTS) for k in self.allowed_events
        ]
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
        strata = _adjust_strata(
            by_band + by_category, self.inputs.target_per_unit, self.inputs.confidence
        )
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
        row.update(
            needed=needed,
            needed_bonferroni=bonf,
            needed_holm=holm,
            still_needed_bonferroni=max(bonf - driven, 0.0),
            still_needed_holm=max(holm - driven, 0.0),
        )
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
        note = (
            "with no improvement the target equals the benchmark, so no amount of "
            "driving gives power to show an improvement; power figures are not defined"
        )
    else:
        normal_n = distance_power_normal(lam0, lam1, c, inputs.power)
        normal_years = normal_n / per_year
        exact = distance_power_exact(lam0, lam1, c, inputs.power)
        if exact is None:
            note = (
                "the improvement is too small for the exact power search; only the normal "
                "approximation is given"
            )
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
                    "use the exact figure"
                )

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
                    "--benchmark and --per"
                )
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
        plan.target_rate,
        inputs.per,
        inputs.units,
        n0,
        inputs.units,
        plan.years_no_failure,
    )
    return plan
