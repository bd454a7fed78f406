"""One-pass reading of an OSM file (.osm, .osm.bz2, .osm.gz, .osm.pbf) with pyosmium.

Collects what the loader and the source extraction need, so the file is decoded once for
ways and nodes (plus one cheap relations-only pass when the profile asks for polygons that
may be multipolygon relations). Clipped extracts are expected: way node references whose
node is missing split the way into the runs of nodes that exist, and relations keep the
members that exist.

The file must be a consistent snapshot: a node, way or relation id that appears twice is an
error naming it (the ids are collected as the file is read and checked once at the end, by
sorting). A node the read uses (a road's node, a crossing, a source) whose coordinates lie
outside -90..90 latitude or -180..180 longitude is an error naming the node; a node that
nothing uses changes nothing and is not looked at.
"""

from __future__ import annotations

import logging
from array import array
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import osmium

from routerisk.errors import InputFileError

log = logging.getLogger(__name__)

OSM_SUFFIXES = (".osm", ".osm.bz2", ".osm.gz", ".osm.pbf", ".pbf", ".xml", ".osm.xml")

# The drive filter of osmnx's "drive" network type (osmnx._overpass), as data: a way is
# drivable when it has a highway tag, is not an area, and no value below matches (regex
# search, as Overpass does). A test checks this table against osmnx's own filter string.
DRIVE_EXCLUDE = {
    "area": "yes",
    "access": "private",
    "highway": (
        "abandoned|bridleway|bus_guideway|construction|corridor|cycleway|elevator|escalator|"
        "footway|no|path|pedestrian|planned|platform|proposed|raceway|razed|rest_area|"
        "service|services|steps|track"
    ),
    "motor_vehicle": "no",
    "motorcar": "no",
    "service": "alley|driveway|emergency_access|parking|parking_aisle|private",
}
# osmium's fixed-point coordinates: degrees * 1e7 in int32; valid within +-180 / +-90 degrees.
_PRECISION = 10_000_000
_LON_MAX = 180 * _PRECISION
_LAT_MAX = 90 * _PRECISION
# osmium's coordinate of an undefined location: a way node reference whose node is not in
# the file (a clipped extract), or a node written without coordinates.
_UNDEFINED = 2**31 - 1
WAY_KEYS = (
    "highway",
    "name",
    "lanes",
    "maxspeed",
    "oneway",
    "junction",
    "sidewalk",
    "ref",
    "hazard",
    "maxspeed:conditional",
    "access",
)


# Ways drawn as the light background of maps (streets, water, parks, buildings), by tag.
_WATER = {
    "natural": {"water"},
    "waterway": {"riverbank", "river", "canal", "stream", "dock"},
    "landuse": {"reservoir", "basin"},
}
_PARK = {
    "leisure": {"park", "garden", "playground", "pitch", "common", "nature_reserve"},
    "landuse": {"grass", "forest", "meadow", "recreation_ground", "village_green", "cemetery"},
    "natural": {"wood", "scrub", "grassland"},
}


def context_kind(tags: Mapping[str, str]) -> str | None:
    """Return the background kind of a way (street, water, park, building) or None."""
    if "highway" in tags and tags.get("area") != "yes":
        return "street"
    if "building" in tags:
        return "building"
    for kind, table in (("water", _WATER), ("park", _PARK)):
        for key, values in table.items():
            if tags.get(key) in values:
                return kind
    return None


def _compile_filter() -> list[tuple[str, object]]:
    import re

    return [(k, re.compile(v)) for k, v in DRIVE_EXCLUDE.items()]


_FILTER = _compile_filter()


def is_drivable(tags: Mapping[str, str]) -> bool:
    """Return True when a way with ``tags`` passes the drive filter."""
    if "highway" not in tags:
        return False
    for key, pattern in _FILTER:
        val = tags.get(key)
        if val is not None and pattern.search(val):  # type: ignore[attr-defined]
            return False
    return True


