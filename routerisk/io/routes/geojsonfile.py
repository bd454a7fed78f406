"""Read routes from GeoJSON.

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
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from datetime import datetime, tzinfo
from pathlib import Path
from typing import Any

import numpy as np
import pyproj

from routerisk.errors import InputFileError, RouteInputError
from routerisk.io.routes.common import (
    _EARTH_RADIUS_M,
    _OTHER_GEOMETRIES,
    _ROUTE_TYPES,
    REQUIRED_POINT_TOLERANCE_M,
    PlannedRoute,
    _check_points,
    _finish,
    _parse_time,
    _Parsed,
    _short,
)


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
                f"times has parts of {[len(v) for v in value]} entries for parts of {parts} points",
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
            raise RouteInputError(
                "FeatureCollection has no features list", path=path, field="features"
            )
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
        raise RouteInputError(
            "properties must be an object", path=path, field=_join(pre, "properties")
        )
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
        raise RouteInputError(
            f"unknown geometry type {_short(gtype)}", path=path, field=gpre or "type"
        )
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
            raise RouteInputError("MultiLineString needs a list of parts", path=path, field=cfield)
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
        None
        if t is None
        else _parse_time(t, tz=tz, naive_utc=False, path=path, field=f"{field}[{i}]")
        for i, t in enumerate(flat)
    ]
    return [t for t, k in zip(times, line.keep, strict=True) if k]


def _required_indices(value: object, n: int, path: Path, field: str) -> np.ndarray:
    required = np.zeros(n, dtype=bool)
    if value is None or value is False:
        return required
    if not isinstance(value, list):
        raise RouteInputError("required must be a list of point indices", path=path, field=field)
    for k, idx in enumerate(value):
        if not isinstance(idx, int) or isinstance(idx, bool) or not 0 <= idx < n:
            raise RouteInputError(
                f"not a point index 0..{n - 1}: {_short(idx)}", path=path, field=f"{field}[{k}]"
            )
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
            name=_route_name(
                props.get("name"), f"route-{len(routes) + 1}", path, _join(pre, "properties.name")
            ),
            lonlat=ll,
            times=_feature_times(
                props.get("times", props.get("coordTimes")),
                line,
                tz,
                path,
                _join(pre, "properties.times"),
            ),
            required=_required_indices(
                props.get("required"), len(ll), path, _join(pre, "properties.required")
            ),
            depart=None
            if props.get("depart") is None
            else _parse_time(
                props["depart"],
                tz=tz,
                naive_utc=False,
                path=path,
                field=_join(pre, "properties.depart"),
            ),
            path=path,
            field=fname,
        )
        routes.append((route, fname))
    if not routes:
        raise RouteInputError(
            "holds no LineString or MultiLineString route",
            path=path,
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
            route = PlannedRoute(
                name=route.name,
                lonlat=route.lonlat,
                times=route.times,
                required=req,
                depart=route.depart,
                source=route.source,
            )
        out.append((route, field))
    return out


def _ground_distance_m(lonlat: np.ndarray, point: np.ndarray) -> np.ndarray:
    """Return equirectangular distances (m) from each row of ``lonlat`` to ``point``."""
    lat0 = math.radians(float(point[1]))
    dx = np.radians(lonlat[:, 0] - point[0]) * math.cos(lat0)
    dy = np.radians(lonlat[:, 1] - point[1])
    return np.hypot(dx, dy) * _EARTH_RADIUS_M
