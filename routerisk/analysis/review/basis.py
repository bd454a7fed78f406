"""Constants, notes and small helpers that every part of the area review shares.

The notes (:data:`LENGTH_BASIS`, :data:`HOUR_BASIS`, :data:`INFLUENCE_BASIS`) say how the
figures are counted; they go into the JSON document and the HTML report alike.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from typing import Any

import numpy as np

KPH_PER_MPH = 1.609344


#: Speed bands (upper bound in mph, inclusive; label). Speeds are the edges' ``speed_kph``.
SPEED_BANDS_MPH = (
    (25.0, "<= 25 mph", "le25mph"),
    (35.0, "26-35 mph", "26to35mph"),
    (45.0, "36-45 mph", "36to45mph"),
    (math.inf, "> 45 mph", "gt45mph"),
)


HOURS_PER_WEEK = 168


#: Clipped pieces shorter than this (m) are boundary touches, not streets in the area.
MIN_CLIP_M = 1e-3


LENGTH_BASIS = (
    "network_km and every km figure count directed edges: each direction of a two-way street "
    "counts once (what a vehicle may drive); centreline_km counts each street once."
)


HOUR_BASIS = (
    "closed_km_by_hour has 168 values, hour 0 = Monday 00:00-01:00 local time of the network; "
    "an edge is closed in an hour if any hard rule covering it is in force at any minute of "
    "that hour. exposure_by_hour applies each category's time profile, and the baseline's "
    "and the crossings' time profiles when the profile gives them (hour means of the "
    "minute multipliers)."
)


INFLUENCE_BASIS = (
    "km_in_influence = clipped length x the edge's share of length inside the category's "
    "influence (infl_<category>, measured on the whole edge)."
)


def _street_key(u: np.ndarray, v: np.ndarray, length: np.ndarray) -> list[tuple[Any, ...]]:
    """Return a key shared by the two directions of a two-way street segment."""
    lo = np.minimum(u, v)
    hi = np.maximum(u, v)
    return list(zip(lo.tolist(), hi.tolist(), np.round(length, 1).tolist(), strict=True))


def _r(x: float, digits: int = 4) -> float:
    v = round(float(x), digits)
    return 0.0 if v == 0 else v


def _jsonable(x: Any) -> Any:
    if isinstance(x, np.integer):
        return int(x)
    if isinstance(x, np.floating):
        return float(x)
    return x


def _names_by_km(names: Iterable[str], km: Iterable[float], limit: int = 6) -> list[str]:
    tally: dict[str, float] = {}
    for nm, k in zip(names, km, strict=True):
        nm = str(nm or "").strip()
        if nm:
            tally[nm] = tally.get(nm, 0.0) + float(k)
    return [n for n, _ in sorted(tally.items(), key=lambda t: (-t[1], t[0]))][:limit]
