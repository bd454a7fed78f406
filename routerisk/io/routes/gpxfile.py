"""Read and write routes as GPX 1.0 and 1.1.

One route per ``trk`` (all its ``trkseg`` joined in order) or ``rte``, named from ``<name>``;
``<time>`` per point is optional (GPX times without an offset are UTC, as the GPX schema
says); a point with ``<type>required</type>`` is required. Namespaces are ignored, so both
versions read alike. :func:`_gpx_text` writes routes as GPX 1.1 tracks.
"""

from __future__ import annotations

import logging
from collections.abc import Sequence
from datetime import UTC, datetime
from pathlib import Path
from xml.etree import ElementTree as ET

import numpy as np

from routerisk.errors import InputFileError, RouteInputError
from routerisk.io.routes.common import (
    PlannedRoute,
    _check_points,
    _finish,
    _parse_time,
    _Parsed,
    _short,
)

# The package's logger, so that log lines name ``routerisk.io.routes`` as before the split.
logger = logging.getLogger(__package__)


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
        pts = [
            (pt, f"{field}.rtept[{k}]")
            for k, pt in enumerate(p for p in elem if _local(p.tag) == "rtept")
        ]
        return pts
    segs = [s for s in elem if _local(s.tag) == "trkseg"]
    for n, seg in enumerate(segs):
        pts.extend(
            (pt, f"{field}.trkseg[{n}].trkpt[{k}]")
            for k, pt in enumerate(p for p in seg if _local(p.tag) == "trkpt")
        )
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
            raise RouteInputError(
                f"{attr} is not a number: {_short(text)}", path=path, field=f"{pfield}.{attr}"
            ) from None
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
        raise InputFileError(
            f"is not valid XML ({exc})", path=path, field=f"line {line} column {col + 1}"
        ) from None
    if _local(root.tag) != "gpx":
        raise InputFileError(
            f"is not a GPX file (root element <{_local(root.tag)}>)", path=path, field="gpx"
        )
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
        route = _finish(
            name=name,
            lonlat=lonlat,
            times=times if any(t is not None for t in times) else None,
            required=np.array([p[3] for p in parsed], dtype=bool),
            depart=None,
            path=path,
            field=field,
        )
        routes.append((route, field))
    if not routes:
        has_wpt = any(_local(e.tag) == "wpt" for e in root)
        msg = (
            "holds only waypoints (wpt); a route needs a trk or rte"
            if has_wpt
            else "holds no track or route points"
        )
        raise RouteInputError(msg, path=path, field="trk/rte")
    return routes


def gpx_text(routes: Sequence[PlannedRoute]) -> str:
    """Return routes as GPX 1.1 text: one track per route, times where the route has them."""
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
            pt = ET.SubElement(
                holder,
                "trkpt" if is_trk else "rtept",
                {"lat": repr(float(lat)), "lon": repr(float(lon))},
            )
            if r.times is not None:
                ET.SubElement(pt, "time").text = (
                    r.times[i].astimezone(UTC).isoformat().replace("+00:00", "Z")
                )
            if r.required[i]:
                ET.SubElement(pt, "type").text = "required"
    ET.indent(root)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + ET.tostring(root, encoding="unicode") + "\n"


_gpx_text = gpx_text  # the name used inside the package
