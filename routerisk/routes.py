"""Read planned routes and recorded drives from GeoJSON, GPX and CSV files.

Every reader returns a list of :class:`PlannedRoute`: points in WGS84 (lon, lat), optional
timestamps, a mask of points that must be kept, and an optional departure time. Values come
from user files: they are parsed, never evaluated, and every problem raises
:class:`~routerisk.errors.InputFileError` (the file as a whole) or
:class:`~routerisk.errors.RouteInputError` (a route in it) naming the file and the field.

Formats
-------
GeoJSON
    A FeatureCollection, a single Feature or a bare geometry. LineString and MultiLineString
    features are routes (the parts of a MultiLineString are joined in order; a part that starts
    where the previous one ended does not repeat the shared point). Properties: ``name``
    (default ``route-<n>``, n counting routes from 1), ``depart`` (ISO 8601), ``times`` (or
    ``coordTimes``: one ISO 8601 string per point; nested per part for a MultiLineString) and
    ``required`` (a list of point indices into the joined points). A Point feature with
    ``required: true`` and ``route: <name>`` marks the route point nearest to it (within
    ``REQUIRED_POINT_TOLERANCE_M``) as required; other Point features are ignored. A legacy
    ``crs`` member (``{"type": "name", "properties": {"name": "EPSG:32625"}}``) on the
    collection or on a feature is honoured by reprojecting to WGS84.
GPX 1.0 and 1.1
    One route per ``trk`` (all its ``trkseg`` joined in order) or ``rte``, named from
    ``<name>``; ``<time>`` per point is optional (GPX times without an offset are UTC, as the
    GPX schema says); a point with ``<type>required</type>`` is required. Namespaces are
    ignored, so both versions read alike.
CSV
    A header with the columns ``route``, ``lat``, ``lon`` and optionally ``time``,
    ``required`` (true/false, yes/no, 1/0) and ``depart``; rows are grouped by ``route`` in the
    order routes first appear, keeping file order within a route. Errors name the line number
    (the header is row 1).

Times without a UTC offset (GeoJSON, CSV) take ``default_tz`` or are refused. If only some
points of a route carry a time, the times of that route are dropped with a warning.
"""

from __future__ import annotations

import csv
import io
import json
import logging
import math
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime, tzinfo
from pathlib import Path
from typing import Any
from xml.etree import ElementTree as ET
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import numpy as np
import pyproj

from ._io import dumps_json, write_text_atomic
from .errors import InputFileError, OptionError, RouteInputError

logger = logging.getLogger(__name__)

__all__ = [
    "REQUIRED_POINT_TOLERANCE_M",
    "PlannedRoute",
    "read_routes",
    "routes_to_geojson",
    "write_routes",
]

#: A required-point marker farther than this from every point of its route is an error (m).
REQUIRED_POINT_TOLERANCE_M = 30.0

_EARTH_RADIUS_M = 6_371_008.8
#: Years a route time may carry (dates near the ends of the calendar overflow when a
#: drive's duration is added).
_YEARS = (1900, 2200)
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


# --------------------------------------------------------------------------------------------
# entry points


def read_routes(path: str | Path, *, default_tz: str | tzinfo | None = None) -> list[PlannedRoute]:
    """Read every route of a GeoJSON, GPX or CSV file.

    The format follows the extension (``.geojson``/``.json``, ``.gpx``/``.xml``,
    ``.csv``/``.txt``) or, for any other name, the first character of the content.

    Parameters
    ----------
    path
        The route file.
    default_tz
        Time zone (IANA name such as ``"Etc/GMT+3"``, or a tzinfo) given to times without a
        UTC offset in GeoJSON and CSV files. Without it such times are an error.

    Returns
    -------
    list of PlannedRoute
        In file order; names are unique.

    Raises
    ------
    InputFileError
        The file is missing, empty, not text, or not valid JSON / XML.
    RouteInputError
        A route is malformed: no routes, too few points, bad coordinates, duplicate names,
        unknown geometry types, bad times, bad required marks.
    """
    p = Path(path)
    tz = _resolve_tz(default_tz)
    if not p.exists():
        raise InputFileError("no such file", path=p)
    if not p.is_file():
        raise InputFileError("is not a file", path=p)
    try:
        raw = p.read_bytes()
    except OSError as exc:
        raise InputFileError(f"cannot be read ({exc.strerror})", path=p) from exc
    if not raw.strip():
        raise InputFileError("file is empty", path=p)
    _refuse_other_kinds(p, raw)
    kind = _detect_format(p, raw)
    if kind == "gpx":
        routes = _read_gpx(p, raw)
    else:
        try:
            text = raw.decode("utf-8-sig")
        except UnicodeDecodeError as exc:
            raise InputFileError(
                f"is not UTF-8 text (bad byte at offset {exc.start})", path=p
            ) from exc
        routes = _read_geojson(p, text, tz) if kind == "geojson" else _read_csv(p, text, tz)
    _check_unique(p, routes)
    logger.info("read_routes read %d route(s) from %s", len(routes), p)
    return [r for r, _ in routes]


