"""Plain words for what people read: column headings, a glossary, p-values and local times.

Machine column names stay in CSV, JSON and GeoJSON (README lists them); tables on reports and
the text a command prints use the headings here, and every report ends with the glossary of the
terms that appear on it.
"""

from __future__ import annotations

import datetime as dt
import html
import math
import re
from collections.abc import Iterable

#: headings in words for the machine column names people meet on reports
COLUMNS: dict[str, str] = {
    "rank": "rank (1 = lowest total risk)",
    "name": "route",
    "depart": "departs (local time)",
    "start": "starts (local time)",
    "end": "ends (local time)",
    "length_km": "length (km)",
    "duration_min": "time (min)",
    "risk": "risk (points)",
    "risk_per_km": "risk per km",
    "relative_index": "relative index (1 = area average)",
    "rule_breaks": "hard-rule breaks",
    "crossings": "pedestrian crossings passed",
    "left_turns": "left turns across traffic",
    "street": "street",
    "band": "exposure band",
    "km": "km driven",
    "events": "events",
    "expected": "events expected",
    "eb_rate": "smoothed event rate per km",
    "eb_ratio": "smoothed rate against expected",
    "p_value": "p-value",
    "q_value": "adjusted p-value (q)",
    "exposure_km": "exposure per km",
    "exposure_per_km": "exposure per km",
    "area_km2": "area (km²)",
    "network_km": "network km (both directions)",
    "centreline_km": "street km (each street once)",
    "share_high_bands": "share of km in the busy and intense bands",
    "crossings_per_km": "crossings per km",
    "closed_peak_km": "km closed by rules at the peak hour",
    "closed_peak_hour": "peak closing hour",
    "closed_km_hours_week": "km-hours closed per week",
    "parts_at_peak": "separate open parts at the peak",
    "largest_part_share_at_peak": "share of open km in the largest open part",
    "hotspot_top": "top hot spot",
    "vehicle": "vehicle",
    "repetition": "repetition",
    "route": "route driven",
    "reason": "reason",
    "group": "group",
    "alarm_at": "alarm at",
    "profile": "profile",
    "routerisk_version": "routerisk version",
}

_PATTERNS: tuple[tuple[re.Pattern[str], str], ...] = (
    (re.compile(r"^km_le(\d+)mph$"), r"km at \1 mph or less"),
    (re.compile(r"^km_(\d+)to(\d+)mph$"), r"km at \1-\2 mph"),
    (re.compile(r"^km_gt(\d+)mph$"), r"km above \1 mph"),
    (re.compile(r"^km_(\w+)$"), r"km in the \1 band"),
    (re.compile(r"^share_in_(\w+)$"), r"share of length near \1"),
    (re.compile(r"^sources_(\w+)$"), r"\1 places"),
    (re.compile(r"^risk_(\w+)$"), r"risk from \1"),
    (re.compile(r"^part_(\w+)$"), r"risk from \1"),
    (re.compile(r"^infl_(\w+)$"), r"within reach of \1"),
    (re.compile(r"^exp_(\w+)$"), r"\1 exposure"),
    (re.compile(r"^rule_(\d+)$"), r"covered by hard rule \1"),
    (re.compile(r"^(\w+)_sha256$"), r"\1 checksum"),
)


def heading(column: str) -> str:
    """Return the heading in words for a machine column name (unknown names: spaced)."""
    if column in COLUMNS:
        return COLUMNS[column]
    for pat, words in _PATTERNS:
        if pat.match(column):
            return pat.sub(words, column).replace("_", " ")
    return column.replace("_", " ")


#: short meanings of the terms a reviewer meets; a report lists those it uses
GLOSSARY: dict[str, str] = {
    "risk": "pedestrian exposure along the route weighted by the chance that a pedestrian "
    "struck at the street's speed dies (published impact-speed curves); in points "
    "summed over the route. It ranks routes under one profile; it is not a crash count.",
    "risk per km": "the route's risk divided by its length.",
    "relative index": "the route's risk per km against the average km of the area at the "
    "same minutes under the same profile (1 = average); it cannot be "
    "compared across profiles.",
    "exposure per km": "how much pedestrian presence a street carries per km of it: the "
    "baseline for its road class plus the weighted nearness of schools, "
    "campuses, shops, stops and other places, before the speed weighting.",
    "exposure band": "a class of exposure per km (quiet, moderate, busy, intense) with the "
    "thresholds shown on the legend.",
    "hard rule": "a condition agreed with the community, such as no driving near schools at "
    "school hours; a route that drives a covered street while the rule is in "
    "force breaks it.",
    "hot spot": "a segment that contributes most of a route's or an area's risk.",
    "pedestrian crossings passed": "marked crossings on the segment; a partial segment counts "
    "its share, so a route can pass 2.5 crossings.",
    "separate open parts": "pieces of the street network that can still all be reached from "
    "each other by driving when the rule-closed streets are taken out; "
    "more than one means some streets cannot be reached from others.",
    "smoothed event rate per km": "events per km on a segment pulled towards the rate of "
    "similar segments (empirical Bayes), so a short segment with "
    "one event does not look extreme.",
    "p-value": "the chance of at least this many events if the segment were as safe as "
    "expected; small values point to a real difference.",
    "adjusted p-value (q)": "the p-value adjusted for testing many segments at once "
    "(Benjamini-Hochberg): flagging all segments with q below the "
    "false discovery rate keeps the expected share of false flags "
    "at that rate.",
    "false discovery rate": "the share of flagged segments allowed, on average, to be false "
    "alarms.",
    "CUSUM": "a running sum of events above what is expected, day by day; an alarm sounds "
    "when it crosses a set limit.",
    "in-control run length": "the average number of periods before a chart raises a false "
    "alarm when nothing has changed (ARL).",
    "naive plan": "every run at its earliest start on its planned route, for comparison.",
    "band": "exposure band.",
}

