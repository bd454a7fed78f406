"""Read short-duration pedestrian counts: CSV ``site,lat,lon,start,end,count`` or GeoJSON points.

The counts feed :func:`routerisk.analysis.calibration.calibrate`; every bad row raises
:class:`CountsError` naming the file and the row.
"""

from __future__ import annotations

import csv
import datetime as _dt
import json
import math
from pathlib import Path
from typing import Any

import pandas as pd

from routerisk.errors import InputFileError

#: Longest counting period accepted.
MAX_PERIOD = _dt.timedelta(days=7)
COLUMNS = ("site", "lat", "lon", "start", "end", "count")


class CountsError(InputFileError):
    """A count file is malformed, or cannot support the fit asked for."""


def _time(text: str, tz: Any, *, path: Path, where: str) -> _dt.datetime:
    try:
        t = _dt.datetime.fromisoformat(str(text).strip())
    except ValueError as exc:
        raise CountsError(
            f"not an ISO 8601 date and time: {text!r}", path=path, field=where
        ) from exc
    return t.replace(tzinfo=tz) if t.tzinfo is None else t


def _integer(value: Any, *, path: Path, where: str) -> int:
    try:
        v = float(value)
    except (TypeError, ValueError) as exc:
        raise CountsError(f"must be a whole number, got {value!r}", path=path, field=where) from exc
    if not math.isfinite(v) or v != int(v):
        raise CountsError(
            f"must be a whole number of pedestrians, got {value!r}", path=path, field=where
        )
    if v < 0:
        raise CountsError(f"must not be negative, got {value!r}", path=path, field=where)
    return int(v)


def _records(path: Path) -> list[tuple[str, dict[str, Any]]]:
    """Return (where, properties) pairs from a CSV or GeoJSON count file."""
    if not path.is_file():
        raise CountsError("count file not found", path=path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError as exc:
        raise CountsError("is not UTF-8 text", path=path) from exc
    if path.suffix.lower() in (".geojson", ".json"):
        try:
            doc = json.loads(text)
        except json.JSONDecodeError as exc:
            raise CountsError(f"not valid JSON ({exc.msg}, line {exc.lineno})", path=path) from exc
        feats = doc.get("features") if isinstance(doc, dict) else None
        if not isinstance(feats, list):
            raise CountsError(
                "must be a GeoJSON FeatureCollection of points", path=path, field="features"
            )
        out = []
        for i, f in enumerate(feats):
            where = f"features[{i}]"
            if (
                not isinstance(f, dict)
                or not isinstance(f.get("geometry") or {}, dict)
                or not isinstance(f.get("properties") or {}, dict)
            ):
                raise CountsError(
                    "must be a GeoJSON Feature with a Point geometry and properties",
                    path=path,
                    field=where,
                )
            geom = f.get("geometry") or {}
            if (
                geom.get("type") != "Point"
                or not isinstance(geom.get("coordinates"), list)
                or len(geom["coordinates"]) < 2
            ):
                raise CountsError("must be a Point feature", path=path, field=where)
            props = dict((f or {}).get("properties") or {})
            props["lon"], props["lat"] = geom["coordinates"][:2]
            out.append((where, props))
        return out
    # comment lines become empty (skipped), so row numbers stay those of the file
    rows = list(csv.reader("" if line.startswith("#") else line for line in text.splitlines()))
    while rows and not any(cell.strip() for cell in rows[0]):
        rows.pop(0)
    first = (
        text.splitlines().index(
            next(ln for ln in text.splitlines() if ln.strip() and not ln.startswith("#"))
        )
        if rows
        else 0
    )
    if not rows:
        raise CountsError("has no header and no rows", path=path)
    head = [h.strip() for h in rows[0]]
    missing = [c for c in COLUMNS if c not in head]
    if missing:
        raise CountsError(
            f"missing column {missing[0]!r}; needs {', '.join(COLUMNS)}", path=path, field="header"
        )
    out = []
    for n, row in enumerate(rows[1:], start=first + 2):
        if not any(cell.strip() for cell in row):
            continue
        if len(row) != len(head):
            raise CountsError(
                f"has {len(row)} cells, the header has {len(head)}", path=path, field=f"row {n}"
            )
        out.append((f"row {n}", dict(zip(head, (c.strip() for c in row), strict=True))))
    return out


def read_counts(path: str | Path, tz: Any) -> pd.DataFrame:
    """Read a count file (CSV ``site,lat,lon,start,end,count`` or GeoJSON points).

    Times without an offset are local times in ``tz``. Returns one row per counting period
    with ``site, lat, lon, start, end, hours, count, where`` (``where`` names the row).
    """
    p = Path(path)
    recs = _records(p)
    if not recs:
        raise CountsError("has no counting periods (no rows)", path=p)
    out = []
    coords: dict[str, tuple[float, float, str]] = {}
    for where, r in recs:
        for c in COLUMNS:
            if r.get(c) in (None, ""):
                raise CountsError(f"{c} is missing", path=p, field=f"{where}: {c}")
        site = str(r["site"])
        try:
            lat, lon = float(r["lat"]), float(r["lon"])
        except (TypeError, ValueError) as exc:
            raise CountsError(
                "lat and lon must be numbers", path=p, field=f"{where}: lat/lon"
            ) from exc
        if not (-90 <= lat <= 90 and -180 <= lon <= 180):
            raise CountsError(
                f"lat {lat} / lon {lon} is not a place on Earth", path=p, field=f"{where}: lat/lon"
            )
        if site in coords and max(abs(coords[site][0] - lat), abs(coords[site][1] - lon)) > 1e-5:
            raise CountsError(
                f"site {site!r} has other coordinates than in {coords[site][2]}",
                path=p,
                field=f"{where}: lat/lon",
            )
        coords.setdefault(site, (lat, lon, where))
        start = _time(r["start"], tz, path=p, where=f"{where}: start")
        end = _time(r["end"], tz, path=p, where=f"{where}: end")
        if end <= start:
            raise CountsError(
                f"end {r['end']} is not after start {r['start']}", path=p, field=f"{where}: end"
            )
        if end - start > MAX_PERIOD:
            raise CountsError(
                f"a counting period of {end - start} is longer than 7 days",
                path=p,
                field=f"{where}: end",
            )
        count = _integer(r["count"], path=p, where=f"{where}: count")
        out.append(
            {
                "site": site,
                "lat": coords[site][0],
                "lon": coords[site][1],
                "start": start,
                "end": end,
                "hours": (end - start).total_seconds() / 3600,
                "count": count,
                "where": where,
            }
        )
    return pd.DataFrame(out)