def routes_to_geojson(routes: Iterable[PlannedRoute]) -> dict[str, Any]:
    """Return routes as a GeoJSON FeatureCollection (WGS84) that :func:`read_routes` reads back.

    Each route is a LineString feature with ``name``, ``required`` (indices) and, when known,
    ``depart`` and ``times`` (ISO 8601 with offset).
    """
    features = []
    for r in routes:
        props: dict[str, Any] = {
            "name": r.name,
            "required": [int(i) for i in np.flatnonzero(r.required)],
        }
        if r.depart is not None:
            props["depart"] = r.depart.isoformat()
        if r.times is not None:
            props["times"] = [t.isoformat() for t in r.times]
        features.append(
            {
                "type": "Feature",
                "geometry": {
                    "type": "LineString",
                    "coordinates": [[float(x), float(y)] for x, y in r.lonlat],
                },
                "properties": props,
            }
        )
    return {"type": "FeatureCollection", "features": features}


def write_routes(
    path: str | Path, routes: Sequence[PlannedRoute], *, force: bool = False
) -> Path:
    """Write routes atomically as GeoJSON, GPX 1.1 or CSV, chosen by the file extension.

    GPX gets one ``trk`` per route with times and one ``rte`` per route without; required
    points carry ``<type>required</type>``; GPX has no place for ``depart``, which is dropped.

    Parameters
    ----------
    path
        Target file ending in ``.geojson``/``.json``, ``.gpx`` or ``.csv``.
    routes
        The routes to write.
    force
        Replace an existing file.

    Returns
    -------
    Path
        The file written.
    """
    p = Path(path)
    ext = p.suffix.lower()
    if ext in (".geojson", ".json"):
        text = dumps_json(routes_to_geojson(routes)) + "\n"
    elif ext == ".gpx":
        text = _gpx_text(routes)
    elif ext == ".csv":
        text = _csv_text(routes)
    else:
        raise OptionError(
            "unknown route file type; use .geojson, .json, .gpx or .csv", path=p, field="path"
        )
    return write_text_atomic(p, text, force=force)


# --------------------------------------------------------------------------------------------
# shared helpers

# A route under construction: its fields plus where in the file it came from.
_Parsed = tuple[PlannedRoute, str]


def _resolve_tz(value: str | tzinfo | None) -> tzinfo | None:
    if value is None or isinstance(value, tzinfo):
        return value
    try:
        return ZoneInfo(str(value))
    except (ZoneInfoNotFoundError, ValueError) as exc:
        raise OptionError(f"unknown time zone {value!r}", field="default_tz") from exc


_EXPECTED = "expected a route file: GeoJSON, GPX or CSV with route,lat,lon"
_YAML_KEY = re.compile(rb"^(?:---\s*$|[A-Za-z_][\w-]*:(?:\s|$))")


