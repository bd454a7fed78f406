"""Read a RUNS file: the runs of a test day, their routes, time windows and vehicles.

:func:`read_runs` reads a RUNS file (YAML or CSV) into :class:`RunSpec` rows: the run's name,
its route (a route file or start / end / via points), its time window, an optional required
vehicle and a repeat count. :func:`parse_clock` and :func:`format_clock` convert ``"HH:MM"``
clock times to and from minutes after midnight.
"""

from __future__ import annotations

import csv
import io
import logging
import math
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import yaml

from routerisk.errors import InputFileError

# The package's logger, so that log lines name ``routerisk.analysis.planning`` as before the split.
logger = logging.getLogger(__package__)


#: Route file suffixes a RUNS file may refer to (those :func:`routerisk.io.routes.read_routes`
#: recognises).
ROUTE_SUFFIXES = (".geojson", ".json", ".gpx", ".xml", ".csv", ".txt")
#: Columns of a CSV RUNS file (``route_name`` is accepted as an optional extra column).
CSV_COLUMNS = (
    "name",
    "route",
    "start_lat",
    "start_lon",
    "end_lat",
    "end_lon",
    "earliest",
    "latest",
    "vehicle",
    "repeat",
)
_CSV_EXTRA = ("route_name",)
_YAML_KEYS = (
    "name",
    "route",
    "route_name",
    "start",
    "end",
    "via",
    "earliest",
    "latest",
    "vehicle",
    "repeat",
)
_CLOCK_RE = re.compile(r"^\s*(\d{1,2}):(\d{2})\s*$")


@dataclass(frozen=True)
class RunSpec:
    """One run of a test day, as read from a RUNS file.

    Attributes
    ----------
    name
        Unique name of the run.
    earliest, latest
        Window in minutes after local midnight: the run starts at or after ``earliest`` and
        ends at or before ``latest`` (``latest`` may be 1440, written "24:00").
    route
        Route file (GeoJSON, GPX or CSV), resolved against the RUNS file's folder; or None
        when the route is given by points.
    route_name
        Which feature or track of ``route`` to use; None takes the file's only route.
    start, end
        ``(lat, lon)`` of the route's ends when no route file is given.
    via
        ``(lat, lon)`` points the route passes through, in order.
    vehicle
        Id or name of the vehicle the run must use; None lets the planner choose.
    repeat
        How many times the run is driven that day; each repetition is placed on its own.
    source, where
        The RUNS file and the place in it (``"runs[2]"`` or ``"line 4"``), for messages.
    """

    name: str
    earliest: int
    latest: int
    route: Path | None = None
    route_name: str | None = None
    start: tuple[float, float] | None = None
    end: tuple[float, float] | None = None
    via: tuple[tuple[float, float], ...] = ()
    vehicle: str | None = None
    repeat: int = 1
    source: Path | None = None
    where: str = ""


def parse_clock(text: str) -> int:
    """Return minutes after midnight of an ``"HH:MM"`` clock time ("24:00" is 1440).

    Raises
    ------
    ValueError
        If ``text`` is not a valid clock time.
    """
    m = _CLOCK_RE.match(text)
    if m is None:
        raise ValueError(f"{text!r} is not a clock time HH:MM")
    hours, minutes = int(m.group(1)), int(m.group(2))
    if (hours, minutes) == (24, 0):
        return 1440
    if hours > 23 or minutes > 59:
        raise ValueError(f"{text!r} is not a clock time between 00:00 and 24:00")
    return hours * 60 + minutes


def format_clock(minutes: float) -> str:
    """Return ``"HH:MM"`` for minutes after midnight (rounded to the minute)."""
    total = int(round(minutes))
    return f"{total // 60:02d}:{total % 60:02d}"


@dataclass(frozen=True)
class _Where:
    """Place of one run in its RUNS file, to build errors that name the file and field."""

    path: Path
    label: str
    csv: bool

    def error(self, key: str, message: str) -> InputFileError:
        if self.csv:
            return InputFileError(f"{self.label}: {message}", path=self.path, field=key)
        return InputFileError(message, path=self.path, field=f"{self.label}.{key}")


