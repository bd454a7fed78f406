"""Tell an evidence plan in plain sentences.

:func:`describe` explains every number of an :class:`~routerisk.analysis.evidence.plan.EvidencePlan`
in a sentence and ends with the caution; the helpers format counts, shares and years the way
people read them (``_pct`` gives "under 1%" rather than "0%" for a small share).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from routerisk import CAUTION
from routerisk.analysis.evidence.formulas import DAYS_PER_YEAR

if TYPE_CHECKING:
    from routerisk.analysis.evidence.plan import EvidencePlan


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


def _share_text(share: float) -> str:
    """Return a share of distance in whole percent, never a driven share as '0%'."""
    if 0 < share < 0.005:
        return "under 1%"
    if 0.995 < share < 1:
        return "over 99%"
    return f"{share:.0%}"


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
    fleet = (
        f"{inp.fleet:g} vehicles driving {inp.hours_per_day:g} h a day at "
        f"{inp.speed:g} {u}/h, {DAYS_PER_YEAR} days a year "
        f"({_human(plan.fleet_miles_per_year)} {u} a year)"
    )
    better = (
        f"which is {_pct(inp.improvement)} better than" if inp.improvement > 0 else "the same as"
    )
    lines = [
        f"Target: fewer than {plan.target_rate:.4g} events per {per}, {better} the benchmark "
        f"of {inp.benchmark:.4g} per {per}.",
        f"With no event at all, the fleet must drive {_human(plan.miles_no_failure)} {u} to be "
        f"{conf} sure that its rate is below the target"
        + (
            f" (the binomial form gives {_human(plan.miles_no_failure_binomial)} {u})."
            if plan.miles_no_failure_binomial is not None
            else "."
        ),
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
    if (
        plan.miles_power is not None
        and plan.years_power is not None
        and plan.events_power_exact is not None
    ):
        lines.append(
            f"To have a probability of {_pct(inp.power)} of showing, at {conf} confidence, that "
            f"the fleet beats the benchmark when it truly is {_pct(inp.improvement)} better, it "
            f"must drive {_human(plan.miles_power)} {u} ({_years(plan.years_power)} years; exact "
            "Poisson test), and the claim then holds if "
            + (
                f"no more than {plan.events_power_exact} events happen"
                if plan.events_power_exact
                else "no event happens"
            )
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
            verdict = (
                "is below the target, so the claim is shown"
                if plan.shown
                else "is not below the target, so the claim is not shown yet"
            )
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
            text += (
                f" (Bonferroni {_human(row['still_needed_bonferroni'])}, "
                f"Holm {_human(row['still_needed_holm'])})"
            )
        return text + "."

    if plan.by_band is not None:
        m = plan.strata
        lines.append(
            f"Every exposure band and every category must reach the figure separately: each "
            f"needs {_human(plan.miles_no_failure)} {u} with no event of its own"
            + (
                f"; to state all {m} results at once with {conf} familywise confidence, "
                f"Bonferroni asks "
                f"{_human(plan.by_band[0]['needed_bonferroni'])} {u} of each and Holm between "
                f"that and {_human(plan.miles_no_failure)} {u} (most driven stratum first)."
                if m and plan.by_band and "needed_bonferroni" in plan.by_band[0]
                else "."
            )
        )
        for row in plan.by_band:
            lines.append(
                f"  band {row['band']}: driven {_human(row['driven'])} {u} "
                f"({_share_text(row['share'])} of all), {still(row)}"
            )
    if plan.by_category:
        lines.append("Driving inside the influence of each category:")
        for row in plan.by_category:
            lines.append(
                f"  {row['category']}: driven {_human(row['driven'])} {u} "
                f"({_share_text(row['share'])} of all), {still(row)}"
            )
    lines.append(CAUTION)
    return lines