@dataclass
class RawWay:
    """A drivable way's run of existing nodes."""

    osmid: int
    tags: dict[str, str]
    refs: np.ndarray  # int64 node ids
    lonlat: np.ndarray  # (n, 2)


@dataclass
class RawFeature:
    """A tagged OSM object that may be an exposure source or an on-road feature."""

    kind: str  # node | way | relation
    osmid: int
    tags: dict[str, str]
    lonlat: list[np.ndarray] = field(default_factory=list)  # rings / lines / one point
    roles: list[str] = field(default_factory=list)  # for relations: outer / inner


@dataclass
class RawOSM:
    """What one read of an OSM file yields."""

    path: str
    ways: list[RawWay]
    features: list[RawFeature]
    crossings: dict[int, tuple[float, float, str]]  # node id -> lon, lat, crossing type
    signals: set[int]
    bounds: tuple[float, float, float, float] | None
    missing_refs: int
    timestamp: str | None
    #: background ways for maps: (kind, osm id, name, highway, closed, lon/lat runs)
    context: list[tuple[str, int, str, str, list[np.ndarray]]] = field(default_factory=list)


def _check_path(path: str | Path) -> Path:
    p = Path(path)
    if not p.exists():
        raise InputFileError("file not found", path=p)
    if not p.is_file():
        raise InputFileError("not a file", path=p)
    if p.stat().st_size == 0:
        raise InputFileError("file is empty", path=p)
    name = p.name.lower()
    if not any(name.endswith(s) for s in OSM_SUFFIXES):
        raise InputFileError(
            f"not an OSM file name; expected one of {', '.join(OSM_SUFFIXES)}", path=p
        )
    return p


def _degrees(v: int) -> str:
    """Return a fixed-point coordinate as decimal degrees, without trailing zeros."""
    return f"{v / _PRECISION:.7f}".rstrip("0").rstrip(".")


def _bad_location(p: Path, node_id: int, x: int, y: int) -> InputFileError:
    """Return the error for a used node whose fixed-point location ``x, y`` is not valid."""
    if not -_LAT_MAX <= y <= _LAT_MAX and y != _UNDEFINED:
        msg = f"latitude {_degrees(y)} out of range -90..90"
    elif not -_LON_MAX <= x <= _LON_MAX and x != _UNDEFINED:
        msg = f"longitude {_degrees(x)} out of range -180..180"
    else:
        msg = "no valid location (latitude or longitude missing or out of range)"
    return InputFileError(msg, path=p, field=f"node {node_id}")


def _check_unique(p: Path, ids: dict[str, array]) -> None:
    """Raise when an id appears more than once among the objects of one type.

    ``ids`` maps ``node``, ``way``, ``relation`` to every id read, in file order. Sorting and
    comparing neighbours costs far less than a set lookup per object while reading.
    """
    firsts = []
    repeated = 0
    for kind, seen in ids.items():
        if len(seen) < 2:
            continue
        a = np.sort(np.frombuffer(seen, dtype=np.int64))
        same = a[1:] == a[:-1]
        if same.any():
            dup = np.unique(a[1:][same])
            repeated += len(dup)
            firsts.append(f"{kind} {int(dup[0])}")
    if firsts:
        raise InputFileError(
            f"duplicate id: the file holds this object more than once ({repeated} repeated "
            f"id{'s' if repeated != 1 else ''} in all); an OSM file holds each object once",
            path=p,
            field=", ".join(firsts),
        )


def _osmium_file(p: Path) -> osmium.io.File:
    name = p.name.lower()
    fmt = ""
    if name.endswith((".xml", ".osm.xml")):
        fmt = "osm"
    return osmium.io.File(str(p), fmt) if fmt else osmium.io.File(str(p))