def _refuse_other_kinds(path: Path, raw: bytes) -> None:
    """Name, by content, a file that is clearly not a route file (whatever its extension)."""
    head = raw[:4096]
    if b"OSMHeader" in head[:64] or b"OSMData" in head[:64]:
        raise InputFileError(f"this looks like an OpenStreetMap extract (PBF, for "
                             f"`routerisk build`); {_EXPECTED}", path=path)
    if head[:2] == b"\x1f\x8b" or head[:3] == b"BZh":
        raise InputFileError(f"this is a compressed file (gzip or bzip2; an OpenStreetMap "
                             f"extract is for `routerisk build`); {_EXPECTED}", path=path)
    if b"\x00" in head and head[:2] not in (b"\xff\xfe", b"\xfe\xff"):
        raise InputFileError(f"this is a binary file, not text; {_EXPECTED}", path=path)
    text = head.lstrip(b"\xef\xbb\xbf")
    if re.search(rb"<osm[\s>]", text[:1024]):
        raise InputFileError(f"this looks like an OpenStreetMap extract (OSM XML, for "
                             f"`routerisk build`); {_EXPECTED}", path=path)
    lines = [ln.strip() for ln in text.splitlines()]
    lines = [ln for ln in lines if ln and not ln.startswith(b"#")]
    if lines and _YAML_KEY.match(lines[0]):
        if any(ln.startswith(b"runs:") for ln in lines):
            raise InputFileError(f"this looks like a YAML runs file (for `routerisk plan`); "
                                 f"{_EXPECTED}", path=path)
        raise InputFileError(f"this looks like a YAML file; {_EXPECTED}", path=path)


def _detect_format(path: Path, raw: bytes) -> str:
    ext = path.suffix.lower()
    if ext in (".geojson", ".json"):
        return "geojson"
    if ext in (".gpx", ".xml"):
        return "gpx"
    if ext in (".csv", ".txt"):
        return "csv"
    head = raw.lstrip()[:1]
    if head in (b"{", b"["):
        return "geojson"
    if head == b"<":
        return "gpx"
    return "csv"


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
    if not _YEARS[0] <= dt.year <= _YEARS[1]:
        raise RouteInputError(f"year {dt.year} is outside {_YEARS[0]}-{_YEARS[1]}: "
                              f"{_short(value)}", path=path, field=field)
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


# --------------------------------------------------------------------------------------------
# GeoJSON


def _crs_transformer(value: object, path: Path, field: str) -> pyproj.Transformer | None:
    """Return a transformer to WGS84 for a legacy ``crs`` member, or None for WGS84."""
    if value is None:
        return None
    if not isinstance(value, dict):
        raise RouteInputError("crs must be an object", path=path, field=field)
    kind = value.get("type")
    props = value.get("properties")
    if not isinstance(props, dict):
        raise RouteInputError("crs has no properties object", path=path, field=field)
    if kind == "name":
        name = props.get("name")
    elif isinstance(kind, str) and kind.lower() == "epsg":
        name = f"EPSG:{props.get('code')}"
    else:
        raise RouteInputError(
            f"unsupported crs type {_short(kind)}; use {{'type': 'name', ...}}",
            path=path,
            field=field,
        )
    if not isinstance(name, str) or not name.strip():
        raise RouteInputError("crs has no name", path=path, field=field)
    try:
        crs = pyproj.CRS.from_user_input(name.strip())
    except pyproj.exceptions.CRSError:
        raise RouteInputError(
            f"unknown coordinate reference system {_short(name)}", path=path, field=field
        ) from None
    if crs.equals(pyproj.CRS.from_epsg(4326), ignore_axis_order=True):
        return None
    return pyproj.Transformer.from_crs(crs, "EPSG:4326", always_xy=True)


def _positions(coords: object, path: Path, field: str) -> np.ndarray:
    """Return an (N, 2) array of the x, y of a GeoJSON position list."""
    if not isinstance(coords, list):
        raise RouteInputError("coordinates must be a list of positions", path=path, field=field)
    if coords:
        try:
            fast = np.array(coords)
        except ValueError:
            fast = None
        if fast is not None and fast.ndim == 2 and fast.shape[1] >= 2 and fast.dtype.kind in "if":
            return np.asarray(fast[:, :2], dtype=float)
    out = np.empty((len(coords), 2))
    for i, pos in enumerate(coords):
        ok = (
            isinstance(pos, list)
            and len(pos) >= 2
            and all(isinstance(c, int | float) and not isinstance(c, bool) for c in pos[:2])
        )
        if not ok:
            raise RouteInputError(
                f"position must be [lon, lat] numbers, got {_short(pos)}",
                path=path,
                field=f"{field}[{i}]",
            )
        out[i] = (float(pos[0]), float(pos[1]))
    return out