def read_runs(path: str | Path) -> list[RunSpec]:
    """Read a RUNS file (``.yaml`` / ``.yml`` or ``.csv``) into validated run specifications.

    YAML holds a list of runs, either at the top level or under a ``runs:`` key; each run is
    a mapping with the keys ``name``, ``route`` (file relative to the RUNS file) and optional
    ``route_name``, or ``start: [lat, lon]``, ``end: [lat, lon]`` and optional ``via: [[lat,
    lon], ...]``; ``earliest`` and ``latest`` as quoted ``"HH:MM"``; optional ``vehicle`` and
    ``repeat`` (default 1). A CSV file has the columns of :data:`CSV_COLUMNS` (only ``name``,
    ``earliest`` and ``latest`` are required; ``route_name`` may be added; ``via`` has no CSV
    form). YAML is read with :func:`yaml.safe_load`.

    Parameters
    ----------
    path
        The RUNS file.

    Returns
    -------
    list of RunSpec
        In file order.

    Raises
    ------
    InputFileError
        With ``path`` the RUNS file and ``field`` the key (``"runs[2].earliest"``, 0-based
        index) or the CSV column, for an unreadable file, an unknown key or column, a
        duplicate name, a missing or unreadable route, a bad time, ``earliest`` not before
        ``latest``, or ``repeat`` below 1.
    """
    p = Path(path)
    suffix = p.suffix.lower()
    if suffix in (".yaml", ".yml"):
        rows = _yaml_rows(p)
    elif suffix == ".csv":
        rows = _csv_rows(p)
    else:
        raise InputFileError("a RUNS file must end in .yaml, .yml or .csv", path=p)
    runs: list[RunSpec] = []
    seen: dict[str, str] = {}
    for where, row in rows:
        run = _run_from_row(where, row)
        if run.name in seen:
            raise where.error("name", f"duplicate run name {run.name!r} (also at {seen[run.name]})")
        seen[run.name] = where.label
        runs.append(run)
    if not runs:
        raise InputFileError("the RUNS file holds no runs", path=p)
    logger.info(
        "read_runs read %d runs (%d jobs) from %s", len(runs), sum(r.repeat for r in runs), p
    )
    return runs


def _read_text(path: Path) -> str:
    try:
        return path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputFileError("file not found", path=path) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputFileError(f"cannot read the file ({exc})", path=path) from None


def _yaml_rows(path: Path) -> list[tuple[_Where, dict[str, Any]]]:
    try:
        data = yaml.safe_load(_read_text(path))
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        at = f" at line {mark.line + 1}" if mark is not None else ""
        raise InputFileError(f"not valid YAML{at}", path=path) from None
    prefix = "runs"
    if isinstance(data, dict):
        unknown = sorted(str(k) for k in data if k != "runs")
        if unknown:
            raise InputFileError(
                "unknown top-level key (expected only 'runs')", path=path, field=unknown[0]
            )
        data = data.get("runs")
    if not isinstance(data, list):
        raise InputFileError(
            "expected a list of runs (or a 'runs:' key holding one)", path=path, field=prefix
        )
    rows = []
    for i, item in enumerate(data):
        where = _Where(path, f"{prefix}[{i}]", csv=False)
        if not isinstance(item, dict):
            raise InputFileError("each run must be a mapping of keys", path=path, field=where.label)
        for key in item:
            if key not in _YAML_KEYS:
                raise where.error(str(key), f"unknown key (known: {', '.join(_YAML_KEYS)})")
        rows.append((where, dict(item)))
    return rows


def _csv_rows(path: Path) -> list[tuple[_Where, dict[str, Any]]]:
    reader = csv.reader(io.StringIO(_read_text(path), newline=""))
    try:
        header = [h.strip() for h in next(reader)]
    except StopIteration:
        raise InputFileError("the CSV file is empty", path=path) from None
    known = CSV_COLUMNS + _CSV_EXTRA
    for col in header:
        if col not in known:
            raise InputFileError(
                f"unknown column (known: {', '.join(known)})", path=path, field=col
            )
        if header.count(col) > 1:
            raise InputFileError("column given twice", path=path, field=col)
    for col in ("name", "earliest", "latest"):
        if col not in header:
            raise InputFileError("required column missing", path=path, field=col)
    rows = []
    for values in reader:
        line_no = reader.line_num
        if not any(v.strip() for v in values):
            continue
        where = _Where(path, f"line {line_no}", csv=True)
        if len(values) != len(header):
            raise InputFileError(
                f"line {line_no}: {len(values)} values for {len(header)} columns", path=path
            )
        cells = {h: v.strip() for h, v in zip(header, values, strict=True) if v.strip()}
        plain = ("name", "route", "route_name", "earliest", "latest", "vehicle", "repeat")
        row: dict[str, Any] = {k: cells[k] for k in plain if k in cells}
        for end in ("start", "end"):
            lat, lon = cells.get(f"{end}_lat"), cells.get(f"{end}_lon")
            if lat is None and lon is None:
                continue
            if lat is None or lon is None:
                col = f"{end}_lat" if lat is None else f"{end}_lon"
                raise where.error(col, f"{end}_lat and {end}_lon go together")
            row[end] = [_csv_float(where, f"{end}_lat", lat), _csv_float(where, f"{end}_lon", lon)]
        if "repeat" in row:
            try:
                row["repeat"] = int(row["repeat"])
            except ValueError:
                message = f"repeat {row['repeat']!r} is not a whole number"
                raise where.error("repeat", message) from None
        rows.append((where, row))
    return rows


