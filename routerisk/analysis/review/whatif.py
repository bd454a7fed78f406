"""What-ifs of the area review (a rule switched off or on, a weight changed) and times of the week.

:func:`parse_what_if` reads the SPECs of one scenario, :func:`apply_what_if` makes the changed
profile, :func:`_compare` sets a scenario's figures of an area beside the base figures;
:func:`parse_time` and :func:`minute_label` read and write ``'wed 08:15'``.
"""

from __future__ import annotations

import dataclasses
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from routerisk._cli_text import WHAT_IF_HELP  # also shown by review --help
from routerisk.analysis.review.basis import _r
from routerisk.errors import OptionError
from routerisk.profile import DAYS, MAX_FACTOR, MINUTES_PER_WEEK, Profile
from routerisk.render import report


@dataclass(frozen=True)
class Change:
    """One change of a what-if: ``rule`` (value ``off`` / ``on``) or ``weight`` (a number)."""

    kind: str
    target: str
    value: str | float
    spec: str


@dataclass(frozen=True)
class WhatIf:
    """A scenario: changes applied together to a copy of the profile."""

    label: str
    changes: tuple[Change, ...]


def parse_what_if(specs: Sequence[str], profile: Profile, *, option: str = "--what-if") -> WhatIf:
    """Parse the SPECs of one scenario against ``profile``.

    Raises
    ------
    OptionError
        A SPEC is malformed or names an unknown rule or category.
    """
    changes = []
    if not specs:
        raise OptionError("needs at least one SPEC", field=option)
    rule_names = [r.name for r in profile.rules]
    for spec in specs:
        kind, sep, rest = spec.partition(":")
        target, eq, value = rest.rpartition("=")
        kind, target, value = kind.strip().lower(), target.strip(), value.strip()
        if not sep or not eq or not target:
            raise OptionError(f"bad SPEC {spec!r}; {WHAT_IF_HELP}", field=option)
        if kind == "rule":
            if target not in rule_names:
                known = ", ".join(repr(n) for n in rule_names) or "none"
                raise OptionError(
                    f"unknown rule {target!r} in {spec!r}; the profile's rules: {known}",
                    field=option,
                )
            if value.lower() not in ("off", "on"):
                raise OptionError(
                    f"a rule is set 'off' or 'on', got {value!r} in {spec!r}", field=option
                )
            changes.append(Change("rule", target, value.lower(), spec))
        elif kind == "weight":
            if target not in profile.category_names:
                raise OptionError(
                    f"unknown category {target!r} in {spec!r}; categories: "
                    f"{', '.join(profile.category_names)}",
                    field=option,
                )
            try:
                w = float(value)
            except ValueError:
                raise OptionError(
                    f"weight must be a number, got {value!r} in {spec!r}", field=option
                ) from None
            if not math.isfinite(w) or w < 0 or w > MAX_FACTOR:
                raise OptionError(
                    f"weight must be a finite number >= 0 and <= {MAX_FACTOR:g}, got {value!r}",
                    field=option,
                )
            changes.append(Change("weight", target, w, spec))
        else:
            raise OptionError(f"unknown kind {kind!r} in {spec!r}; {WHAT_IF_HELP}", field=option)
    return WhatIf(" ".join(specs), tuple(changes))


def apply_what_if(profile: Profile, what_if: WhatIf) -> Profile:
    """Return a copy of the frozen ``profile`` with the scenario's changes applied."""
    rules = list(profile.rules)
    cats = list(profile.categories)
    for ch in what_if.changes:
        if ch.kind == "rule":
            if ch.value == "off":
                rules = [r for r in rules if r.name != ch.target]
            else:
                rules = [
                    dataclasses.replace(r, windows=()) if r.name == ch.target else r for r in rules
                ]
        else:
            cats = [
                dataclasses.replace(c, weight=float(ch.value)) if c.name == ch.target else c
                for c in cats
            ]
    return dataclasses.replace(profile, rules=tuple(rules), categories=tuple(cats))


_AT = re.compile(r"^\s*([a-z]{3})[a-z]*[\s@T_-]*(\d{1,2}):(\d{2})\s*$", re.IGNORECASE)


def parse_time(text: str, *, option: str = "--at") -> int:
    """Return the minute of the week of ``'wed 08:15'`` (Monday 00:00 = 0, local time)."""
    mt = _AT.match(text)
    if not mt or mt.group(1).lower() not in DAYS:
        raise OptionError(
            f"must be a day and a time such as 'wed 08:15', got {text!r}", field=option
        )
    hh, mm = int(mt.group(2)), int(mt.group(3))
    if hh > 23 or mm > 59:
        raise OptionError(f"time out of range in {text!r}", field=option)
    return DAYS.index(mt.group(1).lower()) * 1440 + hh * 60 + mm


def minute_label(minute: int) -> str:
    """Return ``'Wed 08:15'`` for a minute of the week."""
    m = int(minute) % MINUTES_PER_WEEK
    return f"{report.DAY_LABELS[m // 1440]} {(m % 1440) // 60:02d}:{m % 60:02d}"


def _compare(base: dict[str, Any], new: dict[str, Any]) -> dict[str, Any]:
    def delta(key: str) -> float:
        return _r(new[key] - base[key])

    bands = sorted(set(base["km_by_band"]) | set(new["km_by_band"]))
    return {
        "name": new["name"],
        "closed_km_hours": new["closed_km_hours"],
        "closed_km_hours_change": _r(new["closed_km_hours"] - base["closed_km_hours"], 3),
        "closed_peak_km": new["closed_peak"]["km"],
        "closed_peak_km_change": _r(new["closed_peak"]["km"] - base["closed_peak"]["km"]),
        "closed_km_by_hour": new["closed_km_by_hour"],
        "closed_km_by_hour_change": [
            _r(a - b)
            for a, b in zip(new["closed_km_by_hour"], base["closed_km_by_hour"], strict=True)
        ],
        "closed_km_by_rule": new["closed_km_by_rule"],
        "exposure": new["exposure"],
        "exposure_change": delta("exposure"),
        "km_by_band": new["km_by_band"],
        "km_by_band_change": {
            b: _r(new["km_by_band"].get(b, 0.0) - base["km_by_band"].get(b, 0.0)) for b in bands
        },
        "km_in_high_bands": new["km_in_high_bands"],
        "km_in_high_bands_change": delta("km_in_high_bands"),
        "allowed_parts_count": len(new["allowed_parts"]),
        "allowed_parts_count_change": len(new["allowed_parts"]) - len(base["allowed_parts"]),
    }