def _to_wgs84(
    xy: np.ndarray, transformer: pyproj.Transformer | None, path: Path, field_of: Any
) -> np.ndarray:
    if transformer is None:
        return xy
    bad = ~np.isfinite(xy).all(axis=1)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise RouteInputError("coordinate is not a finite number", path=path, field=field_of(i))
    lon, lat = transformer.transform(xy[:, 0], xy[:, 1])
    return np.column_stack([np.asarray(lon, dtype=float), np.asarray(lat, dtype=float)])


def _flat_times(value: object, parts: list[int], path: Path, field: str) -> list[object]:
    """Flatten a times list (nested per part for multi-part lines)."""
    if not isinstance(value, list):
        raise RouteInputError("times must be a list of ISO 8601 strings", path=path, field=field)
    if len(parts) > 1 and all(isinstance(v, list) for v in value):
        if [len(v) for v in value] != parts:
            raise RouteInputError(
                f"times has parts of {[len(v) for v in value]} entries for parts of {parts} "
                "points",
                path=path,
                field=field,
            )
        return [t for part in value for t in part]
    if len(value) != sum(parts):
        raise RouteInputError(
            f"times has {len(value)} entries for {sum(parts)} points", path=path, field=field
        )
    return list(value)


def _load_json(path: Path, text: str) -> dict[str, Any]:
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputFileError(
            f"is not valid JSON ({exc.msg})",
            path=path,
            field=f"line {exc.lineno} column {exc.colno}",
        ) from None
    except RecursionError:
        raise InputFileError("is nested too deeply to be GeoJSON", path=path) from None
    if not isinstance(data, dict):
        raise InputFileError("GeoJSON must be a JSON object", path=path, field="type")
    return data


def _join(prefix: str, name: str) -> str:
    return f"{prefix}.{name}" if prefix else name


def _geojson_items(path: Path, data: dict[str, Any]) -> list[tuple[str, Any, str]]:
    """Return (feature field prefix, feature, geometry field prefix) of each feature."""
    kind = data.get("type")
    if kind == "FeatureCollection":
        feats = data.get("features")
        if not isinstance(feats, list):
            raise RouteInputError("FeatureCollection has no features list", path=path,
                                  field="features")
        return [(f"features[{i}]", f, f"features[{i}].geometry") for i, f in enumerate(feats)]
    if kind == "Feature":
        return [("", data, "geometry")]
    if kind in _ROUTE_TYPES or kind in _OTHER_GEOMETRIES:
        return [("", {"type": "Feature", "geometry": data, "properties": {}}, "")]
    raise InputFileError(f"unknown GeoJSON type {_short(kind)}", path=path, field="type")


def _feature_parts(
    path: Path, pre: str, feat: Any, gpre: str
) -> tuple[dict[str, Any], dict[str, Any], object]:
    """Return a feature's properties, geometry and geometry type, checked."""
    if not isinstance(feat, dict) or feat.get("type") != "Feature":
        raise RouteInputError("is not a GeoJSON Feature", path=path, field=pre or "feature")
    props = feat.get("properties")
    if props is None:
        props = {}
    if not isinstance(props, dict):
        raise RouteInputError("properties must be an object", path=path,
                              field=_join(pre, "properties"))
    geom = feat.get("geometry")
    if not isinstance(geom, dict):
        raise RouteInputError("feature has no geometry", path=path, field=gpre or "geometry")
    gtype = geom.get("type")
    if gtype in _OTHER_GEOMETRIES and gtype != "Point":
        raise RouteInputError(
            f"geometry type {gtype} is not a route; use LineString or MultiLineString",
            path=path,
            field=gpre or "type",
        )
    if gtype not in _ROUTE_TYPES and gtype != "Point":
        raise RouteInputError(f"unknown geometry type {_short(gtype)}", path=path,
                              field=gpre or "type")
    return props, geom, gtype


@dataclass
class _Line:
    """Points of a (multi)line before its shared junction points are removed."""

    xy: np.ndarray
    sizes: list[int]  # points per part
    keep: np.ndarray  # False for a part's first point when it repeats the previous part's last
    owners: list[tuple[str, int]]  # (part field, index in part) of each point

    def field_of(self, i: int) -> str:
        f, j = self.owners[i]
        return f"{f}[{j}]"


