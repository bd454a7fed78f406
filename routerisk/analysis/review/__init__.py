"""Area review for local agencies: what a proposed test area's streets run past, and when.

For each area (a polygon of a GeoJSON or GeoPackage file) the review clips the tagged network
to the polygon in the network's projected CRS and reports:

* the length of its network, by exposure band, inside each category's influence, by speed
  band, and the crossings per km; the exposure sources inside the area or within a category's
  radius of it;
* the hot spots (street segments with the most exposure, and why) and the clusters of adjacent
  high-band streets;
* under the profile's hard rules, the km closed in each hour of a typical week and whether the
  streets left open still form one strongly connected network (at the hour with the most
  closed km, at a chosen time, and with nothing closed);
* optional what-ifs: the same figures with a rule switched off (or put in force at all hours)
  or a category weight changed.

Lengths
-------
``network_km`` counts **directed edges**: each direction of a two-way street counts once, so a
100 m two-way street adds 0.2 km (the length a vehicle may drive). ``centreline_km`` counts
each street once. The clipped length of an edge is its ``length`` times the share of its
geometry inside the polygon (projected CRS), so an edge wholly inside counts exactly its
network length.

Hours
-----
Hour ``h`` (0 = Monday 00:00-01:00, 167 = Sunday 23:00-24:00) is in the network's local time
zone. An edge is closed in an hour when any hard rule covering it is in force at any minute of
that hour.

Submodules
----------
- :mod:`~routerisk.analysis.review.basis`: the constants, the notes on how lengths, hours and
  influence are counted, and small shared helpers;
- :mod:`~routerisk.analysis.review.whatif`: what-ifs (:func:`parse_what_if`,
  :func:`apply_what_if`) and times of the week (:func:`parse_time`, :func:`minute_label`);
- :mod:`~routerisk.analysis.review.clip`: :func:`clip_edges`;
- :mod:`~routerisk.analysis.review.connectivity`: :func:`connectivity` under the hard rules;
- :mod:`~routerisk.analysis.review.hotspots`: hot spots and clusters of high-band streets;
- :mod:`~routerisk.analysis.review.areas_summary`: the figures of one area;
- :mod:`~routerisk.analysis.review.result`: :func:`review_areas`, :class:`Review` and
  :func:`comparison_table`.

The area file is read by :func:`routerisk.io.areas.read_areas` (re-exported here with
:class:`~routerisk.io.areas.Area`). The map, the HTML report and the files are drawn and
written by :mod:`routerisk.render.review_map`, :mod:`routerisk.render.review_report` and
:mod:`routerisk.render.review_files`; their public names (:func:`review_map`,
:func:`review_html`, :func:`review_csv`, :func:`write_review`, ``HOTSPOT_COLOUR``) are still
reachable here, imported on first use, since the render modules import this package.
"""

from __future__ import annotations

import importlib
from typing import Any

from routerisk.analysis.review.basis import (
    HOUR_BASIS,
    HOURS_PER_WEEK,
    INFLUENCE_BASIS,
    KPH_PER_MPH,
    LENGTH_BASIS,
    MIN_CLIP_M,
    SPEED_BANDS_MPH,
)
from routerisk.analysis.review.clip import clip_edges
from routerisk.analysis.review.connectivity import connectivity
from routerisk.analysis.review.hotspots import high_bands_from
from routerisk.analysis.review.result import Review, comparison_table, review_areas
from routerisk.analysis.review.whatif import (
    Change,
    WhatIf,
    apply_what_if,
    minute_label,
    parse_time,
    parse_what_if,
)
from routerisk.io.areas import Area, read_areas

__all__ = [
    "HOUR_BASIS",
    "HOURS_PER_WEEK",
    "INFLUENCE_BASIS",
    "KPH_PER_MPH",
    "LENGTH_BASIS",
    "MIN_CLIP_M",
    "SPEED_BANDS_MPH",
    "Area",
    "Change",
    "Review",
    "WhatIf",
    "apply_what_if",
    "clip_edges",
    "comparison_table",
    "connectivity",
    "high_bands_from",
    "minute_label",
    "parse_time",
    "parse_what_if",
    "read_areas",
    "review_areas",
]

#: Names that moved to routerisk.render, found there on first use (importing them here at load
#: time would make a cycle: the render modules import this package).
_RENDERED = {
    "HOTSPOT_COLOUR": "routerisk.render.review_map",
    "review_map": "routerisk.render.review_map",
    "review_html": "routerisk.render.review_report",
    "review_csv": "routerisk.render.review_files",
    "write_review": "routerisk.render.review_files",
}


def __getattr__(name: str) -> Any:
    """Return a name that moved to ``routerisk.render`` (imported on first use)."""
    if name in _RENDERED:
        return getattr(importlib.import_module(_RENDERED[name]), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