def _csv_float(where: _Where, column: str, text: str) -> float:
    try:
        return float(text)
    except ValueError:
        raise where.error(column, f"{text!r} is not a number") from None


def _point_field(where: _Where, key: str) -> tuple[str, str]:
    """Return the field names of a point's latitude and longitude (CSV columns or YAML key)."""
    if where.csv:
        return f"{key}_lat", f"{key}_lon"
    return key, key


def _point(where: _Where, key: str, value: Any) -> tuple[float, float]:
    lat_field, lon_field = _point_field(where, key)
    if (
        not isinstance(value, list | tuple)
        or len(value) != 2
        or not all(isinstance(v, int | float) and not isinstance(v, bool) for v in value)
    ):
        raise where.error(key, "expected [lat, lon], two numbers")
    lat, lon = float(value[0]), float(value[1])
    if not (math.isfinite(lat) and -90.0 <= lat <= 90.0):
        raise where.error(lat_field, f"latitude {lat} is outside -90..90")
    if not (math.isfinite(lon) and -180.0 <= lon <= 180.0):
        raise where.error(lon_field, f"longitude {lon} is outside -180..180")
    return lat, lon


def _clock(where: _Where, key: str, value: Any) -> int:
    if value is None:
        raise where.error(key, f'missing {key} time ("HH:MM")')
    if isinstance(value, int) and not isinstance(value, bool):
        raise where.error(
            key,
            f'{key} must be a quoted "HH:MM" string; YAML reads an unquoted 10:30 as the '
            f"number {value}, so write it in quotes",
        )
    if not isinstance(value, str):
        raise where.error(key, f'{key} must be a "HH:MM" string')
    try:
        return parse_clock(value)
    except ValueError as exc:
        raise where.error(key, str(exc)) from None


def _text(where: _Where, key: str, value: Any) -> str | None:
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, str | int):
        raise where.error(key, f"{key} must be text")
    text = str(value).strip()
    return text or None


def _run_from_row(where: _Where, row: dict[str, Any]) -> RunSpec:
    name = _text(where, "name", row.get("name"))
    if name is None:
        raise where.error("name", "missing run name")

    route_ref = _text(where, "route", row.get("route"))
    route_name = _text(where, "route_name", row.get("route_name"))
    has_points = any(row.get(k) is not None for k in ("start", "end", "via"))
    route: Path | None = None
    start = end = None
    via: tuple[tuple[float, float], ...] = ()
    if route_ref is not None:
        if has_points:
            raise where.error("route", "give either route or start/end/via, not both")
        route = where.path.parent / route_ref
        if route.suffix.lower() not in ROUTE_SUFFIXES:
            raise where.error("route", f"route file must end in {', '.join(ROUTE_SUFFIXES)}")
        if not route.is_file():
            raise where.error("route", f"route file {route_ref!r} not found beside the RUNS file")
    else:
        if route_name is not None:
            raise where.error("route_name", "route_name needs a route file")
        if not has_points:
            raise where.error("route", "missing route: give route: FILE, or start: and end:")
        for key in ("start", "end"):
            if row.get(key) is None:
                raise where.error(_point_field(where, key)[0], f"missing {key} point")
        start = _point(where, "start", row["start"])
        end = _point(where, "end", row["end"])
        raw_via = row.get("via")
        if raw_via is not None:
            if not isinstance(raw_via, list):
                raise where.error("via", "expected a list of [lat, lon] points")
            via = tuple(_point(where, f"via[{i}]", v) for i, v in enumerate(raw_via))

    earliest = _clock(where, "earliest", row.get("earliest"))
    latest = _clock(where, "latest", row.get("latest"))
    if earliest >= latest:
        raise where.error(
            "latest",
            f"latest {format_clock(latest)} is not after earliest {format_clock(earliest)}",
        )
    repeat = row.get("repeat", 1)
    if repeat is None:
        repeat = 1
    if isinstance(repeat, bool) or not isinstance(repeat, int):
        raise where.error("repeat", "repeat must be a whole number")
    if repeat < 1:
        raise where.error("repeat", f"repeat is {repeat}; it must be 1 or more")
    return RunSpec(
        name=name,
        earliest=earliest,
        latest=latest,
        route=route,
        route_name=route_name,
        start=start,
        end=end,
        via=via,
        vehicle=_text(where, "vehicle", row.get("vehicle")),
        repeat=repeat,
        source=where.path,
        where=where.label,
    )