def _line_points(path: Path, geom: dict[str, Any], cfield: str) -> _Line:
    coords = geom.get("coordinates")
    if geom.get("type") == "LineString":
        fields = [cfield]
        pieces = [_positions(coords, path, cfield)]
    else:
        if not isinstance(coords, list) or not coords:
            raise RouteInputError("MultiLineString needs a list of parts", path=path,
                                  field=cfield)
        fields = [f"{cfield}[{k}]" for k in range(len(coords))]
        pieces = [_positions(c, path, f) for c, f in zip(coords, fields, strict=True)]
    owners = [(f, j) for f, piece in zip(fields, pieces, strict=True) for j in range(len(piece))]
    xy = np.concatenate(pieces)
    keep = np.ones(len(xy), dtype=bool)
    start = 0
    for piece in pieces[:-1]:
        start += len(piece)
        if len(piece) and start < len(xy) and np.array_equal(xy[start - 1], xy[start]):
            keep[start] = False
    return _Line(xy, [len(p) for p in pieces], keep, owners)


def _route_name(value: object, default: str, path: Path, field: str) -> str:
    if value is None or (isinstance(value, str) and not value.strip()):
        return default
    if isinstance(value, str):
        return value.strip()
    if isinstance(value, int | float) and not isinstance(value, bool):
        return str(value)
    raise RouteInputError(f"name must be text, got {_short(value)}", path=path, field=field)


def _feature_times(
    value: object, line: _Line, tz: tzinfo | None, path: Path, field: str
) -> list[datetime | None] | None:
    if value is None:
        return None
    flat = _flat_times(value, line.sizes, path, field)
    times = [
        None if t is None
        else _parse_time(t, tz=tz, naive_utc=False, path=path, field=f"{field}[{i}]")
        for i, t in enumerate(flat)
    ]
    return [t for t, k in zip(times, line.keep, strict=True) if k]


def _required_indices(value: object, n: int, path: Path, field: str) -> np.ndarray:
    required = np.zeros(n, dtype=bool)
    if value is None or value is False:
        return required
    if not isinstance(value, list):
        raise RouteInputError("required must be a list of point indices", path=path,
                              field=field)
    for k, idx in enumerate(value):
        if not isinstance(idx, int) or isinstance(idx, bool) or not 0 <= idx < n:
            raise RouteInputError(f"not a point index 0..{n - 1}: {_short(idx)}", path=path,
                                  field=f"{field}[{k}]")
        required[idx] = True
    return required


def _read_geojson(path: Path, text: str, tz: tzinfo | None) -> list[_Parsed]:
    data = _load_json(path, text)
    top = _crs_transformer(data.get("crs"), path, "crs")
    routes: list[_Parsed] = []
    markers: list[tuple[str, object, np.ndarray]] = []  # (field, route name, lonlat)
    for pre, feat, gpre in _geojson_items(path, data):
        props, geom, gtype = _feature_parts(path, pre, feat, gpre)
        transformer = _crs_transformer(feat.get("crs"), path, _join(pre, "crs")) or top
        cfield = _join(gpre, "coordinates")
        if gtype == "Point":
            if props.get("required") is True:
                xy = _positions([geom.get("coordinates")], path, cfield)
                ll = _to_wgs84(xy, transformer, path, lambda i, f=cfield: f)
                _check_points(ll, path, lambda i, f=cfield: f)
                markers.append((pre or "feature", props.get("route"), ll[0]))
            continue
        line = _line_points(path, geom, cfield)
        ll = _to_wgs84(line.xy, transformer, path, line.field_of)
        _check_points(ll, path, line.field_of)
        ll = ll[line.keep]
        fname = pre or "geometry"
        route = _finish(
            name=_route_name(props.get("name"), f"route-{len(routes) + 1}", path,
                             _join(pre, "properties.name")),
            lonlat=ll,
            times=_feature_times(props.get("times", props.get("coordTimes")), line, tz, path,
                                 _join(pre, "properties.times")),
            required=_required_indices(props.get("required"), len(ll), path,
                                       _join(pre, "properties.required")),
            depart=None if props.get("depart") is None else _parse_time(
                props["depart"], tz=tz, naive_utc=False, path=path,
                field=_join(pre, "properties.depart")),
            path=path,
            field=fname,
        )
        routes.append((route, fname))
    if not routes:
        raise RouteInputError(
            "holds no LineString or MultiLineString route", path=path,
            field="features" if data.get("type") == "FeatureCollection" else "type",
        )
    if markers:
        routes = _apply_markers(path, routes, markers)
    return routes


