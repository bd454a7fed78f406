"""The entry points: read every route of a file, write routes to a file.

:func:`read_routes` detects the file's kind (:mod:`routerisk.io.routes.detect`) and calls the
reader of its format (:mod:`~routerisk.io.routes.geojsonfile`, :mod:`~routerisk.io.routes.gpxfile`,
:mod:`~routerisk.io.routes.csvfile`); :func:`routes_to_geojson` and :func:`write_routes` write
routes back out.
"""

from __future__ import annotations

import logging
from collections.abc import Iterable, Sequence
from datetime import tzinfo
from pathlib import Path
from typing import Any

import numpy as np

from routerisk.errors import InputFileError, OptionError
from routerisk.io.atomic import dumps_json, write_text_atomic
from routerisk.io.routes.common import PlannedRoute, _check_unique
from routerisk.io.routes.csvfile import _csv_text, _read_csv
from routerisk.io.routes.detect import _detect_format, _refuse_other_kinds
from routerisk.io.routes.geojsonfile import _read_geojson
from routerisk.io.routes.gpxfile import _gpx_text, _read_gpx
from routerisk.io.timezones import resolve_zone

# The package's logger, so that log lines name ``routerisk.io.routes`` as before the split.
logger = logging.getLogger(__package__)


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
    tz = resolve_zone(default_tz, field="default_tz")
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


def write_routes(path: str | Path, routes: Sequence[PlannedRoute], *, force: bool = False) -> Path:
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
