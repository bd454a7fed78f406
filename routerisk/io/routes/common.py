"""What every route reader shares: the route type, constants and the checks of a parsed route.

:class:`PlannedRoute` is what every reader returns: points in WGS84 (lon, lat), optional
timestamps, a mask of points that must be kept, and an optional departure time. The helpers
here parse a time (:func:`_parse_time`), check coordinates (:func:`_check_points`), finish a
parsed route (times all or none, departure; :func:`_finish`) and refuse duplicate names
(:func:`_check_unique`).

Times without a UTC offset (GeoJSON, CSV) take ``default_tz`` or are refused. If only some
points of a route carry a time, the times of that route are dropped with a warning.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from datetime import UTC, datetime, tzinfo
from pathlib import Path
from typing import Any

import numpy as np

from routerisk.errors import RouteInputError
from routerisk.io.timezones import YEARS

# The package's logger, so that log lines name ``routerisk.io.routes`` as before the split.
logger = logging.getLogger(__package__)


#: A required-point marker farther than this from every point of its route is an error (m).
REQUIRED_POINT_TOLERANCE_M = 30.0

_EARTH_RADIUS_M = 6_371_008.8
_ROUTE_TYPES = ("LineString", "MultiLineString")
_OTHER_GEOMETRIES = ("Point", "MultiPoint", "Polygon", "MultiPolygon", "GeometryCollection")
_TRUE = frozenset({"1", "true", "yes", "y", "t"})
_FALSE = frozenset({"0", "false", "no", "n", "f", ""})
_CSV_ALIASES = {
    "route": ("route",),
    "lat": ("lat", "latitude"),
    "lon": ("lon", "lng", "long", "longitude"),
    "time": ("time",),
    "required": ("required",),
    "depart": ("depart",),
}


@dataclass(frozen=True, eq=False)
class PlannedRoute:
    """A route as read from a file: ordered points in WGS84 and what is known about them.

    Attributes
    ----------
    name
        Route name, unique within its file.
    lonlat
        Read-only float array of shape (N, 2): longitude, latitude in degrees (WGS84).
    times
        Read-only object array of N timezone-aware datetimes, or None.
    required
        Read-only bool array of N: points that must be kept (via points marking manoeuvres);
        the first and the last point are always required.
    depart
        Planned departure (timezone-aware), from a ``depart`` property or column, or None.
    source
        The file the route was read from (or "" when built in code).
    """

    name: str
    lonlat: np.ndarray
    times: np.ndarray | None = None
    required: np.ndarray | None = None  # type: ignore[assignment]
    depart: datetime | None = None
    source: str = ""

    def __post_init__(self) -> None:
        """Check shapes, force the end points to be required and freeze the arrays."""
        lonlat = np.array(self.lonlat, dtype=float)
        if lonlat.ndim != 2 or lonlat.shape[1] != 2 or len(lonlat) < 2:
            raise ValueError(f"lonlat must have shape (N >= 2, 2), got {lonlat.shape}")
        n = len(lonlat)
        if self.required is None:
            required = np.zeros(n, dtype=bool)
        else:
            required = np.array(self.required, dtype=bool)
            if required.shape != (n,):
                raise ValueError(f"required must have shape ({n},), got {required.shape}")
        required[0] = required[-1] = True
        times = None
        if self.times is not None:
            times = np.empty(n, dtype=object)
            values = list(self.times)
            if len(values) != n:
                raise ValueError(f"times must have {n} entries, got {len(values)}")
            for i, t in enumerate(values):
                if not isinstance(t, datetime) or t.tzinfo is None or t.utcoffset() is None:
                    raise ValueError(f"times[{i}] is not a timezone-aware datetime")
                times[i] = t
            times.setflags(write=False)
        if self.depart is not None and (
            not isinstance(self.depart, datetime) or self.depart.utcoffset() is None
        ):
            raise ValueError("depart must be a timezone-aware datetime")
        lonlat.setflags(write=False)
        required.setflags(write=False)
        object.__setattr__(self, "lonlat", lonlat)
        object.__setattr__(self, "required", required)
        object.__setattr__(self, "times", times)
        object.__setattr__(self, "source", str(self.source))

    def __len__(self) -> int:
        """Return the number of points."""
        return len(self.lonlat)


# A route under construction: its fields plus where in the file it came from.
_Parsed = tuple[PlannedRoute, str]


def _short(value: object) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


def _parse_time(
    value: object, *, tz: tzinfo | None, naive_utc: bool, path: Path, field: str
) -> datetime:
    if not isinstance(value, str):
        raise RouteInputError(
            f"time must be an ISO 8601 string, got {_short(value)}", path=path, field=field
        )
    text = value.strip()
    if text[-1:] in ("Z", "z"):
        text = text[:-1] + "+00:00"
    try:
        dt = datetime.fromisoformat(text)
    except ValueError:
        raise RouteInputError(
            f"invalid time {_short(value)}; use ISO 8601 such as 2024-05-06T08:30:00+02:00",
            path=path,
            field=field,
        ) from None
    if not YEARS[0] <= dt.year <= YEARS[1]:
        raise RouteInputError(
            f"year {dt.year} is outside {YEARS[0]}-{YEARS[1]}: {_short(value)}",
            path=path,
            field=field,
        )
    if dt.tzinfo is None:
        if tz is not None:
            dt = dt.replace(tzinfo=tz)
        elif naive_utc:
            dt = dt.replace(tzinfo=UTC)
        else:
            raise RouteInputError(
                f"time {_short(value)} has no UTC offset; add one (e.g. +02:00) "
                "or give a default time zone",
                path=path,
                field=field,
            )
    return dt


def _check_points(lonlat: np.ndarray, path: Path, field_of: Any) -> None:
    """Refuse NaN or out-of-range coordinates; ``field_of(i)`` names point i."""
    bad = ~np.isfinite(lonlat).all(axis=1)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise RouteInputError("coordinate is not a finite number", path=path, field=field_of(i))
    lon, lat = lonlat[:, 0], lonlat[:, 1]
    out = (np.abs(lat) > 90.0) | (np.abs(lon) > 180.0)
    if out.any():
        i = int(np.flatnonzero(out)[0])
        raise RouteInputError(
            f"coordinate out of range (lon {lon[i]:.6g}, lat {lat[i]:.6g}); "
            "longitude must be within +-180 and latitude within +-90",
            path=path,
            field=field_of(i),
        )


def _finish(
    *,
    name: str,
    lonlat: np.ndarray,
    times: list[datetime | None] | None,
    required: np.ndarray,
    depart: datetime | None,
    path: Path,
    field: str,
) -> PlannedRoute:
    """Check a parsed route and build it."""
    n = len(lonlat)
    if n < 2:
        raise RouteInputError(
            f"route {name!r} has {n} point(s); a route needs at least 2", path=path, field=field
        )
    if np.all(lonlat == lonlat[0]):
        raise RouteInputError(
            f"route {name!r} has all its points at one place", path=path, field=field
        )
    tarr: list[datetime] | None = None
    if times is not None:
        have = [t is not None for t in times]
        if all(have):
            tarr = [t for t in times if t is not None]
            for i in range(1, n):
                if tarr[i] < tarr[i - 1]:
                    raise RouteInputError(
                        f"time goes backwards at point {i} of route {name!r} "
                        f"({tarr[i].isoformat()} after {tarr[i - 1].isoformat()})",
                        path=path,
                        field=field,
                    )
        elif any(have):
            logger.warning(
                "%s: route %r: %d of %d points have no time; times ignored",
                path,
                name,
                have.count(False),
                n,
            )
    return PlannedRoute(
        name=name,
        lonlat=lonlat,
        times=None if tarr is None else np.array(tarr, dtype=object),
        required=required,
        depart=depart,
        source=str(path),
    )


def _check_unique(path: Path, routes: list[_Parsed]) -> None:
    seen: dict[str, str] = {}
    for route, field in routes:
        if route.name in seen:
            raise RouteInputError(
                f"route name {route.name!r} is used twice (also at {seen[route.name]})",
                path=path,
                field=field,
            )
        seen[route.name] = field