def _apply_markers(
    path: Path, routes: list[_Parsed], markers: list[tuple[str, object, np.ndarray]]
) -> list[_Parsed]:
    by_name = {r.name: k for k, (r, _) in enumerate(routes)}
    extra: dict[int, list[int]] = {}
    for field, rname, ll in markers:
        if rname is None and len(routes) == 1:
            k = 0
        elif isinstance(rname, str) and rname.strip() in by_name:
            k = by_name[rname.strip()]
        else:
            raise RouteInputError(
                f"required point names no route of this file ({_short(rname)}); "
                f"routes: {', '.join(sorted(by_name))}",
                path=path,
                field=f"{field}.properties.route",
            )
        route = routes[k][0]
        d = _ground_distance_m(route.lonlat, ll)
        i = int(np.argmin(d))
        if d[i] > REQUIRED_POINT_TOLERANCE_M:
            raise RouteInputError(
                f"required point is {d[i]:.0f} m from the nearest point of route {route.name!r} "
                f"(at most {REQUIRED_POINT_TOLERANCE_M:.0f} m)",
                path=path,
                field=f"{field}.geometry",
            )
        extra.setdefault(k, []).append(i)
    out = []
    for k, (route, field) in enumerate(routes):
        if k in extra:
            req = route.required.copy()
            req[extra[k]] = True
            route = PlannedRoute(name=route.name, lonlat=route.lonlat, times=route.times,
                                 required=req, depart=route.depart, source=route.source)
        out.append((route, field))
    return out


def _ground_distance_m(lonlat: np.ndarray, point: np.ndarray) -> np.ndarray:
    """Return equirectangular distances (m) from each row of ``lonlat`` to ``point``."""
    lat0 = math.radians(float(point[1]))
    dx = np.radians(lonlat[:, 0] - point[0]) * math.cos(lat0)
    dy = np.radians(lonlat[:, 1] - point[1])
    return np.hypot(dx, dy) * _EARTH_RADIUS_M


# --------------------------------------------------------------------------------------------
# GPX


def _local(tag: object) -> str:
    return tag.rsplit("}", 1)[-1] if isinstance(tag, str) else ""


def _child(elem: ET.Element, name: str) -> ET.Element | None:
    for c in elem:
        if _local(c.tag) == name:
            return c
    return None


def _gpx_points(elem: ET.Element, kind: str, field: str) -> list[tuple[ET.Element, str]]:
    """Return the points of a trk (all segments, in order) or rte with their field names."""
    pts: list[tuple[ET.Element, str]] = []
    if kind == "rte":
        pts = [(pt, f"{field}.rtept[{k}]")
               for k, pt in enumerate(p for p in elem if _local(p.tag) == "rtept")]
        return pts
    segs = [s for s in elem if _local(s.tag) == "trkseg"]
    for n, seg in enumerate(segs):
        pts.extend((pt, f"{field}.trkseg[{n}].trkpt[{k}]")
                   for k, pt in enumerate(p for p in seg if _local(p.tag) == "trkpt"))
    return pts


def _gpx_point(
    pt: ET.Element, pfield: str, path: Path
) -> tuple[float, float, datetime | None, bool]:
    """Return lon, lat, time (UTC when no offset is given) and the required mark of a point."""
    values = []
    for attr in ("lon", "lat"):
        text = pt.get(attr)
        if text is None:
            raise RouteInputError(f"point has no {attr} attribute", path=path, field=pfield)
        try:
            values.append(float(text))
        except ValueError:
            raise RouteInputError(f"{attr} is not a number: {_short(text)}", path=path,
                                  field=f"{pfield}.{attr}") from None
    t_el = _child(pt, "time")
    when = None
    if t_el is not None and (t_el.text or "").strip():
        when = _parse_time(t_el.text, tz=UTC, naive_utc=True, path=path, field=f"{pfield}.time")
    type_el = _child(pt, "type")
    required = type_el is not None and (type_el.text or "").strip().lower() == "required"
    return values[0], values[1], when, required


