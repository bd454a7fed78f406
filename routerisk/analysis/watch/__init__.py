"""Early warnings: match logged safety events to the segments driven, rate them, flag them.

Events (interventions, hard braking, near misses) are placed on the segment the vehicle was
on at the event's time: the drive whose recorded trace covers that time, its map-matched edge
at the nearest fix in time. Events off the driven route, outside every drive's time span, or
with bad coordinates or times are reported and left out, never matched silently.

Units of discovery: a street block (``unit="block"``: both directions of an edge pair and the
run of same-named edges between intersections, merged) or a directed segment
(``unit="segment"``). Per unit: events and km (in total and per direction), the expected count
given the fleet's overall rate and the unit's modelled pedestrian exposure
(``expected="modelled"``) or its km alone (``expected="distance"``; both are always computed and
the units where their flags differ are marked), the empirical Bayes rate (Hauer 1997), a p-value
and Benjamini-Hochberg flags. The p-value is the exact Poisson tail or, when the counts are
over-dispersed (likelihood-ratio test against a negative binomial, ``test="auto"``) or when
asked (``test="negbin"``), the tail of the negative binomial prior predictive.

Per group (street, exposure band or hour of week) and day: a Poisson CUSUM (Page 1954; Lucas
1985). Each drive's km are split by the time each edge was driven (a drive across 09:00 puts
its km before nine in the 08 hour and the rest in the 09 hour; likewise at midnight). The
in-control rate is a given rate, the rate of a calibration period (charts then watch the days
after it), or by default the rate of all other groups (each group left out of its own rate, so
a hot group does not raise its own baseline). Each chart is designed for ``arl0`` days alone,
or for ``arl0_family`` x the number of charts so that the whole family has about
``arl0_family`` days between false alarms; the exact family run length and the expected false
alarms per 30 days of driving are reported.
"""

import datetime as dt

from routerisk.analysis.watch.drives import match_drives, match_events, read_drives
from routerisk.analysis.watch.periods import (
    _baseline,
    _day_iso,
    _hour_of_week,
    split_by_hour,
)
from routerisk.analysis.watch.result import (
    EXPECTED,
    GROUPS,
    LIMITS,
    MAX_OFFSET_M,
    MAX_TIME_GAP_S,
    MONTH_DAYS,
    TESTS,
    UNITS,
    Drive,
    WatchResult,
)
from routerisk.analysis.watch.run import check_settings, watch, watch_matched
from routerisk.analysis.watch.units import discovery_units
from routerisk.io.drives import drive_files
from routerisk.io.timezones import YEARS

__all__ = [
    "EXPECTED",
    "GROUPS",
    "LIMITS",
    "MAX_OFFSET_M",
    "MAX_TIME_GAP_S",
    "MONTH_DAYS",
    "TESTS",
    "UNITS",
    "YEARS",
    "Drive",
    "WatchResult",
    "check_settings",
    "discovery_units",
    "drive_files",
    "dt",
    "match_drives",
    "match_events",
    "read_drives",
    "split_by_hour",
    "watch",
    "watch_matched",
    "_baseline",
    "_day_iso",
    "_hour_of_week",
]
