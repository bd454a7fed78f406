"""Result objects of the top-level functions: one convention for every stage.

Every result keeps the library object it wraps (``.scores``, ``.review``, ...) and the
network it was computed on, and converts to

* ``to_frame()``: a :class:`pandas.DataFrame` (the table the command writes or prints),
* ``to_geodataframe()``: a :class:`geopandas.GeoDataFrame` with its CRS set, where the result
  has geometry,
* ``to_dict()``: the JSON form the command prints with ``--json`` (less the ``made_from``
  record of input files, which a result computed from objects does not have),
* ``to_map()``: an offline :class:`folium.Map` (it shows in a notebook), where the command
  draws one. Every map carries :data:`routerisk.CAUTION`.

Inputs read from files (:func:`routerisk.read_routes`, ...) are small sequences with the same
``to_frame`` / ``to_geodataframe`` / ``to_dict``.
"""

from __future__ import annotations

import json
from collections.abc import Iterator, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, TypeAlias, TypeVar, overload

if TYPE_CHECKING:
    import folium
    import geopandas as gpd
    import pandas as pd
    import pyproj

    from routerisk.analysis.alternatives import Suggestion
    from routerisk.analysis.dayplan import DayPlan
    from routerisk.analysis.evidence import EvidencePlan
    from routerisk.analysis.planning import RunSpec
    from routerisk.analysis.review import Area, Review
    from routerisk.analysis.scoring import RouteScore
    from routerisk.analysis.watch import WatchResult as _Watch
    from routerisk.io.routes import PlannedRoute
    from routerisk.network.folder import Network

#: A JSON value, as ``to_dict()`` returns it.
JSON: TypeAlias = "dict[str, JSON] | list[JSON] | str | int | float | bool | None"

T = TypeVar("T")
_Slice: TypeAlias = "slice[int | None, int | None, int | None]"  # positions, as in ``routes[:2]``


class _Items(Sequence[T]):
    """A read-only sequence over ``self._items``."""

    _items: tuple[T, ...]

    @overload
    def __getitem__(self, i: int) -> T: ...

    @overload
    def __getitem__(self, i: _Slice) -> Sequence[T]: ...

    def __getitem__(self, i: int | _Slice) -> T | Sequence[T]:
        """Return one item, or a tuple of items for a slice."""
        return self._items[i]

    def __len__(self) -> int:
        """Return the number of items."""
        return len(self._items)

    def __iter__(self) -> Iterator[T]:
        """Iterate over the items in order."""
        return iter(self._items)


def _records(frame: pd.DataFrame) -> list[JSON]:
    """Return a frame's rows as JSON records (times in ISO 8601)."""
    data: list[JSON] = json.loads(frame.to_json(orient="records", date_format="iso"))
    return data


# ------------------------------------------------------------------------------ inputs


class Routes(_Items["PlannedRoute"]):
    """Routes or recorded drives read from files, in file order.

    Iterate over it for the :class:`routerisk.io.routes.PlannedRoute` objects.
    """

    def __init__(self, routes: Sequence[PlannedRoute]) -> None:
        self._items = tuple(routes)

    def __repr__(self) -> str:
        """Return ``Routes([name, ...])``."""
        return f"Routes({[r.name for r in self._items]!r})"

    def to_frame(self) -> pd.DataFrame:
        """Return one row per point: route, point, lon, lat, time (or None), required."""
        import pandas as pd

        rows = [
            {
                "route": r.name,
                "point": i,
                "lon": float(lon),
                "lat": float(lat),
                "time": None if r.times is None else r.times[i].isoformat(),
                "required": bool(r.required[i]),  # type: ignore[index]
            }
            for r in self._items
            for i, (lon, lat) in enumerate(r.lonlat)
        ]
        return pd.DataFrame(rows, columns=["route", "point", "lon", "lat", "time", "required"])

    def to_geodataframe(self) -> gpd.GeoDataFrame:
        """Return one line per route (name, depart, points, source) in EPSG:4326."""
        import geopandas as gpd
        import shapely

        return gpd.GeoDataFrame(
            {
                "name": [r.name for r in self._items],
                "depart": [None if r.depart is None else r.depart.isoformat() for r in self._items],
                "points": [len(r) for r in self._items],
                "source": [r.source for r in self._items],
            },
            geometry=[shapely.LineString(r.lonlat) for r in self._items],
            crs="EPSG:4326",
        )

    def to_dict(self) -> dict[str, JSON]:
        """Return the routes as a GeoJSON FeatureCollection (the format ``score`` reads)."""
        from routerisk.io.routes import routes_to_geojson

        doc: dict[str, JSON] = routes_to_geojson(self._items)
        return doc


