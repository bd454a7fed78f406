"""Saying why no alternative met every bound, what to change, and rule-free departures."""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from routerisk.analysis.alternatives.result import HARD_RULES, Candidate
from routerisk.analysis.scoring import RouteScore, Scorer
from routerisk.profile import MINUTES_PER_WEEK

#: Where nothing within the bounds lowers the risk, candidates up to this many times the
#: plan's travel time are searched to show the best one that breaks the fewest bounds.
RELAXED_TIME_FACTOR = 3.0


@dataclass
class Why:
    """Plain sentences: why nothing met every bound (reasons) and what to change (steps)."""

    reasons: list[str] = field(default_factory=list)
    steps: list[str] = field(default_factory=list)


#: the bounds a candidate can break, as the explanation counts them
_BOUND_WORDS = {
    HARD_RULES: "pass a rule zone while its rule is in force and no detour avoids it",
    "extra time": "take longer than the time bound",
    "extra length": "are longer than the length bound",
    "difference from the plan": "share too much of the plan",
    "lower risk": "do not lower the risk",
}


def why_none(
    plan: RouteScore,
    within: list[Candidate],
    every: list[Candidate],
    joined: bool,
    max_extra_time: float,
) -> Why:
    """Explain in plain sentences why no candidate met every bound, and what to change."""
    why = Why()
    if not joined:
        why.reasons.append(
            "no route joins the start, the via points and the end within "
            f"the time bound (+{100 * max_extra_time:.0f} % of the plan's "
            "time)"
        )
    plan_rows = plan.segments["_pos"].to_numpy(dtype=np.int64).tobytes()
    only_plan = bool(within) and all(c.rows.tobytes() == plan_rows for c in within)
    if only_plan:
        why.reasons.append("the only route found within the time bound is the plan itself")
        within = []
    others = [c for c in every if c.rows.tobytes() != plan_rows]
    if joined and not others and len(plan.segments) > 2:
        why.steps.append(
            f"no other route was found within {RELAXED_TIME_FACTOR:g} times "
            "the plan's time either: the streets here leave no other way; "
            "move the start or the end, or add via points elsewhere"
        )
    n = len(within)
    if n:
        counts = {b: sum(b in c.broken for c in within) for b in _BOUND_WORDS}
        parts = [f"{k} {_BOUND_WORDS[b]}" for b, k in counts.items() if k]
        why.reasons.append(
            f"{n} candidate route{'s' if n != 1 else ''} within the time bound: " + "; ".join(parts)
        )
        if counts[HARD_RULES] == n:
            why.reasons.append(
                "no path within the time bound avoids the rule zones while their rules are in force"
            )
    elif only_plan:
        pass
    elif joined and every and all(HARD_RULES in c.broken for c in every):
        why.reasons.append(
            "no path within the time bound avoids the rule zones while "
            "their rules are in force: each one is closed on every way "
            "through"
        )
    elif joined and plan.segments is not None and len(plan.segments) <= 2:
        why.reasons.append(
            "the route drives only its partial first and last edges, which "
            "every alternative keeps: there is no part to change"
        )
    elif joined:
        why.reasons.append("the search found no candidate route within the time bound")
    # the least extra time at which a rule-abiding, lower-risk, different route exists
    ok = [c for c in every if not set(c.broken) - {"extra time"} and "extra time" in c.broken]
    if ok:
        best = min(ok, key=lambda c: c.minutes)
        need = best.minutes / plan.duration_min - 1.0 if plan.duration_min else 0.0
        share = float(np.ceil(need * 100.0 + 1e-9) / 100.0)
        why.steps.append(
            f"a rule-abiding alternative with lower risk needs more time: "
            f"--max-extra-time {share:.2f} (it takes {best.minutes:.1f} min "
            f"against the plan's {plan.duration_min:.1f})"
        )
    elif every and all(
        "difference from the plan" in c.broken
        for c in every
        if HARD_RULES not in c.broken and "lower risk" not in c.broken
    ):
        if any(HARD_RULES not in c.broken and "lower risk" not in c.broken for c in every):
            why.steps.append(
                "lower-risk routes exist but share most of the plan: a "
                "smaller --min-difference would show them"
            )
    return why


