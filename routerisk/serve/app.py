"""The JSON API and the page of ``routerisk serve`` (Starlette).

Every endpoint calls the functions the commands call:
:func:`routerisk.analysis.scoring.score_routes` (``score``),
:func:`routerisk.analysis.alternatives.suggest_routes` (``suggest``),
:func:`routerisk.analysis.review.review_areas` (``review``) and
:func:`routerisk.analysis.dayplan.plan_day` (``plan``); files sent by the page are written under
their own base name into a private temporary folder and read by the same readers, so a figure or a
one-line error is the one the command gives for the same file. The work runs in worker threads, so
the server keeps answering while a request computes.

Endpoints (JSON in, JSON out; every answer carries ``made_from`` and ``caution``):

``GET /api/info``
    Bounds, bands and colours, categories, rules, time zone of the network.
``GET /api/network?bbox=W,S,E,N&zoom=Z``
    Edges (one per street segment, the higher band of its two directions) and sources in the
    box, simplified for the zoom level (see :data:`MAX_FEATURES` and :func:`Service.network`).
``POST /api/score``
    ``{"route": ROUTE, "departs": [ISO, ...]}``; ROUTE is ``{"waypoints": [[lon, lat], ...],
    "name": ..., "keep_vias": false}`` (via points required only with ``keep_vias``),
    ``{"geojson": {...}}`` or ``{"file": {"name": ..., "text": ...}}``.
``POST /api/week``
    ``{"route": ROUTE, "date": ISO date}``: the route's risk departing at each of the 168
    hours of that date's week (Monday 00:00 first), with
    :meth:`routerisk.analysis.scoring.Scorer.quick`.
``POST /api/alternatives``
    ``{"route": ROUTE, "departs": [ISO], "count", "max_extra_time", "max_extra_length",
    "min_difference", "keep_every"}`` (the options and bounds of ``suggest``).
``POST /api/review``
    ``{"area": GeoJSON or {"file": ...}, "what_if": [[SPEC, ...], ...], "at", "top"}``.
``POST /api/plan``
    ``{"runs": {"name", "text"}, "routes": [{"name", "text"}], "date", "vehicles", "step",
    "turnaround"}``.
``POST /api/export``
    ``{"name", "depart", "line": [[lon, lat], ...], "format": "geojson" | "gpx"}``: a route
    file :func:`routerisk.io.routes.read_routes` reads back.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import json
import math
import os
import re
import secrets
import tempfile
from collections.abc import Awaitable, Callable, Iterator
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Any, cast

import anyio
import numpy as np
import shapely
from starlette.applications import Starlette
from starlette.middleware import Middleware
from starlette.middleware.trustedhost import TrustedHostMiddleware
from starlette.requests import Request
from starlette.responses import FileResponse, Response
from starlette.routing import Mount, Route
from starlette.staticfiles import StaticFiles

from routerisk import CAUTION, __version__, matching
from routerisk.analysis import scoring
from routerisk.errors import OptionError, RouteriskError
from routerisk.io import routes
from routerisk.io.atomic import dumps_json, provenance
from routerisk.render import mapview

#: Largest request body accepted (bytes); ``--max-upload-mb`` changes it.
MAX_UPLOAD_BYTES = 5 * 1024 * 1024
#: Most edges ``/api/network`` sends for one view (the highest bands, then the longest, win).
MAX_FEATURES = 6000
#: Below this zoom ``/api/network`` sends one MultiLineString per band (no street labels).
MERGE_BELOW_ZOOM = 14
#: Most exposure sources ``/api/network`` sends for one view.
MAX_SOURCES = 2000
#: Spacing (m) of the points of an exported line: dense, so it is read back as a trace.
EXPORT_STEP_M = 15.0
#: Hosts the page answers when bound to loopback (a guard against DNS rebinding).
LOOPBACK_HOSTS = ("127.0.0.1", "localhost", "::1", "[::1]")
_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._ -]{0,120}$")
TOKEN_HEADER = "x-routerisk-token"  # noqa: S105 - a header name, not a secret
TOKEN_COOKIE = "routerisk_token"  # noqa: S105 - a cookie name, not a secret


class RequestError(Exception):
    """A request the API refuses: an HTTP status and a one-line message."""

    def __init__(self, message: str, status: int = 400) -> None:
        super().__init__(message)
        self.message = " ".join(message.split())
        self.status = status


def is_loopback(host: str) -> bool:
    """Tell whether ``host`` names this machine only (127.0.0.0/8, ::1, localhost)."""
    import ipaddress

    h = host.strip("[]")
    if h == "localhost":
        return True
    try:
        return ipaddress.ip_address(h).is_loopback
    except ValueError:
        return False


# ----------------------------------------------------------------------------- the service


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


class Service:
    """The loaded network and what every request shares (built once at start)."""

    def __init__(self, net: Any, *, max_upload: int = MAX_UPLOAD_BYTES) -> None:
        import geopandas as gpd

        self.net = net
        self.max_upload = int(max_upload)
        self.index = matching.RoadIndex(net.graph)
        self.scorer = scoring.Scorer(net)
        self.scorer.positions([])  # build the lazy look-up before threads share it
        self.scorer._headings()
        from routerisk.analysis.alternatives import Suggester

        self.suggester = Suggester(self.scorer)
        self.suggester.g.time_tree(0, 1.0)  # build the lazy matrices before threads share them
        e = net.edges
        self.geoms_ll = (
            gpd.GeoSeries(e.geometry.to_numpy(), crs=e.crs).to_crs("EPSG:4326").to_numpy()
        )
        prof = net.profile
        band_names = [b.name for b in prof.bands]
        rank = np.array([band_names.index(b) if b in band_names else 0 for b in e["band"]])
        u = e.index.get_level_values(0).to_numpy()
        v = e.index.get_level_values(1).to_numpy()
        length = e["length"].to_numpy(dtype=float)
        # one feature per street segment: the two directions of a two-way street share a key
        # (end nodes in either order and the length to 0.1 m); the higher band is kept
        import pandas as pd

        keys = pd.DataFrame(
            {
                "a": np.minimum(u, v),
                "b": np.maximum(u, v),
                "m": np.round(length, 1),
                "rank": -rank,
                "row": np.arange(len(e)),
            }
        )
        first = keys.sort_values(["rank", "row"], kind="stable").drop_duplicates(["a", "b", "m"])
        keep_a = np.sort(first["row"].to_numpy(dtype=np.int64))
        self._view_rows = keep_a
        self._view_tree = shapely.STRtree(self.geoms_ll[keep_a])
        self._rank = rank
        self._length = length
        self._names = e["name"].fillna("").astype(str).to_numpy()
        self._bands = e["band"].astype(str).to_numpy()
        src = net.sources
        if len(src):
            pts = gpd.GeoSeries(src.geometry.representative_point().to_numpy(), crs=src.crs).to_crs(
                "EPSG:4326"
            )
            self._src_xy = shapely.get_coordinates(pts.to_numpy())
            self._src_cat = src["category"].astype(str).to_numpy()
            self._src_name = (
                src["name"].fillna("").astype(str).to_numpy()
                if "name" in src.columns
                else np.full(len(src), "", dtype=object)
            )
        else:
            self._src_xy = np.zeros((0, 2))
            self._src_cat = self._src_name = np.array([], dtype=object)
        self.bounds = tuple(float(x) for x in shapely.total_bounds(self.geoms_ll))
        self._to_ll = self.scorer._to_ll

    # ---------------------------------------------------------------- shared pieces

    def made_from(self, upload: _Upload | None = None) -> dict[str, Any]:
        """Return the provenance of an answer (tool, profile, network source, files sent)."""
        inputs = dict(upload.inputs) if upload else {}
        return provenance(profile=self.net.profile.fingerprint, network=self.net, inputs=inputs)  # type: ignore[arg-type]

    def info(self) -> dict[str, Any]:
        """Return what the page needs to draw the network and its controls."""
        prof = self.net.profile
        from routerisk.network.folder import zone_label

        return {
            "bounds": self.bounds,
            "bands": [
                {"name": b.name, "from": b.lower, "colour": mapview.band_colour(prof, b.name)}
                for b in prof.bands
            ],
            "categories": [
                {
                    "name": c.name,
                    "label": c.label,
                    "colour": mapview.CATEGORY_COLOURS.get(c.name, "#888888"),
                }
                for c in prof.categories
            ],
            "rules": [r.name for r in prof.rules],
            "timezone": self.net.meta.get("timezone", "UTC"),
            "timezone_label": zone_label(self.net.meta.get("timezone", "UTC")),
            "profile_name": prof.name,
            "edges": int(len(self.net.edges)),
            "data_licence": self.net.meta.get("data_licence"),
            "source_name": self.net.meta.get("source_name"),
            "routerisk_version": __version__,
        }

    def departs(self, doc: dict[str, Any], *, key: str = "departs") -> list[dt.datetime]:
        """Parse the departures of a request as ``--depart`` does."""
        raw = doc.get(key, [])
        if isinstance(raw, str):
            raw = [raw]
        if not isinstance(raw, list) or not all(isinstance(x, str) for x in raw):
            raise RequestError(f"{key}: must be a list of ISO 8601 date-times")
        return [scoring.parse_depart(d, self.net.timezone) for d in raw]

    def route_input(self, doc: dict[str, Any], up: _Upload) -> list[routes.PlannedRoute]:
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
                depart = self.departs({"depart": spec["depart"]}, key="depart")[0]
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
        return routes.read_routes(path, default_tz=self.net.timezone)

    def drawn(self, s: scoring.RouteScore) -> dict[str, Any]:
        """Return what the page draws of a scored route: segments by risk and the line."""
        from shapely.ops import substring

        seg = s.segments
        pos = seg["_pos"].to_numpy()
        full = self.scorer.km[pos] * 1000.0
        frac = np.divide(seg["length_m"].to_numpy(), full, out=np.ones(len(pos)), where=full > 0)
        geoms_utm = self.net.edges.geometry.to_numpy()[pos]
        pieces = []
        n = len(pos)
        for i, (g, f) in enumerate(zip(geoms_utm, frac, strict=True)):
            if f < 1.0 - 1e-9 and n > 1:
                g = (
                    substring(g, 1.0 - f, 1.0, normalized=True)
                    if i == 0
                    else substring(g, 0.0, f, normalized=True)
                    if i == n - 1
                    else g
                )
            pieces.append(g)
        feats = []
        cats = list(self.scorer.cats)
        seq, street = seg["seq"].to_numpy(), seg["street"].to_numpy()
        risk, length_m = seg["risk"].to_numpy(), seg["length_m"].to_numpy()
        band, when = seg["band"].to_numpy(), seg["time"].to_numpy()
        parts = (
            np.column_stack([seg[f"part_{c}"].to_numpy() for c in cats])
            if cats
            else np.zeros((len(seg), 0))
        )
        xy, which = shapely.get_coordinates(pieces, return_index=True)
        ll = np.round(np.column_stack(self._to_ll.transform(xy[:, 0], xy[:, 1])), 6)
        cuts = np.searchsorted(which, np.arange(1, len(pieces)))
        for i, coords in enumerate(np.split(ll, cuts)):
            feats.append(
                {
                    "type": "Feature",
                    "geometry": {"type": "LineString", "coordinates": coords.tolist()},
                    "properties": {
                        "seq": int(seq[i]),
                        "street": str(street[i]),
                        "risk": _r6(risk[i]),
                        "risk_per_km": _r6(risk[i] / max(length_m[i], 1e-9) * 1000.0),
                        "band": str(band[i]),
                        "time": str(when[i]),
                        "parts": {c: _r6(parts[i, j]) for j, c in enumerate(cats)},
                    },
                }
            )
        # the driven line, dense enough to be read back as a trace (see EXPORT_STEP_M)
        dense = shapely.get_coordinates(
            shapely.segmentize(np.array(pieces, dtype=object), EXPORT_STEP_M)
        )
        step = np.hypot(*np.diff(dense, axis=0).T)
        dense = dense[np.concatenate([[True], step > 1e-6])]
        lon, lat = self._to_ll.transform(dense[:, 0], dense[:, 1])
        line = np.round(np.column_stack([lon, lat]), 7)
        return {
            "name": s.name,
            "depart": s.depart.isoformat(),
            "segments": {"type": "FeatureCollection", "features": feats},
            "line": line.tolist(),
        }

    # ---------------------------------------------------------------- the endpoints' work

    def score(self, doc: dict[str, Any], up: _Upload) -> dict[str, Any]:
        """Score the route(s) of a request as ``routerisk score`` does."""
        departs = self.departs(doc)
        planned = self.route_input(doc, up)
        scores = scoring.score_routes(
            self.net, planned, departs, index=self.index, scorer=self.scorer
        )
        return {
            "routes": [s.to_dict() for s in scores],
            "drawn": [self.drawn(s) for s in scores],
            "profile": self.net.profile.fingerprint,
        }

    def week(self, doc: dict[str, Any], up: _Upload) -> dict[str, Any]:
        """Return the risk of the route departing at each hour of a week."""
        text = doc.get("date")
        if not isinstance(text, str):
            raise RequestError("date: must be an ISO date such as 2027-03-09")
        try:
            day = dt.date.fromisoformat(text.strip()[:10])
        except ValueError:
            raise OptionError(f"not a date YYYY-MM-DD: {text!r}", field="date") from None
        monday = day - dt.timedelta(days=day.weekday())
        planned = self.route_input(doc, up)[0]
        m = matching.to_edges(self.index, planned)
        pos = self.scorer.positions(cast("list[tuple[int, int, int]]", list(m.edges)))
        frac = np.asarray(m.fractions)
        tz = self.net.timezone
        hours = []
        for h in range(168):
            start = dt.datetime.combine(monday, dt.time(), tzinfo=tz) + dt.timedelta(hours=h)
            risk, minutes, breaks = self.scorer.quick(pos, start, fractions=frac)
            hours.append(
                {
                    "depart": start.isoformat(),
                    "risk": round(risk, 6),
                    "duration_min": round(minutes, 3),
                    "rule_breaks": breaks,
                }
            )
        return {"name": planned.name, "week_of": monday.isoformat(), "hours": hours}

    def alternatives(self, doc: dict[str, Any], up: _Upload) -> dict[str, Any]:
        """Suggest alternatives as ``routerisk suggest`` does (same bounds and checks)."""
        from routerisk.analysis.alternatives import suggest_routes

        count = _integer(doc, "count", 3)
        if count < 1:
            raise OptionError("must be at least 1", field="--count")
        keep_every = _integer(doc, "keep_every", None)
        if keep_every is not None and keep_every < 1:
            raise OptionError("must be at least 1", field="--keep-every")
        max_extra_time = _share(doc, "max_extra_time", 0.25)
        min_difference = _share(doc, "min_difference", 0.3)
        assert max_extra_time is not None and min_difference is not None  # they have defaults
        departs = self.departs(doc)
        planned = self.route_input(doc, up)
        result = suggest_routes(
            self.net,
            planned,
            departs,
            count=count,
            keep_every=keep_every,
            index=self.index,
            suggester=self.suggester,
            max_extra_time=max_extra_time,
            max_extra_length=_share(doc, "max_extra_length", None),
            min_difference=min_difference,
        )
        drawn = []
        for s in result:
            drawn.append(
                {
                    "planned": self.drawn(s.planned),
                    "alternatives": [self.drawn(a.score) for a in s.alternatives],
                }
            )
        return {
            "routes": [s.to_dict() for s in result],
            "drawn": drawn,
            "profile": self.net.profile.fingerprint,
        }

    def review(self, doc: dict[str, Any], up: _Upload) -> dict[str, Any]:
        """Review an area as ``routerisk review`` does (what-ifs, --at, --top)."""
        from routerisk.analysis import review

        area = doc.get("area")
        if isinstance(area, dict) and "file" in area:
            path = up.write_file(area["file"], role="areas")
        elif isinstance(area, dict):
            path = up.write("area.geojson", dumps_json(area), role="areas")
        elif isinstance(area, str):
            raise RequestError(_PATH_REFUSED)
        else:
            raise RequestError("area: must be a GeoJSON object or a file")
        top = _integer(doc, "top", 10)
        if top < 0:
            raise OptionError(f"must be >= 0, got {top}", field="--top")
        at = doc.get("at")
        if at is not None and not isinstance(at, str):
            raise RequestError("at: must be a day and time such as 'wed 08:15'")
        minute = review.parse_time(at) if at else None
        raw = doc.get("what_if", [])
        if not isinstance(raw, list) or not all(
            isinstance(s, list) and all(isinstance(x, str) for x in s) for s in raw
        ):
            raise RequestError("what_if: must be a list of lists of SPECs")
        what_ifs = [review.parse_what_if(specs, self.net.profile) for specs in raw]
        areas = review.read_areas(path, crs=self.net.crs)
        result = review.review_areas(self.net, areas, at=minute, what_ifs=what_ifs, top=top)
        return result.to_json()

    def plan(self, doc: dict[str, Any], up: _Upload) -> dict[str, Any]:
        """Plan a day as ``routerisk plan`` does, from an uploaded runs file."""
        from routerisk.analysis import dayplan, planning

        for f in doc.get("routes", []) or []:
            up.write_file(f, role=None)
        runs_path = up.write_file(doc.get("runs"), role="runs")
        text = doc.get("date")
        try:
            date = dt.date.fromisoformat(text) if isinstance(text, str) else None
        except ValueError:
            date = None
        if date is None:
            raise OptionError(f"not a date YYYY-MM-DD: {text!r}", field="--date")
        runs = planning.read_runs(runs_path)
        for r in runs:
            if r.route is not None and up.folder.resolve() not in Path(r.route).resolve().parents:
                raise RequestError(_PATH_REFUSED)
        for r in runs:
            if r.route is not None:
                up.inputs.setdefault(Path(r.route).name, Path(r.route))
        plan = dayplan.plan_day(
            self.net,
            runs,
            date,
            vehicles=_integer(doc, "vehicles", 2),
            step_min=_integer(doc, "step", 15),
            turnaround_min=float(_number(doc, "turnaround", 15.0)),
        )
        return plan.to_dict()

    def export(self, doc: dict[str, Any]) -> tuple[str, str]:
        """Return (text, media type) of a route file holding the line sent."""
        fmt = doc.get("format", "geojson")
        name = doc.get("name", "route")
        line = doc.get("line")
        if fmt not in ("geojson", "gpx"):
            raise RequestError("format: must be 'geojson' or 'gpx'")
        if not isinstance(name, str) or not name.strip():
            raise RequestError("name: must be a non-empty text")
        if (
            not isinstance(line, list)
            or len(line) < 2
            or not all(
                isinstance(p, list)
                and len(p) == 2
                and all(isinstance(c, int | float) and math.isfinite(c) for c in p)
                for p in line
            )
        ):
            raise RequestError("line: must be at least two [lon, lat] pairs")
        depart = self.departs(doc, key="depart")[0] if doc.get("depart") else None
        r = routes.PlannedRoute(name.strip(), np.array(line, dtype=float), depart=depart)
        if fmt == "gpx":
            return routes.gpx_text([r]), "application/gpx+xml"
        return dumps_json(routes.routes_to_geojson([r])) + "\n", "application/geo+json"

    def network(self, bbox: tuple[float, float, float, float], zoom: int) -> dict[str, Any]:
        """Return the edges and sources in ``bbox`` (lon/lat), simplified for ``zoom``.

        How the amount is bounded: the two directions of a street are one feature (the
        higher band); at zoom ``z`` one screen pixel is ``156543 cos(lat) / 2**z`` metres, so
        geometries are simplified to one pixel and, below zoom 16, segments shorter than two
        pixels are left out; at most :data:`MAX_FEATURES` segments are sent (highest band,
        then longest, first) and ``truncated`` says when some were left out. Below zoom
        :data:`MERGE_BELOW_ZOOM` the segments of a band travel as one MultiLineString.
        """
        w, s, e, n = bbox
        box = shapely.box(w, s, e, n)
        hits = self._view_rows[self._view_tree.query(box, predicate="intersects")]
        lat = math.radians(max(min((s + n) / 2.0, 85.0), -85.0))
        mpp = 156543.03392 * math.cos(lat) / 2.0**zoom
        if zoom < 16:
            hits = hits[self._length[hits] >= 2.0 * mpp]
        truncated = len(hits) > MAX_FEATURES
        if truncated:
            order = np.lexsort((-self._length[hits], -self._rank[hits]))
            hits = np.sort(hits[order[:MAX_FEATURES]])
        tol = mpp / 111_320.0
        geoms = shapely.simplify(self.geoms_ll[hits], tol, preserve_topology=False)
        digits = 6 if zoom >= 15 else 5
        xy, which = shapely.get_coordinates(geoms, return_index=True)
        xy = np.round(xy, digits)
        cuts = np.searchsorted(which, np.arange(1, len(hits)))
        lines = np.split(xy, cuts) if len(hits) else []
        feats = []
        if zoom < MERGE_BELOW_ZOOM:  # a far view: one MultiLineString per band, no labels
            for b in sorted(
                set(self._bands[hits]),
                key=lambda x: int(self._rank[hits][self._bands[hits] == x][0]),
            ):
                sel = [c.tolist() for i, c in zip(hits, lines, strict=True) if self._bands[i] == b]
                feats.append(
                    {
                        "type": "Feature",
                        "geometry": {"type": "MultiLineString", "coordinates": sel},
                        "properties": {"band": b, "street": "", "segments": len(sel)},
                    }
                )
        else:
            for i, coords in zip(hits, lines, strict=True):
                feats.append(
                    {
                        "type": "Feature",
                        "geometry": {"type": "LineString", "coordinates": coords.tolist()},
                        "properties": {
                            "band": self._bands[i],
                            "street": self._names[i],
                            "segments": 1,
                        },
                    }
                )
        inside = np.flatnonzero(
            (self._src_xy[:, 0] >= w)
            & (self._src_xy[:, 0] <= e)
            & (self._src_xy[:, 1] >= s)
            & (self._src_xy[:, 1] <= n)
        )
        src_trunc = len(inside) > MAX_SOURCES
        inside = inside[:MAX_SOURCES]
        sources = [
            {
                "lon": round(float(self._src_xy[i, 0]), 6),
                "lat": round(float(self._src_xy[i, 1]), 6),
                "category": str(self._src_cat[i]),
                "name": str(self._src_name[i]),
            }
            for i in inside
        ]
        return {
            "edges": {"type": "FeatureCollection", "features": feats},
            "segments": int(len(hits)),
            "sources": sources,
            "truncated": bool(truncated or src_trunc),
            "zoom": zoom,
            "metres_per_pixel": round(mpp, 3),
        }


def _r6(x: float) -> float:
    return round(float(x), 6)


_PATH_REFUSED = "the server reads no file by path; send the file's content (open it on the page)"


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


# ----------------------------------------------------------------------------- uploads


@contextlib.contextmanager
def _upload(max_bytes: int) -> Iterator[_Upload]:
    with tempfile.TemporaryDirectory(prefix="routerisk-serve-") as tmp:
        yield _Upload(Path(tmp), {}, max_bytes)


def _too_big(n: int, limit: int) -> str:
    return (
        f"the upload is {n / 1048576:.1f} MB; the limit is {limit / 1048576:g} MB "
        "(routerisk serve --max-upload-mb)"
    )


# ----------------------------------------------------------------------------- the app


def _answer(
    svc: Service, payload: dict[str, Any], up: _Upload | None, status: int = 200
) -> Response:
    payload = dict(payload)
    payload.setdefault("made_from", svc.made_from(up))
    payload["caution"] = CAUTION
    body = json.dumps(
        payload, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False
    )
    return Response(body, status_code=status, media_type="application/json")


def _error(svc: Service, message: str, status: int, up: _Upload | None = None) -> Response:
    text = up.scrub(message) if up else message
    return _answer(svc, {"error": text, "status": status}, None, status)


async def _body(request: Request, svc: Service) -> dict[str, Any]:
    declared = request.headers.get("content-length")
    if declared and declared.isdigit() and int(declared) > svc.max_upload:
        raise RequestError(_too_big(int(declared), svc.max_upload), status=413)
    raw = b""
    async for chunk in request.stream():
        raw += chunk
        if len(raw) > svc.max_upload:
            raise RequestError(_too_big(len(raw), svc.max_upload), status=413)
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


def _post(
    svc: Service,
    work: Callable[[dict[str, Any], _Upload], dict[str, Any]],
    limiter: anyio.CapacityLimiter,
) -> Callable[[Request], Awaitable[Response]]:
    async def endpoint(request: Request) -> Response:
        try:
            doc = await _body(request, svc)
        except RequestError as exc:
            return _error(svc, exc.message, exc.status)
        with _upload(svc.max_upload) as up:
            try:
                result = await anyio.to_thread.run_sync(work, doc, up, limiter=limiter)
            except RequestError as exc:
                return _error(svc, exc.message, exc.status, up)
            except RouteriskError as exc:
                return _error(svc, exc.one_line(), 422 if _is_data(exc) else 400, up)
            return _answer(svc, result, up)

    return endpoint


def _is_data(exc: RouteriskError) -> bool:
    return type(exc).__name__ in ("EmptyNetworkError",)


def create_app(
    net: Any,
    *,
    token: str | None = None,
    loopback: bool = True,  # noqa: C901
    max_upload: int = MAX_UPLOAD_BYTES,
    workers: int = 4,
) -> Starlette:
    """Return the ASGI application on a loaded network.

    Parameters
    ----------
    net
        A tagged :class:`routerisk.network.folder.Network` (loaded once, shared by every request).
    token
        When given, every request must carry it (header ``X-Routerisk-Token``, query
        ``?token=``, or the cookie the page sets when opened with ``?token=``).
    loopback
        Bound to loopback: answer only requests addressed to a loopback host name.
    max_upload
        Largest request body in bytes.
    workers
        Requests computed at once (worker threads); others wait their turn.
    """
    svc = Service(net, max_upload=max_upload)
    limiter = anyio.CapacityLimiter(workers)
    view_limiter = anyio.CapacityLimiter(2)  # the map layer never waits behind long work
    static = resources.files("routerisk") / "static"
    page = Path(str(static / "serve" / "index.html"))

    async def index(request: Request) -> Response:
        resp = FileResponse(page, media_type="text/html")
        if token and request.query_params.get("token") == token:
            resp.set_cookie(TOKEN_COOKIE, token, httponly=True, samesite="strict")
        return resp

    async def info(request: Request) -> Response:
        return _answer(svc, svc.info(), None)

    async def network(request: Request) -> Response:
        q = request.query_params
        try:
            parts = [float(x) for x in q.get("bbox", "").split(",")]
            zoom = int(q.get("zoom", "15"))
        except ValueError:
            return _error(svc, "bbox must be W,S,E,N in degrees and zoom a whole number", 400)
        if (
            len(parts) != 4
            or not all(map(math.isfinite, parts))
            or not 0 <= zoom <= 24
            or parts[0] >= parts[2]
            or parts[1] >= parts[3]
        ):
            return _error(svc, "bbox must be W,S,E,N in degrees (W < E, S < N), zoom 0-24", 400)
        bbox = (parts[0], parts[1], parts[2], parts[3])
        result = await anyio.to_thread.run_sync(svc.network, bbox, zoom, limiter=view_limiter)
        return _answer(svc, result, None)

    async def export(request: Request) -> Response:
        try:
            doc = await _body(request, svc)
            text, media = svc.export(doc)
        except RequestError as exc:
            return _error(svc, exc.message, exc.status)
        except RouteriskError as exc:
            return _error(svc, exc.one_line(), 400)
        return Response(text, media_type=media)

    async def not_found(request: Request, exc: Exception) -> Response:
        status = getattr(exc, "status_code", 404)
        return _error(svc, f"{request.url.path}: no such page or endpoint", status)

    async def crashed(request: Request, exc: Exception) -> Response:
        import logging

        logging.getLogger(__name__).exception("request %s failed", request.url.path)
        return _error(svc, f"internal error ({type(exc).__name__}); see the server log", 500)

    api = [
        Route("/api/info", info),
        Route("/api/network", network),
        Route("/api/export", export, methods=["POST"]),
    ] + [
        Route(f"/api/{name}", _post(svc, getattr(svc, name), limiter), methods=["POST"])
        for name in ("score", "week", "alternatives", "review", "plan")
    ]
    middleware = []
    if loopback:
        middleware.append(Middleware(TrustedHostMiddleware, allowed_hosts=list(LOOPBACK_HOSTS)))
    if token:
        middleware.append(Middleware(_TokenCheck, token=token))
    app = Starlette(
        routes=[
            Route("/", index),
            *api,
            Mount("/static/serve", StaticFiles(directory=str(static / "serve"))),
            Mount("/static/leaflet", StaticFiles(directory=str(static / "leaflet"))),
        ],
        middleware=middleware,
        exception_handlers={404: not_found, 405: not_found, Exception: crashed},
    )
    app.state.service = svc
    return app


class _TokenCheck:
    """ASGI middleware: refuse (403, JSON) every request without the token."""

    def __init__(self, app: Any, token: str) -> None:
        self.app = app
        self.token = token

    async def __call__(self, scope: Any, receive: Any, send: Any) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        request = Request(scope)
        given = (
            request.headers.get(TOKEN_HEADER)
            or request.query_params.get("token")
            or request.cookies.get(TOKEN_COOKIE)
            or ""
        )
        if not secrets.compare_digest(given.encode(), self.token.encode()):
            body = dumps_json(
                {
                    "error": "this server needs its token (header "
                    "X-Routerisk-Token, or open the page with ?token=)",
                    "status": 403,
                    "caution": CAUTION,
                }
            )
            await Response(body, status_code=403, media_type="application/json")(
                scope, receive, send
            )
            return
        await self.app(scope, receive, send)
