"""Time zones and the years a time may carry: one copy for the whole package.

:func:`resolve_zone` turns a zone name into a tzinfo (routes, drives and event logs),
:func:`check_timezone` checks a zone name given to ``build``, :func:`infer_timezone` looks one
up offline, :func:`zone_label` writes one as people read it, and :func:`wall_clock_ns` turns
UTC times into local wall-clock times. :data:`YEARS` bounds the year of every time read.
"""

from __future__ import annotations

import re
from datetime import tzinfo
from typing import Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import numpy as np
import pandas as pd

from routerisk.errors import OptionError

__all__ = [
    "YEARS",
    "check_timezone",
    "infer_timezone",
    "resolve_zone",
    "wall_clock_ns",
    "zone_label",
]

#: Years a time may carry: route and drive times, departures and events (a drive's duration
#: is added to its times, so dates near the ends of the calendar would overflow, and pandas'
#: nanosecond times end in 2262).
YEARS = (1900, 2200)


def resolve_zone(value: str | tzinfo | None, *, field: str) -> tzinfo | None:
    """Return the tzinfo of an IANA name (a tzinfo or None is returned as given).

    Raises OptionError ``unknown time zone ...`` naming ``field`` for an unknown name.
    """
    if value is None or isinstance(value, tzinfo):
        return value
    try:
        return ZoneInfo(str(value))
    except (ZoneInfoNotFoundError, ValueError) as exc:
        raise OptionError(f"unknown time zone {value!r}", field=field) from exc


def check_timezone(name: str) -> str:
    """Return ``name`` if it is a known IANA time zone, else raise OptionError."""
    try:
        ZoneInfo(name)
    except (ZoneInfoNotFoundError, ValueError) as exc:
        raise OptionError(
            f"unknown time zone {name!r} (use an IANA name such as 'Etc/GMT+3' or 'UTC')",
            field="--timezone",
        ) from exc
    return name


def infer_timezone(lon: float, lat: float) -> str:
    """Return the IANA time zone at ``lon``, ``lat`` from an offline lookup (timezonefinder).

    Open sea gets the nautical zone (``Etc/GMT+3`` at 38 degrees west). Raises OptionError when
    the lookup has no answer, asking for ``--timezone``.
    """
    from timezonefinder import TimezoneFinder

    name = TimezoneFinder().timezone_at(lng=float(lon), lat=float(lat))
    if not name:
        raise OptionError(
            f"no time zone is known at lon {lon:.4f}, lat {lat:.4f}; give the "
            "area's time zone (an IANA name)",
            field="--timezone",
        )
    return str(name)


def zone_label(name: str) -> str:
    """Return a time zone as people read it: ``Etc/GMT+3`` -> ``UTC-03:00``.

    The ``Etc/GMT`` names carry the POSIX sign (``Etc/GMT+3`` is three hours *behind* UTC),
    which misleads; other names are returned with nothing changed.
    """
    if name in ("UTC", "Etc/UTC", "Etc/GMT", "GMT", "Etc/GMT0", "Etc/GMT+0", "Etc/GMT-0"):
        return "UTC+00:00"
    m = re.fullmatch(r"Etc/GMT([+-])(\d{1,2})", name)
    if m:
        sign = "-" if m.group(1) == "+" else "+"
        return f"UTC{sign}{int(m.group(2)):02d}:00"
    return name


def wall_clock_ns(t_ns: np.ndarray, tz: Any) -> np.ndarray:
    """Return local wall-clock times (ns since 1970-01-01 00:00 local) of UTC times."""
    if len(t_ns) == 0:
        return np.zeros(0, dtype=np.int64)
    idx = pd.to_datetime(np.asarray(t_ns, dtype=np.int64), utc=True).tz_convert(tz)
    return np.asarray(idx.tz_localize(None).as_unit("ns").asi8, dtype=np.int64)
