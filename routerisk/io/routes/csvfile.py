"""Read and write routes as CSV.

A header with the columns ``route``, ``lat``, ``lon`` and optionally ``time``, ``required``
(true/false, yes/no, 1/0) and ``depart``; rows are grouped by ``route`` in the order routes
first appear, keeping file order within a route. Errors name the line number (the header is
row 1). :func:`_csv_text` writes routes in the same columns.
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Sequence
from datetime import datetime, tzinfo
from pathlib import Path
from typing import Any

import numpy as np

from routerisk.errors import InputFileError, RouteInputError
from routerisk.io.routes.common import (
    _CSV_ALIASES,
    _FALSE,
    _TRUE,
    PlannedRoute,
    _finish,
    _parse_time,
    _Parsed,
    _short,
)


def _csv_columns(path: Path, header: list[str]) -> dict[str, int]:
    """Return the position of each known column of the header (route, lat, lon required)."""
    names = [h.strip().lower() for h in header]
    cols: dict[str, int] = {}
    for key, aliases in _CSV_ALIASES.items():
        found = [i for i, h in enumerate(names) if h in aliases]
        if len(found) > 1:
            raise RouteInputError(
                f"column {key!r} appears {len(found)} times", path=path, field="row 1"
            )
        if found:
            cols[key] = found[0]
    for key in ("route", "lat", "lon"):
        if key not in cols:
            semicolons = len(names) == 1 and ";" in names[0]
            hint = " (the file must be comma separated)" if semicolons else ""
            raise RouteInputError(
                f"missing column {key!r}; the header needs route, lat, lon{hint}",
                path=path,
                field="row 1",
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
            path=path,
            field=field,
        )
    return value


def _csv_flag(cell: str, path: Path, field: str) -> bool:
    text = cell.strip().lower()
    if text in _TRUE:
        return True
    if text in _FALSE:
        return False
    raise RouteInputError(
        f"required must be true or false, got {_short(cell)}", path=path, field=field
    )


def _csv_row(
    row: list[str], cols: dict[str, int], line: int, tz: tzinfo | None, path: Path
) -> tuple[str, list[float], datetime | None, bool, datetime | None]:
    """Return route name, [lon, lat], time, required and depart of one data row."""
    if len(row) <= max(cols.values()):
        raise RouteInputError(
            f"has {len(row)} values, too few for the header", path=path, field=f"row {line}"
        )
    name = row[cols["route"]].strip()
    if not name:
        raise RouteInputError("route name is empty", path=path, field=f"row {line}: route")
    ll = [
        _csv_coordinate(row[cols[k]].strip(), k, path, f"row {line}: {k}") for k in ("lon", "lat")
    ]

    def when(key: str) -> datetime | None:
        if key not in cols or not row[cols[key]].strip():
            return None
        return _parse_time(
            row[cols[key]], tz=tz, naive_utc=False, path=path, field=f"row {line}: {key}"
        )

    required = "required" in cols and _csv_flag(
        row[cols["required"]], path, f"row {line}: required"
    )
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
            g = groups.setdefault(
                name, {"ll": [], "t": [], "req": [], "depart": None, "line": line}
            )
            g["ll"].append(ll)
            g["t"].append(when)
            g["req"].append(req)
            if dep is not None:
                if g["depart"] is not None and dep != g["depart"]:
                    raise RouteInputError(
                        f"depart differs from an earlier row of route {name!r}",
                        path=path,
                        field=f"row {line}: depart",
                    )
                g["depart"] = dep
    except StopIteration:
        raise InputFileError("file is empty", path=path) from None
    except csv.Error as exc:
        raise InputFileError(
            f"is not valid CSV ({exc})", path=path, field=f"row {reader.line_num}"
        ) from None
    if not groups:
        raise RouteInputError("holds a header but no route rows", path=path, field="row 2")
    routes: list[_Parsed] = []
    for name, g in groups.items():
        times = g["t"] if any(t is not None for t in g["t"]) else None
        field = f"row {g['line']}: route"
        route = _finish(
            name=name,
            lonlat=np.array(g["ll"], dtype=float),
            times=times,
            required=np.array(g["req"], dtype=bool),
            depart=g["depart"],
            path=path,
            field=field,
        )
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
            w.writerow(
                [
                    r.name,
                    repr(float(lat)),
                    repr(float(lon)),
                    t,
                    "true" if r.required[i] else "false",
                    dep,
                ]
            )
    return buf.getvalue()