def ends_in_force(plan: RouteScore, head: int, tail: int) -> str:
    """Return a sentence when the fixed partial start or end lies in a rule zone in force."""
    if not plan.rule_breaks or not (head or tail):
        return ""
    seq = plan.segments["seq"].to_numpy()
    last = int(seq[-1]) if len(seq) else -1
    fixed = {0: "starts"} if head else {}
    if tail:
        fixed[last] = "ends"
    said = []
    for b in plan.rule_breaks:
        i = _seq_of(plan, b)
        if i in fixed:
            said.append(
                f"the route {fixed.pop(i)} on {b['street'] or 'an unnamed street'}"
                f" inside the zone of the rule '{b['rule']}' while it is in force"
            )
    if not said:
        return ""
    return (
        "; ".join(said) + ": every route from this start or to this end breaks it "
        "there, the alternatives too"
    )


def rule_free_departures(
    scorer: Scorer, rows: np.ndarray, frac: np.ndarray, depart: dt.datetime
) -> dict[str, dt.datetime | None]:
    """Return the nearest departures at which the planned route breaks no hard rule.

    Earlier and later, in whole minutes of shift, within a week.
    """
    sc = scorer
    minutes = sc._timeline(rows, depart, frac)[5]
    bad = np.zeros(MINUTES_PER_WEEK, dtype=bool)
    for r in range(len(sc.profile.rules)):
        for m in np.unique(minutes[sc.rule_cover[rows, r]]):
            bad |= np.roll(sc.rule_time[r], -int(m))  # bad[d]: in force at m + d
    shift = np.arange(1, MINUTES_PER_WEEK)
    later = shift[~bad[shift]]
    earlier = shift[~bad[(MINUTES_PER_WEEK - shift) % MINUTES_PER_WEEK]]
    local = depart.astimezone(sc.tz)
    return {
        "earlier": (local - dt.timedelta(minutes=int(earlier[0]))) if len(earlier) else None,
        "later": (local + dt.timedelta(minutes=int(later[0]))) if len(later) else None,
    }


def _seq_of(plan: RouteScore, brk: dict[str, Any]) -> int:
    """Return the position in the route of the edge a rule-break record names."""
    seg = plan.segments
    u, v, k = brk["edge"]
    hit = seg.index[
        (seg["u"] == u) & (seg["v"] == v) & (seg["key"] == k) & (seg["time"] == brk["time"])
    ]
    return int(seg.loc[hit[0], "seq"]) if len(hit) else -1


def departure_step(deps: dict[str, dt.datetime | None], depart: dt.datetime) -> str:
    """Say the nearest departures at which the planned route breaks no hard rule."""
    said = [
        f"at {_readable(t)} ({_shift(t - depart)} {w})"
        for w, t in (("later", deps["later"]), ("earlier", deps["earlier"]))
        if t
    ]
    if not said:
        return "no departure in the week avoids the rules on this route"
    return "the planned route breaks no hard rule if it departs " + " or ".join(said)


def _shift(d: dt.timedelta) -> str:
    """Return a shift of departure in words: '1 h 5 min'."""
    mins = abs(int(round(d.total_seconds() / 60.0)))
    days, rest = divmod(mins, 1440)
    h, m = divmod(rest, 60)
    words = [f"{days} d"] * bool(days) + [f"{h} h"] * bool(h) + [f"{m} min"] * bool(m)
    return " ".join(words) or "0 min"


def _readable(t: dt.datetime) -> str:
    """Return a departure as people read it: 'Tue 9 Mar 2027 09:01 (UTC-03:00)'."""
    off = t.utcoffset() or dt.timedelta(0)
    mins = int(off.total_seconds() // 60)
    sign = "+" if mins >= 0 else "-"
    return f"{t:%a} {t.day} {t:%b %Y %H:%M} (UTC{sign}{abs(mins) // 60:02d}:{abs(mins) % 60:02d})"