class _Collect:
    """What one pass over an OSM file keeps: drivable ways, features, crossings, context."""

    def __init__(
        self,
        p: Path,
        want: Callable[[Mapping[str, str]], bool],
        member_ways: dict[int, list[tuple[int, str]]],
        rel_parts: dict[int, RawFeature],
    ) -> None:
        self.p, self.want = p, want
        self.member_ways, self.rel_parts = member_ways, rel_parts
        self.ways: list[RawWay] = []
        self.features: list[RawFeature] = []
        self.crossings: dict[int, tuple[float, float, str]] = {}
        self.signals: set[int] = set()
        self.missing = 0
        self.context: list[tuple[str, int, str, str, list[np.ndarray]]] = []

    def node(self, obj: Any) -> None:
        """Keep a tagged node: a crossing, traffic signals, a wanted feature."""
        tags = obj.tags
        if not tags:  # most nodes: only their location matters, kept by osmium
            return
        hw = tags.get("highway")
        if hw == "crossing":
            loc = self._location(obj)
            self.crossings[obj.id] = (loc.lon, loc.lat, tags.get("crossing", "unknown"))
        elif hw == "traffic_signals":
            self.signals.add(obj.id)
        if self.want(tags):
            loc = self._location(obj)
            self.features.append(
                RawFeature("node", obj.id, dict(tags), [np.array([[loc.lon, loc.lat]])])
            )

    def _location(self, obj: Any) -> Any:
        loc = obj.location
        if not loc.valid():
            raise _bad_location(self.p, obj.id, loc.x, loc.y)
        return loc

    def way(self, obj: Any) -> None:
        """Keep a way that is drivable, a wanted feature, a relation member or context."""
        tags = obj.tags
        drivable = is_drivable(tags)
        wanted = self.want(tags)
        members = self.member_ways.get(obj.id)
        ctx = context_kind(tags)
        if not (drivable or wanted or members or ctx):
            return
        refs, coords, ok = self._nodes(obj)
        nbad = int((~ok).sum())
        self.missing += nbad
        runs = [coords] if nbad == 0 else [coords[r] for r in _runs(ok) if len(r) >= 2]
        if drivable:
            td = {k: tags.get(k) for k in WAY_KEYS if k in tags}
            for run in _runs(ok):
                if len(run) >= 2:
                    self.ways.append(RawWay(obj.id, td, refs[run], coords[run]))
        if wanted and runs:
            self.features.append(RawFeature("way", obj.id, dict(tags), runs))
        if ctx and runs:
            self.context.append((ctx, obj.id, tags.get("name", ""), tags.get("highway", ""), runs))
        if members:
            parts = [coords[r] for r in _runs(ok) if len(r) >= 2]
            for rid, role in members:
                for run in parts:
                    self.rel_parts[rid].lonlat.append(run)
                    self.rel_parts[rid].roles.append(role)

    def _nodes(self, obj: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Return a way's node ids, coordinates (NaN where missing) and which exist."""
        # one pass over the node list: id and fixed-point coordinates (osmium keeps
        # 1e-7 degree integers; lon = x / 1e7 is exactly what Location.lon returns)
        arr = np.array([(n.ref, n.x, n.y) for n in obj.nodes], dtype=np.int64).reshape(-1, 3)
        refs = arr[:, 0].copy()
        xi, yi = arr[:, 1], arr[:, 2]
        ok = (xi >= -_LON_MAX) & (xi <= _LON_MAX) & (yi >= -_LAT_MAX) & (yi <= _LAT_MAX)
        coords = np.column_stack([xi / _PRECISION, yi / _PRECISION])
        if not ok.all():
            # undefined: the node is not in the file (clipped); anything else is a node
            # in the file with impossible coordinates
            wrong = ~ok & ~((xi == _UNDEFINED) & (yi == _UNDEFINED))
            if wrong.any():
                i = int(np.argmax(wrong))
                raise _bad_location(self.p, int(refs[i]), int(xi[i]), int(yi[i]))
            coords[~ok] = np.nan
        return refs, coords, ok


def _relations(
    p: Path, want: Callable[[Mapping[str, str]], bool], rel_ids: Callable[[int], None]
) -> tuple[dict[int, list[tuple[int, str]]], dict[int, RawFeature]]:
    """Pass 1 (relations only): which ways are members of wanted multipolygons."""
    member_ways: dict[int, list[tuple[int, str]]] = {}
    rel_tags: dict[int, dict[str, str]] = {}
    for rel in osmium.FileProcessor(_osmium_file(p), osmium.osm.RELATION):
        rel_ids(rel.id)
        tags = dict(rel.tags)
        if tags.get("type") not in ("multipolygon", "boundary") or not want(tags):
            continue
        rel_tags[rel.id] = tags
        for m in rel.members:
            if m.type == "w":
                member_ways.setdefault(m.ref, []).append((rel.id, m.role or "outer"))
    return member_ways, {rid: RawFeature("relation", rid, t) for rid, t in rel_tags.items()}


def read_osm(
    path: str | Path, *, feature_filter: Callable[[Mapping[str, str]], bool] | None = None
) -> RawOSM:
    """Read drivable ways, crossings and candidate source features from an OSM file.

    Parameters
    ----------
    path
        The OSM file.
    feature_filter
        Predicate on tags: objects for which it is True are kept as features (sources).
    """
    p = _check_path(path)
    want = feature_filter or (lambda tags: False)
    ids = {kind: array("q") for kind in ("node", "way", "relation")}
    node_ids, way_ids = ids["node"].append, ids["way"].append
    try:
        member_ways, rel_parts = _relations(p, want, ids["relation"].append)
        got = _Collect(p, want, member_ways, rel_parts)
        # every node comes through (not filtered out in osmium) so that its id is seen once
        fp = osmium.FileProcessor(_osmium_file(p), osmium.osm.NODE | osmium.osm.WAY)
        fp = fp.with_locations()
        header = fp.header
        box = header.box()
        bounds = None
        if box.valid():
            bounds = (
                box.bottom_left.lon,
                box.bottom_left.lat,
                box.top_right.lon,
                box.top_right.lat,
            )
        timestamp = header.get("osmosis_replication_timestamp") or header.get("timestamp") or None
        for obj in fp:
            if obj.is_node():
                node_ids(obj.id)
                got.node(obj)
            else:
                way_ids(obj.id)
                got.way(obj)
        got.features.extend(f for f in rel_parts.values() if f.lonlat)
    except osmium.InvalidLocationError as exc:
        # the parser refuses a coordinate it cannot read (nan, inf, 1e3, beyond +-214.7)
        msg = str(exc).strip().splitlines()[0] if str(exc).strip() else "invalid location"
        raise InputFileError(
            f"{msg}; coordinates must be decimal degrees within -90..90 "
            "latitude and -180..180 longitude",
            path=p,
            field="node coordinates",
        ) from exc
    except RuntimeError as exc:
        msg = str(exc).strip().splitlines()[0] if str(exc).strip() else "unreadable"
        raise InputFileError(f"cannot read as OSM data ({msg})", path=p) from exc
    _check_unique(p, ids)
    if got.missing:
        log.info(
            "%s: %d way node references point to nodes not in the file (clipped "
            "extract); kept the runs of nodes that exist",
            p,
            got.missing,
        )
    return RawOSM(
        str(p),
        got.ways,
        got.features,
        got.crossings,
        got.signals,
        bounds,
        got.missing,
        timestamp,
        got.context,
    )


def _runs(ok: np.ndarray) -> list[np.ndarray]:
    """Return index arrays of the maximal runs of True in ``ok``."""
    if ok.all():
        return [np.arange(len(ok))]
    idx = np.flatnonzero(ok)
    if len(idx) == 0:
        return []
    breaks = np.flatnonzero(np.diff(idx) > 1) + 1
    return np.split(idx, breaks)