def _read_gpx(path: Path, raw: bytes) -> list[_Parsed]:
    try:
        root = ET.fromstring(raw)  # noqa: S314 - expat refuses entity expansion bombs
    except ET.ParseError as exc:
        line, col = exc.position
        raise InputFileError(f"is not valid XML ({exc})", path=path,
                             field=f"line {line} column {col + 1}") from None
    if _local(root.tag) != "gpx":
        raise InputFileError(f"is not a GPX file (root element <{_local(root.tag)}>)",
                             path=path, field="gpx")
    routes: list[_Parsed] = []
    counts = {"trk": 0, "rte": 0}
    for elem in root:
        kind = _local(elem.tag)
        if kind not in counts:
            continue
        field = f"{kind}[{counts[kind]}]"
        counts[kind] += 1
        pts = _gpx_points(elem, kind, field)
        name_el = _child(elem, "name")
        name = (name_el.text or "").strip() if name_el is not None else ""
        name = name or f"route-{len(routes) + 1}"
        if not pts:
            raise RouteInputError(f"{kind} {name!r} has no points", path=path, field=field)
        parsed = [_gpx_point(pt, pfield, path) for pt, pfield in pts]
        lonlat = np.array([(p[0], p[1]) for p in parsed])
        _check_points(lonlat, path, lambda i, _p=pts: _p[i][1])
        times = [p[2] for p in parsed]
        route = _finish(name=name, lonlat=lonlat,
                        times=times if any(t is not None for t in times) else None,
                        required=np.array([p[3] for p in parsed], dtype=bool), depart=None,
                        path=path, field=field)
        routes.append((route, field))
    if not routes:
        has_wpt = any(_local(e.tag) == "wpt" for e in root)
        msg = ("holds only waypoints (wpt); a route needs a trk or rte" if has_wpt
               else "holds no track or route points")
        raise RouteInputError(msg, path=path, field="trk/rte")
    return routes


def _gpx_text(routes: Sequence[PlannedRoute]) -> str:
    ns = "http://www.topografix.com/GPX/1/1"
    root = ET.Element("gpx", {"version": "1.1", "creator": "routerisk", "xmlns": ns})
    for r in routes:
        if r.depart is not None:
            logger.warning("GPX has no field for depart; route %r loses it", r.name)
        is_trk = r.times is not None
        parent = ET.SubElement(root, "trk" if is_trk else "rte")
        ET.SubElement(parent, "name").text = r.name
        holder = ET.SubElement(parent, "trkseg") if is_trk else parent
        for i, (lon, lat) in enumerate(r.lonlat):
            pt = ET.SubElement(holder, "trkpt" if is_trk else "rtept",
                               {"lat": repr(float(lat)), "lon": repr(float(lon))})
            if r.times is not None:
                ET.SubElement(pt, "time").text = (
                    r.times[i].astimezone(UTC).isoformat().replace("+00:00", "Z")
                )
            if r.required[i]:
                ET.SubElement(pt, "type").text = "required"
    ET.indent(root)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"


# --------------------------------------------------------------------------------------------
# CSV


def _csv_columns(path: Path, header: list[str]) -> dict[str, int]:
    """Return the position of each known column of the header (route, lat, lon required)."""
    names = [h.strip().lower() for h in header]
    cols: dict[str, int] = {}
    for key, aliases in _CSV_ALIASES.items():
        found = [i for i, h in enumerate(names) if h in aliases]
        if len(found) > 1:
            raise RouteInputError(f"column {key!r} appears {len(found)} times", path=path,
                                  field="row 1")
        if found:
            cols[key] = found[0]
    for key in ("route", "lat", "lon"):
        if key not in cols:
            semicolons = len(names) == 1 and ";" in names[0]
            hint = " (the file must be comma separated)" if semicolons else ""
            raise RouteInputError(
                f"missing column {key!r}; the header needs route, lat, lon{hint}",
                path=path, field="row 1",
            )
    return cols


