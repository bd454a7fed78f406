"""Parse OSM ``maxspeed`` values to km/h (see the OSM wiki page Key:maxspeed).

Handles bare numbers (km/h), ``mph`` and ``knots`` units, ``km/h``/``kmh``/``kph``, decimal
commas, per-lane lists (``50|30``) and alternatives (``50;30``), ``walk``, ``none`` and
zone codes such as ``DE:urban``, ``DE:zone30`` or ``GB:nsl_single``. Values that carry no
number (``signals``, ``variable``, unknown zone codes) return None so the speed is imputed
from the road class by :func:`osmnx.routing.add_edge_speeds`.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable

MPH = 1.609344
KNOT = 1.852

#: Walking pace, for ``maxspeed=walk`` (the OSM wiki: "walking pace", 4-7 km/h; upper end).
WALK_KPH = 7.0
#: ``maxspeed=none`` (no limit): the speed assumed for severity and travel time (advisory
#: speed on unrestricted motorways, common practice, no source).
NONE_KPH = 130.0

# Zone codes by their type part; a country prefix is accepted for all of them.
# Values from the OSM wiki's table of implicit speed limits (from memory).
_ZONE_KPH = {
    "urban": 50.0,
    "rural": 90.0,
    "motorway": 130.0,
    "trunk": 100.0,
    "living_street": WALK_KPH,
    "walk": WALK_KPH,
    "bicycle_road": 30.0,
    "school": 30.0,
}
_COUNTRY_ZONE_KPH = {
    ("DE", "rural"): 100.0,
    ("DE", "motorway"): NONE_KPH,
    ("FR", "rural"): 80.0,
    ("AT", "rural"): 100.0,
    ("CH", "rural"): 80.0,
    ("CH", "motorway"): 120.0,
    ("IT", "rural"): 90.0,
    ("RU", "urban"): 60.0,
    ("GB", "nsl_single"): 60 * MPH,
    ("GB", "nsl_dual"): 70 * MPH,
    ("GB", "motorway"): 70 * MPH,
    ("UK", "nsl_single"): 60 * MPH,
    ("UK", "nsl_dual"): 70 * MPH,
    ("UK", "motorway"): 70 * MPH,
}
_NUMBER = re.compile(r"^\s*([0-9]+(?:[.,][0-9]+)?)\s*(km/h|kmh|kph|mph|knots)?\s*$", re.I)
_ZONE = re.compile(r"^([A-Za-z]{2}):(?:zone:?)?([A-Za-z_]*)([0-9]*)$")


def parse_one(value: str) -> float | None:
    """Return km/h for a single maxspeed token, or None when it gives no number."""
    v = value.strip()
    if not v:
        return None
    low = v.lower()
    if low == "walk":
        return WALK_KPH
    if low == "none":
        return NONE_KPH
    m = _NUMBER.match(v)
    if m:
        num = float(m.group(1).replace(",", "."))
        unit = (m.group(2) or "").lower()
        if not math.isfinite(num) or num <= 0:
            return None
        return num * (MPH if unit == "mph" else KNOT if unit == "knots" else 1.0)
    z = _ZONE.match(v)
    if z:
        country, kind, digits = z.group(1).upper(), z.group(2).lower(), z.group(3)
        if digits and kind in ("", "zone"):
            unit = MPH if country in ("GB", "UK", "US") else 1.0
            return float(digits) * unit
        kind = kind.rstrip(":")
        if (country, kind) in _COUNTRY_ZONE_KPH:
            return _COUNTRY_ZONE_KPH[(country, kind)]
        return _ZONE_KPH.get(kind)
    return None


def parse_maxspeed(value: str | Iterable[str] | float | None) -> float | None:
    """Return km/h for an OSM maxspeed value (or a list of them after simplification).

    Several values (per lane ``|``, alternatives ``;`` or merged ways) give the highest,
    since the severity of a strike grows with speed and the highest is the cautious choice.
    """
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return None
    tokens: list[str] = []
    if isinstance(value, str):
        tokens = re.split(r"[|;]", value)
    elif isinstance(value, int | float):
        return float(value) if value > 0 else None
    else:
        for item in value:
            if isinstance(item, str):
                tokens.extend(re.split(r"[|;]", item))
    speeds = [s for s in (parse_one(t) for t in tokens) if s is not None]
    return max(speeds) if speeds else None