@dataclass(frozen=True)
class Events:
    """An event log read by :func:`routerisk.read_events`.

    Attributes
    ----------
    events
        One row per accepted event: ``time`` (UTC), ``lat``, ``lon``, ``type``, optional
        ``vehicle`` and ``severity``, and ``row`` (1-based record number in the file).
    rejected
        The records left out, with ``row`` and ``reason``.
    source
        The file read.
    """

    events: pd.DataFrame
    rejected: pd.DataFrame
    source: str = ""

    def __len__(self) -> int:
        """Return the number of accepted events."""
        return len(self.events)

    def to_frame(self) -> pd.DataFrame:
        """Return the accepted events (a copy)."""
        return self.events.copy()

    def to_geodataframe(self) -> gpd.GeoDataFrame:
        """Return the accepted events as points in EPSG:4326."""
        import geopandas as gpd

        return gpd.GeoDataFrame(
            self.events.copy(),
            crs="EPSG:4326",
            geometry=gpd.points_from_xy(self.events["lon"], self.events["lat"]),
        )

    def to_dict(self) -> dict[str, JSON]:
        """Return ``{"source", "events": [...], "rejected": [{row, reason}, ...]}``."""
        cols = [c for c in ("row", "reason") if c in self.rejected.columns]
        return {
            "source": self.source,
            "events": _records(self.events),
            "rejected": _records(self.rejected[cols]),
        }


class Areas(_Items["Area"]):
    """Proposed test areas read by :func:`routerisk.read_areas`, projected to ``crs``."""

    def __init__(self, areas: Sequence[Area], crs: pyproj.CRS) -> None:
        self._items = tuple(areas)
        self.crs = crs

    def __repr__(self) -> str:
        """Return ``Areas([name, ...])``."""
        return f"Areas({[a.name for a in self._items]!r})"

    def to_geodataframe(self) -> gpd.GeoDataFrame:
        """Return one polygon per area (name, source) in the areas' CRS."""
        import geopandas as gpd

        return gpd.GeoDataFrame(
            {"name": [a.name for a in self._items], "source": [a.source for a in self._items]},
            geometry=[a.geometry for a in self._items],
            crs=self.crs,
        )

    def to_frame(self) -> pd.DataFrame:
        """Return one row per area: name, area in km², source."""
        gdf = self.to_geodataframe()
        metric = gdf.to_crs(gdf.estimate_utm_crs()) if gdf.crs.is_geographic else gdf
        gdf["area_km2"] = metric.geometry.area.to_numpy() / 1e6
        return gdf[["name", "area_km2", "source"]].copy()

    def to_dict(self) -> dict[str, JSON]:
        """Return the areas as a GeoJSON FeatureCollection in WGS 84."""
        doc: dict[str, JSON] = json.loads(
            self.to_geodataframe().to_crs("EPSG:4326").to_json(drop_id=True)
        )
        return doc


class Runs(_Items["RunSpec"]):
    """The runs of a test day read by :func:`routerisk.read_runs`, in file order."""

    def __init__(self, runs: Sequence[RunSpec]) -> None:
        self._items = tuple(runs)

    def __repr__(self) -> str:
        """Return ``Runs([name, ...])``."""
        return f"Runs({[r.name for r in self._items]!r})"

    def to_frame(self) -> pd.DataFrame:
        """Return one row per run: name, earliest, latest (minutes), route, vehicle, repeat."""
        import pandas as pd

        cols = ["name", "earliest", "latest", "route", "route_name", "vehicle", "repeat"]
        return pd.DataFrame(
            [
                {
                    "name": r.name,
                    "earliest": r.earliest,
                    "latest": r.latest,
                    "route": None if r.route is None else str(r.route),
                    "route_name": r.route_name,
                    "vehicle": r.vehicle,
                    "repeat": r.repeat,
                }
                for r in self._items
            ],
            columns=cols,
        )

    def to_dict(self) -> dict[str, JSON]:
        """Return ``{"runs": [...]}``, the rows of :meth:`to_frame`."""
        return {"runs": _records(self.to_frame())}


# ----------------------------------------------------------------------------- results


