"""Reading event logs (CSV or GeoJSON points): the good rows and the rejected rows.

Every rejected row keeps its reason; nothing is dropped silently.
"""

from __future__ import annotations

import json
import logging
import math
import re
from datetime import UTC, datetime, tzinfo
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import NDArray

from routerisk.errors import InputFileError
from routerisk.io.timezones import resolve_zone

# The logger of the early-warning statistics, so log lines read as before the split.
log = logging.getLogger("routerisk.analysis.early_warning")

__all__ = ["EVENT_COLUMNS", "OPTIONAL_EVENT_COLUMNS", "read_events"]

EVENT_COLUMNS: tuple[str, ...] = ("time", "lat", "lon", "type")
"""Columns (CSV) or properties and geometry (GeoJSON) every event log must have."""

OPTIONAL_EVENT_COLUMNS: tuple[str, ...] = ("vehicle", "severity")
"""Columns kept when present; any other column is kept as text as well."""

_CLOCK = re.compile(r"\d[Tt ]\d")


def read_events(
    path: str | Path, *, tz: str | tzinfo | None = None
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Read an event log and split it into good and rejected rows.

    Parameters
    ----------
    path
        A CSV file with columns ``time, lat, lon, type`` and optionally ``vehicle`` and
        ``severity`` (header names are matched after stripping and lower-casing), or a GeoJSON
        FeatureCollection of Point features (``[lon, lat]``) whose properties hold ``time``,
        ``type`` and the optional fields. A ``.geojson`` / ``.json`` suffix, or a file whose
        first non-blank character is ``{``, is read as GeoJSON.
    tz
        Time zone (an IANA name such as ``"Etc/GMT+3"`` or a tzinfo) for times written without
        a UTC offset. Without it such rows are rejected. Local times that a daylight-saving
        change makes ambiguous or nonexistent are rejected, never guessed.

    Returns
    -------
    good
        One row per accepted event, in file order: ``time`` (UTC, ``datetime64[us, UTC]``),
        ``lat``, ``lon`` (float degrees), ``type`` (stripped text), ``vehicle`` and ``severity``
        when present (severity as float when every non-empty value is a number, else text), any
        other columns as text, and ``row`` (1-based record number in the file: data line after
        the header, or feature index + 1).
    rejected
        The rejected records as read (text), with ``row`` and ``reason`` (every problem of the
        record, joined by ``"; "``).

    Raises
    ------
    InputFileError
        If the file is missing, unreadable, not valid CSV / GeoJSON, or lacks a required column
        (``field`` names the column).

    Notes
    -----
    Coordinates are checked for being numbers in range (lat in [-90, 90], lon in [-180, 180]);
    swapped lat and lon cannot be told apart from valid coordinates here. Times are ISO 8601
    with a time of day (``2024-05-01T08:15:00+00:00``, ``...Z`` or naive with ``tz``).
    """
    p = Path(path)
    zone = resolve_zone(tz, field="tz")
    if not p.is_file():
        raise InputFileError("event log not found", path=p)
    raw = _raw_geojson(p) if _is_geojson(p) else _raw_csv(p)
    good, rejected = _validate_events(raw, zone=zone)
    log.info("read_events read %d events from %s, rejected %d", len(good), p, len(rejected))
    return good, rejected


def _is_geojson(path: Path) -> bool:
    if path.suffix.lower() in {".geojson", ".json"}:
        return True
    try:
        with open(path, encoding="utf-8-sig", errors="replace") as fh:
            head = fh.read(4096).lstrip()
    except OSError as exc:
        raise InputFileError(f"cannot read: {exc.strerror}", path=path) from exc
    return head.startswith("{")


def _raw_csv(path: Path) -> pd.DataFrame:
    try:
        raw = pd.read_csv(
            path, dtype=str, keep_default_na=False, encoding="utf-8-sig", skip_blank_lines=True
        )
    except pd.errors.EmptyDataError as exc:
        raise InputFileError("file is empty (no header)", path=path) from exc
    except (pd.errors.ParserError, UnicodeDecodeError, ValueError) as exc:
        raise InputFileError(f"not a readable CSV file: {exc}", path=path) from exc
    except OSError as exc:
        raise InputFileError(f"cannot read: {exc.strerror}", path=path) from exc
    names = [str(c).strip().lower() for c in raw.columns]
    dupes = sorted({n for n in names if names.count(n) > 1})
    if dupes:
        raise InputFileError("column appears more than once", path=path, field=dupes[0])
    raw.columns = pd.Index(names)
    for col in EVENT_COLUMNS:
        if col not in raw.columns:
            raise InputFileError("required column is missing", path=path, field=col)
    raw = raw.astype(object).where(raw.notna(), "")
    raw.insert(0, "row", np.arange(1, len(raw) + 1, dtype=np.int64))
    raw["_geometry_problem"] = ""
    return raw.reset_index(drop=True)


def _raw_geojson(path: Path) -> pd.DataFrame:
    try:
        with open(path, encoding="utf-8-sig") as fh:
            doc = json.load(fh)
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise InputFileError(f"not valid GeoJSON: {exc}", path=path) from exc
    except OSError as exc:
        raise InputFileError(f"cannot read: {exc.strerror}", path=path) from exc
    if not isinstance(doc, dict) or doc.get("type") != "FeatureCollection":
        raise InputFileError("GeoJSON is not a FeatureCollection", path=path, field="type")
    features = doc.get("features")
    if not isinstance(features, list):
        raise InputFileError("FeatureCollection has no features list", path=path, field="features")
    records: list[dict[str, Any]] = []
    seen: set[str] = set()
    for n, feat in enumerate(features, start=1):
        props = feat.get("properties") if isinstance(feat, dict) else None
        props = props if isinstance(props, dict) else {}
        rec: dict[str, Any] = {"row": n}
        for key, value in props.items():
            name = str(key).strip().lower()
            if name in {"lat", "lon", "row", "reason", "_geometry_problem"}:
                name = f"property_{name}"  # coordinates come from the geometry only
            rec[name] = "" if value is None else str(value)
            seen.add(name)
        geom = feat.get("geometry") if isinstance(feat, dict) else None
        rec["lat"], rec["lon"], rec["_geometry_problem"] = _point_of(geom)
        records.append(rec)
    for col in ("time", "type"):
        if records and col not in seen:
            raise InputFileError("no feature has this property", path=path, field=col)
    cols = ["row", *EVENT_COLUMNS, "_geometry_problem"]
    raw = pd.DataFrame.from_records(records) if records else pd.DataFrame(columns=cols)
    for col in cols:
        if col not in raw.columns:
            raw[col] = ""
    raw = raw.astype(object).where(raw.notna(), "")
    raw["row"] = raw["row"].astype(np.int64)
    return raw.reset_index(drop=True)


def _point_of(geom: Any) -> tuple[str, str, str]:
    if not isinstance(geom, dict):
        return "", "", "no geometry"
    if geom.get("type") != "Point":
        return "", "", f"geometry is {geom.get('type')!s}, not Point"
    coords = geom.get("coordinates")
    if not isinstance(coords, list) or len(coords) < 2:
        return "", "", "point has no [lon, lat] coordinates"
    return str(coords[1]), str(coords[0]), ""


def _coordinate(text: pd.Series, name: str, limit: float) -> tuple[NDArray[np.float64], list[str]]:
    stripped = text.astype(str).str.strip()
    values = pd.to_numeric(stripped, errors="coerce").to_numpy(dtype=float)
    reasons = []
    for s, v in zip(stripped, values, strict=True):
        if s == "":
            reasons.append(f"{name} missing")
        elif math.isnan(v):
            reasons.append(f"{name} not a number: {s!r}")
        elif not -limit <= v <= limit:
            reasons.append(f"{name} out of range [-{limit:g}, {limit:g}]: {s}")
        else:
            reasons.append("")
    return values, reasons


def _parse_time(text: str, zone: tzinfo | None) -> tuple[datetime | None, str]:
    s = text.strip()
    if not s:
        return None, "time missing"
    try:
        t = datetime.fromisoformat(s)
    except ValueError:
        return None, f"time not ISO 8601: {s!r}"
    if not _CLOCK.search(s):
        return None, f"time has no time of day: {s!r}"
    if t.tzinfo is not None and t.utcoffset() is not None:
        return t.astimezone(UTC), ""
    if zone is None:
        return None, f"time has no UTC offset and no tz was given: {s!r}"
    wall = t.replace(tzinfo=None)
    candidates = []
    for fold in (0, 1):
        local = wall.replace(tzinfo=zone, fold=fold)
        if local.astimezone(UTC).astimezone(zone).replace(tzinfo=None) == wall:
            candidates.append(local.astimezone(UTC))
    if not candidates:
        return None, f"local time does not exist in {zone} (clock change): {s!r}"
    if len(set(candidates)) > 1:
        return None, f"local time is ambiguous in {zone} (clock change): {s!r}"
    return candidates[0], ""


def _validate_events(
    raw: pd.DataFrame, *, zone: tzinfo | None
) -> tuple[pd.DataFrame, pd.DataFrame]:
    lat, lat_why = _coordinate(raw["lat"], "lat", 90.0)
    lon, lon_why = _coordinate(raw["lon"], "lon", 180.0)
    parsed = [_parse_time(str(t), zone) for t in raw["time"]]
    types = raw["type"].astype(str).str.strip()
    reasons = []
    for i in range(len(raw)):
        parts = [
            raw["_geometry_problem"].iat[i],
            lat_why[i] if not raw["_geometry_problem"].iat[i] else "",
            lon_why[i] if not raw["_geometry_problem"].iat[i] else "",
            parsed[i][1],
            "type missing" if types.iat[i] == "" else "",
        ]
        reasons.append("; ".join(p for p in parts if p))
    bad = np.array([r != "" for r in reasons], dtype=bool)

    rejected = raw.loc[bad].drop(columns="_geometry_problem").copy()
    rejected["reason"] = [r for r, b in zip(reasons, bad, strict=True) if b]
    rejected = rejected.reset_index(drop=True)

    keep = ~bad
    good = raw.loc[keep].drop(columns="_geometry_problem").copy()
    times = [t for (t, _), k in zip(parsed, keep, strict=True) if k]
    good["time"] = pd.Series(pd.to_datetime(times, utc=True), index=good.index).astype(
        "datetime64[us, UTC]"
    )
    good["lat"] = lat[keep]
    good["lon"] = lon[keep]
    good["type"] = types[keep]
    for col in good.columns:
        if col in {"row", "time", "lat", "lon", "type"}:
            continue
        text = good[col].astype(str).str.strip()
        if col == "severity":
            nonblank = text[text != ""]
            numbers = pd.to_numeric(nonblank, errors="coerce")
            if len(nonblank) and not numbers.isna().any():
                good[col] = pd.to_numeric(text.where(text != ""), errors="coerce")
                continue
        good[col] = text
    front = ["time", "lat", "lon", "type"]
    front += [c for c in OPTIONAL_EVENT_COLUMNS if c in good.columns]
    rest = [c for c in good.columns if c not in front and c != "row"]
    good = good[[*front, *rest, "row"]].reset_index(drop=True)
    return good, rejected
