"""Reading the requests of ``routerisk serve``: JSON bodies, uploaded files, option values.

A request the API refuses raises :class:`RequestError` (an HTTP status and a one-line
message); a value the commands would refuse raises the same
:class:`routerisk.errors.RouteriskError` the command raises. Files sent by the page are written
under their own base name into a private temporary folder (:class:`_Upload`), so the readers
the commands use read them.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import json
import math
import os
import re
import tempfile
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from starlette.requests import Request

from routerisk.analysis import scoring
from routerisk.errors import OptionError
from routerisk.io import routes
from routerisk.io.atomic import dumps_json

#: Largest request body accepted (bytes); ``--max-upload-mb`` changes it.
MAX_UPLOAD_BYTES = 5 * 1024 * 1024
_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._ -]{0,120}$")


class RequestError(Exception):
    """A request the API refuses: an HTTP status and a one-line message."""

    def __init__(self, message: str, status: int = 400) -> None:
        super().__init__(message)
        self.message = " ".join(message.split())
        self.status = status


_PATH_REFUSED = "the server reads no file by path; send the file's content (open it on the page)"


@dataclass
class _Upload:
    """The private folder of one request, the files written in it and the size limit."""

    folder: Path
    inputs: dict[str, Path]
    max_bytes: int = MAX_UPLOAD_BYTES

    def scrub(self, text: str) -> str:
        """Return ``text`` with the private folder removed from file names."""
        return text.replace(f"{self.folder}{os.sep}", "").replace(str(self.folder), ".")

    def write(self, name: str, text: str, *, role: str | None) -> Path:
        """Write a file sent by the page under its base name; return its path."""
        if "/" in name or "\\" in name or name in (".", ".."):
            raise RequestError(_PATH_REFUSED)
        if not _NAME.match(name):
            raise RequestError(f"file name {name!r}: use letters, digits, '.', '_', '-' only")
        try:
            data = text.encode("utf-8")
        except UnicodeEncodeError:
            raise RequestError(
                f"file {name!r}: the text holds an unpaired surrogate (not a Unicode text)"
            ) from None
        if len(data) > self.max_bytes:
            raise RequestError(_too_big(len(data), self.max_bytes), status=413)
        p = self.folder / name
        if p.exists():
            raise RequestError(f"file name {name!r} is sent twice")
        p.write_bytes(data)
        self.inputs[role or name] = p
        return p

    def write_file(self, spec: Any, *, role: str | None) -> Path:
        """Write ``{"name", "text"}``; a bare string (a path) is refused."""
        if isinstance(spec, str):
            raise RequestError(_PATH_REFUSED)
        if (
            not isinstance(spec, dict)
            or not isinstance(spec.get("name"), str)
            or not isinstance(spec.get("text"), str)
        ):
            raise RequestError("file: must be an object {name, text} with the file's content")
        return self.write(spec["name"], spec["text"], role=role)


@contextlib.contextmanager
def _upload(max_bytes: int) -> Iterator[_Upload]:
    with tempfile.TemporaryDirectory(prefix="routerisk-serve-") as tmp:
        yield _Upload(Path(tmp), {}, max_bytes)


def _too_big(n: int, limit: int) -> str:
    return (
        f"the upload is {n / 1048576:.1f} MB; the limit is {limit / 1048576:g} MB "
        "(routerisk serve --max-upload-mb)"
    )


def _integer(doc: dict[str, Any], key: str, default: int | None) -> Any:
    v = doc.get(key, default)
    if v is None:
        return None
    if isinstance(v, bool) or not isinstance(v, int):
        raise RequestError(f"{key}: must be a whole number, got {v!r}")
    return v


def _number(doc: dict[str, Any], key: str, default: float) -> float:
    v = doc.get(key, default)
    if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
        raise RequestError(f"{key}: must be a number, got {v!r}")
    return float(v)


def _share(doc: dict[str, Any], key: str, default: float | None) -> float | None:
    import argparse

    from routerisk.cli.suggest import _share as check

    v = doc.get(key, default)
    if v is None:
        return None
    option = "--" + key.replace("_", "-")
    try:
        return check(str(v))
    except argparse.ArgumentTypeError as exc:
        raise OptionError(str(exc), field=option) from None


def parse_departs(doc: dict[str, Any], tz: Any, *, key: str = "departs") -> list[dt.datetime]:
    """Parse the departures of a request as ``--depart`` does."""
    raw = doc.get(key, [])
    if isinstance(raw, str):
        raw = [raw]
    if not isinstance(raw, list) or not all(isinstance(x, str) for x in raw):
        raise RequestError(f"{key}: must be a list of ISO 8601 date-times")
    return [scoring.parse_depart(d, tz) for d in raw]


def parse_route(doc: dict[str, Any], up: _Upload, tz: Any) -> list[routes.PlannedRoute]:
    """Return the routes of a request: clicked waypoints, GeoJSON or a route file."""
    spec = doc.get("route")
    if not isinstance(spec, dict):
        raise RequestError("route: must be an object with waypoints, geojson or file")
    if "waypoints" in spec:
        pts = spec["waypoints"]
        name = spec.get("name", "planned route")
        if not isinstance(name, str) or not name.strip():
            raise RequestError("route.name: must be a non-empty text")
        if (
            not isinstance(pts, list)
            or len(pts) < 2
            or not all(
                isinstance(p, list)
                and len(p) == 2
                and all(
                    isinstance(c, int | float) and not isinstance(c, bool) and math.isfinite(c)
                    for c in p
                )
                for p in pts
            )
        ):
            raise RequestError("route.waypoints: must be at least two [lon, lat] pairs")
        lonlat = np.array(pts, dtype=float)
        if np.any(np.abs(lonlat[:, 0]) > 180) or np.any(np.abs(lonlat[:, 1]) > 90):
            raise RequestError("route.waypoints: longitude or latitude out of range")
        depart = None
        if spec.get("depart") is not None:
            depart = parse_departs({"depart": spec["depart"]}, tz, key="depart")[0]
        # via points shape the plan; ``suggest`` keeps them only when marked required
        keep = bool(spec.get("keep_vias", False))
        return [
            routes.PlannedRoute(
                name.strip(),
                lonlat,
                required=np.full(len(lonlat), keep, dtype=bool),
                depart=depart,
            )
        ]
    if "geojson" in spec:
        gj = spec["geojson"]
        if isinstance(gj, str):
            raise RequestError(_PATH_REFUSED)
        path = up.write("route.geojson", dumps_json(gj), role="routes")
    elif "file" in spec:
        path = up.write_file(spec["file"], role="routes")
    else:
        raise RequestError("route: give waypoints, geojson or file")
    return routes.read_routes(path, default_tz=tz)


async def read_body(request: Request, max_bytes: int) -> dict[str, Any]:
    """Return the JSON object of a request body of at most ``max_bytes`` bytes."""
    declared = request.headers.get("content-length")
    if declared and declared.isdigit() and int(declared) > max_bytes:
        raise RequestError(_too_big(int(declared), max_bytes), status=413)
    raw = b""
    async for chunk in request.stream():
        raw += chunk
        if len(raw) > max_bytes:
            raise RequestError(_too_big(len(raw), max_bytes), status=413)
    try:
        doc = json.loads(raw.decode("utf-8"))
    except UnicodeDecodeError:
        raise RequestError("request body: not UTF-8 text") from None
    except json.JSONDecodeError as exc:
        raise RequestError(
            f"request body: not valid JSON ({exc.msg} at line {exc.lineno} column {exc.colno})"
        ) from None
    if not isinstance(doc, dict):
        raise RequestError("request body: must be a JSON object")
    return doc