@dataclass(frozen=True)
class ScoreResult:
    """Scores of routes at their departure times, from :func:`routerisk.score_routes`.

    Attributes
    ----------
    scores
        One :class:`routerisk.analysis.scoring.RouteScore` per (route, departure), in input order.
    network
        The network scored on.
    """

    scores: tuple[RouteScore, ...]
    network: Network

    def to_frame(self) -> pd.DataFrame:
        """Return one row per (route, departure), ranked by risk (``routes.csv``)."""
        from routerisk.render.routemap import ranking_table

        return ranking_table(list(self.scores))

    def to_geodataframe(self) -> gpd.GeoDataFrame:
        """Return every driven segment with its risk parts, in EPSG:4326 (segments.geojson)."""
        from routerisk.render.routemap import segments_gdf

        return segments_gdf(self.network, list(self.scores))

    def to_dict(self) -> dict[str, JSON]:
        """Return ``{"routes": [...], "profile": fingerprint}`` as ``score --json`` prints."""
        from routerisk.analysis.scoring import RELATIVE_INDEX_NOTE, model_note

        return {
            "routes": [s.to_dict() for s in self.scores],
            "profile": self.network.profile.fingerprint,
            "model": model_note(self.network.profile),
            "relative_index_note": RELATIVE_INDEX_NOTE,
        }

    def to_map(self) -> folium.Map:
        """Return the map of the routes coloured by risk per km, with the risk chart."""
        from routerisk.render.routemap import route_map

        m: folium.Map = route_map(self.network, list(self.scores))
        return m


@dataclass(frozen=True)
class SuggestResult:
    """Lower-exposure alternatives, from :func:`routerisk.suggest_routes`.

    Attributes
    ----------
    suggestions
        One :class:`routerisk.analysis.alternatives.Suggestion` per (route, departure).
    network
        The network searched.
    """

    suggestions: tuple[Suggestion, ...]
    network: Network

    def to_frame(self) -> pd.DataFrame:
        """Return one row per plan and alternative: route, option, depart, figures, changes."""
        import pandas as pd

        rows = []
        for s in self.suggestions:
            options = [("planned", s.planned, 0.0, 0.0, 0.0, True)]
            options += [
                (
                    a.label,
                    a.score,
                    a.risk_change_pct,
                    a.time_change_pct,
                    a.length_change_pct,
                    a.within_bounds,
                )
                for a in s.alternatives
            ]
            for label, sc, dr, dt_, dl, ok in options:
                rows.append(
                    {
                        "route": s.name,
                        "option": label,
                        "depart": sc.depart.isoformat(),
                        "length_km": sc.length_km,
                        "duration_min": sc.duration_min,
                        "risk": sc.risk,
                        "rule_breaks": len(sc.rule_breaks),
                        "risk_change_pct": dr,
                        "time_change_pct": dt_,
                        "length_change_pct": dl,
                        "within_bounds": ok,
                    }
                )
        return pd.DataFrame(rows)

    def to_geodataframe(self) -> gpd.GeoDataFrame:
        """Return the driven segments of every plan and alternative (column ``option``)."""
        import geopandas as gpd
        import pandas as pd

        from routerisk.render.routemap import segments_gdf

        parts = []
        for s in self.suggestions:
            for label, sc in [("planned", s.planned)] + [
                (a.label, a.score) for a in s.alternatives
            ]:
                g = segments_gdf(self.network, [sc])
                g.insert(1, "option", label)
                g["route"] = s.name
                parts.append(g)
        return gpd.GeoDataFrame(
            pd.concat(parts, ignore_index=True), geometry="geometry", crs="EPSG:4326"
        )

    def to_dict(self) -> dict[str, JSON]:
        """Return ``{"routes": [...], "profile": fingerprint}`` as ``suggest --json`` prints."""
        return {
            "routes": [s.to_dict() for s in self.suggestions],
            "profile": self.network.profile.fingerprint,
        }

    def to_map(self) -> folium.Map:
        """Return the map of plans and alternatives with their trade-off charts."""
        from routerisk.render.routemap import suggestion_map

        m: folium.Map = suggestion_map(self.network, list(self.suggestions))
        return m


@dataclass(frozen=True)
class ReviewResult:
    """The review of proposed test areas, from :func:`routerisk.review_areas`.

    Attributes
    ----------
    review
        The :class:`routerisk.analysis.review.Review` (figures per area, what-ifs).
    """

    review: Review

    def to_frame(self) -> pd.DataFrame:
        """Return one row per area with the figures to compare (``areas.csv``)."""
        from routerisk.analysis.review import comparison_table

        return comparison_table(self.review)

    def to_geodataframe(self) -> gpd.GeoDataFrame:
        """Return the area polygons with the figures of :meth:`to_frame`, in the network CRS."""
        import geopandas as gpd

        shapes = {a.name: a.geometry for a in self.review.area_shapes}
        frame = self.to_frame()
        return gpd.GeoDataFrame(
            frame, geometry=[shapes[n] for n in frame["area"]], crs=self.review.meta.get("crs")
        )

    def to_dict(self) -> dict[str, JSON]:
        """Return the document ``review --json`` prints."""
        doc: dict[str, JSON] = self.review.to_json()
        return doc

    def to_map(self) -> folium.Map:
        """Return the map of the areas: streets by band, hot spots, clusters, sources."""
        from routerisk.render.review_map import review_map

        m: folium.Map = review_map(self.review)
        return m