def _csv_coordinate(cell: str, key: str, path: Path, field: str) -> float:
    limit = 180.0 if key == "lon" else 90.0
    try:
        value = float(cell)
    except ValueError:
        raise RouteInputError(f"not a number: {_short(cell)}", path=path, field=field) from None
    if not math.isfinite(value) or abs(value) > limit:
        raise RouteInputError(
            f"{key} must be a finite number within +-{limit:g}, got {_short(cell)}",
            path=path, field=field,
        )
    return value


def _csv_flag(cell: str, path: Path, field: str) -> bool:
    text = cell.strip().lower()
    if text in _TRUE:
        return True
    if text in _FALSE:
        return False
    raise RouteInputError(f"required must be true or false, got {_short(cell)}", path=path,
                          field=field)


def _csv_row(
    row: list[str], cols: dict[str, int], line: int, tz: tzinfo | None, path: Path
) -> tuple[str, list[float], datetime | None, bool, datetime | None]:
    """Return route name, [lon, lat], time, required and depart of one data row."""
    if len(row) <= max(cols.values()):
        raise RouteInputError(f"has {len(row)} values, too few for the header", path=path,
                              field=f"row {line}")
    name = row[cols["route"]].strip()
    if not name:
        raise RouteInputError("route name is empty", path=path, field=f"row {line}: route")
    ll = [_csv_coordinate(row[cols[k]].strip(), k, path, f"row {line}: {k}")
          for k in ("lon", "lat")]

    def when(key: str) -> datetime | None:
        if key not in cols or not row[cols[key]].strip():
            return None
        return _parse_time(row[cols[key]], tz=tz, naive_utc=False, path=path,
                           field=f"row {line}: {key}")

    required = "required" in cols and _csv_flag(row[cols["required"]], path,
                                                f"row {line}: required")
    return name, ll, when("time"), required, when("depart")


def _read_csv(path: Path, text: str, tz: tzinfo | None) -> list[_Parsed]:
    reader = csv.reader(io.StringIO(text, newline=""))
    groups: dict[str, dict[str, Any]] = {}
    try:
        header = next(reader)
        cols = _csv_columns(path, header)
        for row in reader:
            if not any(c.strip() for c in row):
                continue
            line = reader.line_num
            name, ll, when, req, dep = _csv_row(row, cols, line, tz, path)
            g = groups.setdefault(name, {"ll": [], "t": [], "req": [], "depart": None,
                                         "line": line})
            g["ll"].append(ll)
            g["t"].append(when)
            g["req"].append(req)
            if dep is not None:
                if g["depart"] is not None and dep != g["depart"]:
                    raise RouteInputError(
                        f"depart differs from an earlier row of route {name!r}",
                        path=path, field=f"row {line}: depart",
                    )
                g["depart"] = dep
    except StopIteration:
        raise InputFileError("file is empty", path=path) from None
    except csv.Error as exc:
        raise InputFileError(f"is not valid CSV ({exc})", path=path,
                             field=f"row {reader.line_num}") from None
    if not groups:
        raise RouteInputError("holds a header but no route rows", path=path, field="row 2")
    routes: list[_Parsed] = []
    for name, g in groups.items():
        times = g["t"] if any(t is not None for t in g["t"]) else None
        field = f"row {g['line']}: route"
        route = _finish(name=name, lonlat=np.array(g["ll"], dtype=float), times=times,
                        required=np.array(g["req"], dtype=bool), depart=g["depart"], path=path,
                        field=field)
        routes.append((route, field))
    return routes


def _csv_text(routes: Sequence[PlannedRoute]) -> str:
    buf = io.StringIO(newline="")
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(["route", "lat", "lon", "time", "required", "depart"])
    for r in routes:
        dep = r.depart.isoformat() if r.depart is not None else ""
        for i, (lon, lat) in enumerate(r.lonlat):
            t = r.times[i].isoformat() if r.times is not None else ""
            w.writerow([r.name, repr(float(lat)), repr(float(lon)), t,
                        "true" if r.required[i] else "false", dep])
    return buf.getvalue()