_ISO = re.compile(
    r"^(\d{4})-(\d{2})-(\d{2})T(\d{2}):(\d{2})(?::(\d{2}))?"
    r"(?:\.\d+)?(Z|[+-]\d{2}:\d{2})?$"
)


def p_text(p: float) -> str:
    """Return a p-value as people read it: '< 0.001' rather than '0.000'."""
    if p is None or not math.isfinite(float(p)):
        return ""
    p = float(p)
    if p < 0.001:
        return "< 0.001"
    return f"{p:.3f}"


def when(value: str | dt.datetime) -> str:
    """Return an ISO date-time as people read it: 'Tue 9 Mar 2027 07:15'.

    The time stays in its own zone (the area's local time on every output); anything that is
    not an ISO date-time is returned unchanged.
    """
    if isinstance(value, dt.datetime):
        t = value
    else:
        text = str(value)
        if not _ISO.match(text):
            return text
        try:
            t = dt.datetime.fromisoformat(text.replace("Z", "+00:00"))
        except ValueError:
            return text
        if text.endswith("Z"):  # a stamp in UTC (data dates), not the area's time
            return f"{t:%a} {t.day} {t:%b %Y %H:%M} UTC"
    return f"{t:%a} {t.day} {t:%b %Y %H:%M}"


def is_iso_time(value: object) -> bool:
    """Return whether ``value`` is an ISO date-time string (as outputs write them)."""
    return isinstance(value, str) and bool(_ISO.match(value))


def terms_in(text: str) -> list[str]:
    """Return the glossary terms that appear in ``text`` (whole words, any case)."""
    low = html.unescape(text).lower()
    found = []
    for term in GLOSSARY:
        if re.search(r"(?<![\w-])" + re.escape(term.lower()) + r"(?![\w-])", low):
            found.append(term)
    return found


def glossary_html(terms: Iterable[str]) -> str:
    """Return the 'Words used on this page' block for ``terms`` (escaped)."""
    items = [t for t in dict.fromkeys(terms) if t in GLOSSARY]
    if not items:
        return ""
    rows = "".join(f"<dt>{html.escape(t)}</dt><dd>{html.escape(GLOSSARY[t])}</dd>" for t in items)
    return (
        f'<section id="words"><details open><summary><b>Words used on this page</b>'
        f'</summary><dl class="rr-words">{rows}</dl></details></section>'
    )


_COMPASS = (
    "north",
    "north-east",
    "east",
    "south-east",
    "south",
    "south-west",
    "west",
    "north-west",
)


class Blocks:
    """Tell street segments of one name apart: direction of travel and the streets between.

    Parameters
    ----------
    edges
        The network's edges (GeoDataFrame in a projected CRS, indexed by ``(u, v, key)``,
        with a ``name`` column).
    """

    def __init__(self, edges: object) -> None:
        import numpy as np

        e = edges  # a GeoDataFrame; typed loosely to keep this module light
        idx = e.index  # type: ignore[attr-defined]
        names = e["name"].fillna("").astype(str).to_numpy()  # type: ignore[index]
        u = idx.get_level_values(0).to_numpy()
        v = idx.get_level_values(1).to_numpy()
        at: dict[int, set[str]] = {}
        for a, b, n in zip(u, v, names, strict=True):
            if n:
                at.setdefault(int(a), set()).add(n)
                at.setdefault(int(b), set()).add(n)
        self._at = at
        self._row = {(int(a), int(b), int(k)): i for i, (a, b, k) in enumerate(idx)}
        geoms = e.geometry.to_numpy()  # type: ignore[attr-defined]
        import shapely

        first = shapely.get_point(geoms, 0)
        last = shapely.get_point(geoms, -1)
        dx = shapely.get_x(last) - shapely.get_x(first)
        dy = shapely.get_y(last) - shapely.get_y(first)
        self._bearing = np.degrees(np.arctan2(dx, dy)) % 360.0
        self._names = names

    def _cross(self, node: int, own: str) -> str:
        others = sorted(self._at.get(int(node), set()) - {own})
        return others[0] if others else ""

    def label(self, u: int, v: int, key: int = 0) -> str:
        """Return e.g. 'Hobbin Street, eastbound, Bosky Lane to Quarry Lane'."""
        i = self._row.get((int(u), int(v), int(key)))
        if i is None:
            return ""
        own = self._names[i] or "unnamed street"
        way = _COMPASS[int(((self._bearing[i] + 22.5) % 360.0) // 45.0)] + "bound"
        a, b = self._cross(u, own), self._cross(v, own)
        between = f", {a} to {b}" if a and b else f", from {a}" if a else f", to {b}" if b else ""
        return f"{own}, {way}{between}"