@dataclass(frozen=True)
class PlanResult:
    """A day's schedule of test runs, from :func:`routerisk.plan_day`.

    Attributes
    ----------
    plan
        The :class:`routerisk.analysis.dayplan.DayPlan` (schedule, naive plan, options).
    network
        The network planned on.
    """

    plan: DayPlan
    network: Network

    def to_frame(self) -> pd.DataFrame:
        """Return one row per placed run (``schedule.csv``)."""
        import pandas as pd

        return pd.DataFrame(
            self.plan.to_dict()["runs"],
            columns=[
                "vehicle",
                "name",
                "repetition",
                "start",
                "end",
                "route",
                "risk",
                "rule_breaks",
            ],
        )

    def to_geodataframe(self) -> gpd.GeoDataFrame:
        """Return the driven segments of every placed run, in EPSG:4326."""
        from routerisk.render.routemap import segments_gdf

        return segments_gdf(self.network, [opt.score for _, opt in self.plan.chosen()])

    def to_dict(self) -> dict[str, JSON]:
        """Return the document ``plan --json`` prints."""
        doc: dict[str, JSON] = self.plan.to_dict()
        return doc

    def to_map(self) -> folium.Map:
        """Return the map of the day's runs (``map.html`` of ``plan --out``)."""
        from routerisk.render.routemap import route_map

        m: folium.Map = route_map(
            self.network,
            [opt.score for _, opt in self.plan.chosen()],
            title=f"Test runs on {self.plan.date.isoformat()}",
        )
        return m


@dataclass(frozen=True)
class EvidenceResult:
    """How much test driving a claim needs, from :func:`routerisk.plan_evidence`.

    Attributes
    ----------
    plan
        The :class:`routerisk.analysis.evidence.EvidencePlan`.
    """

    plan: EvidencePlan

    def to_frame(self) -> pd.DataFrame:
        """Return the "k events allowed" table: events, distance, fleet-years."""
        import pandas as pd

        return pd.DataFrame(self.plan.allowed_events, columns=["events", "miles", "years"])

    def to_dict(self) -> dict[str, JSON]:
        """Return the document ``evidence --json`` prints."""
        doc: dict[str, JSON] = self.plan.to_json()
        return doc

    def describe(self) -> list[str]:
        """Return the plan in sentences, as ``evidence`` prints it (ends with the caution)."""
        from routerisk.analysis.evidence import describe

        return describe(self.plan)


@dataclass(frozen=True)
class WatchResult:
    """Early warnings from logged events, from :func:`routerisk.watch_events`.

    Attributes
    ----------
    result
        The :class:`routerisk.analysis.watch.WatchResult` (segments, alerts, matched and rejected).
    network
        The network the drives were matched to.
    """

    result: _Watch
    network: Network

    def to_frame(self) -> pd.DataFrame:
        """Return one row per unit (street block or segment).

        Columns: events, km, expected, EB rate, p, flag.
        """
        return self.result.segments.copy()

    def to_geodataframe(self) -> gpd.GeoDataFrame:
        """Return :meth:`to_frame` with each unit's geometry, in the network CRS.

        A unit's geometry is the union of the edges it holds (both directions of a block).
        """
        import geopandas as gpd
        import shapely

        geoms = self.network.edges.reset_index()[["u", "v", "key", "geometry"]]
        mem = self.result.members[["unit", "u", "v", "key"]].merge(
            geoms, on=["u", "v", "key"], how="left"
        )
        shapes = {
            unit: shapely.line_merge(shapely.union_all(list(g["geometry"])))
            for unit, g in mem.groupby("unit", sort=False)
        }
        seg = self.result.segments.copy()
        return gpd.GeoDataFrame(
            seg, geometry=[shapes.get(u) for u in seg["unit"]], crs=self.network.crs
        )

    def to_dict(self) -> dict[str, JSON]:
        """Return the document ``watch --json`` prints."""
        doc: dict[str, JSON] = self.result.to_dict()
        return doc

    def to_map(self) -> folium.Map:
        """Return the map of the network with the flagged segments."""
        from routerisk.io.atomic import provenance
        from routerisk.render.watch_map import flag_map

        net = self.network
        m: folium.Map = flag_map(
            net, self.result, provenance(profile=net.profile.fingerprint, network=net)
        )
        return m
