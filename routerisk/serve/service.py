"""The loaded network of ``routerisk serve`` and the computing behind every endpoint.

:class:`Service` is built once at start: the network, its road index, the scorer and the
suggester (their lazy look-ups built before threads share them), and the view index of
``/api/network``. Each endpoint's work is one method that calls the functions the commands
call, on a request read by :mod:`routerisk.serve.requests`.
"""

from __future__ import annotations

import datetime as dt
import math
from pathlib import Path
from typing import Any, cast

import numpy as np
import shapely

from routerisk import __version__, matching
from routerisk.analysis import scoring
from routerisk.errors import OptionError
from routerisk.io import routes
from routerisk.io.atomic import dumps_json, provenance
from routerisk.render import mapview
from routerisk.serve.requests import (
    _PATH_REFUSED,
    MAX_UPLOAD_BYTES,
    RequestError,
    _integer,
    _number,
    _share,
    _Upload,
    parse_departs,
    parse_route,
)

#: Most edges ``/api/network`` sends for one view (the highest bands, then the longest, win).
MAX_FEATURES = 6000
#: Below this zoom ``/api/network`` sends one MultiLineString per band (no street labels).
MERGE_BELOW_ZOOM = 14
#: Most exposure sources ``/api/network`` sends for one view.
MAX_SOURCES = 2000
#: Spacing (m) of the points of an exported line: dense, so it is read back as a trace.
EXPORT_STEP_M = 15.0


class Service:
    """The loaded network and what every request shares (built once at start)."""

    def __init__(self, net: Any, *, max_upload: int = MAX_UPLOAD_BYTES) -> None:
        import geopandas as gpd

        self.net = net
        self.max_upload = int(max_upload)
        self.index = matching.RoadIndex.of_network(net)
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
        from routerisk.io.timezones import zone_label

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
        return parse_departs(doc, self.net.timezone, key=key)

    def route_input(self, doc: dict[str, Any], up: _Upload) -> list[routes.PlannedRoute]:
        """Return the routes of a request: clicked waypoints, GeoJSON or a route file."""
        return parse_route(doc, up, self.net.timezone)

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
