"""One-pass reading of an OSM file (.osm, .osm.bz2, .osm.gz, .osm.pbf) with pyosmium.

Collects what the loader and the source extraction need, so the file is decoded once for
ways and nodes (plus one cheap relations-only pass when the profile asks for polygons that
may be multipolygon relations). Clipped extracts are expected: way node references whose
node is missing split the way into the runs of nodes that exist, and relations keep the
members that exist.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import osmium

from .errors import InputFileError

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
WAY_KEYS = ("highway", "name", "lanes", "maxspeed", "oneway", "junction", "sidewalk", "ref",
            "hazard", "maxspeed:conditional", "access")


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


def _osmium_file(p: Path) -> osmium.io.File:
    name = p.name.lower()
    fmt = ""
    if name.endswith((".xml", ".osm.xml")):
        fmt = "osm"
    return osmium.io.File(str(p), fmt) if fmt else osmium.io.File(str(p))


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
    ways: list[RawWay] = []
    features: list[RawFeature] = []
    crossings: dict[int, tuple[float, float, str]] = {}
    signals: set[int] = set()
    missing = 0
    try:
        # Pass 1 (relations only): which ways are members of wanted multipolygons.
        member_ways: dict[int, list[tuple[int, str]]] = {}
        rel_tags: dict[int, dict[str, str]] = {}
        for rel in osmium.FileProcessor(_osmium_file(p), osmium.osm.RELATION):
            tags = dict(rel.tags)
            if tags.get("type") not in ("multipolygon", "boundary") or not want(tags):
                continue
            rel_tags[rel.id] = tags
            for m in rel.members:
                if m.type == "w":
                    member_ways.setdefault(m.ref, []).append((rel.id, m.role or "outer"))
        rel_parts: dict[int, RawFeature] = {
            rid: RawFeature("relation", rid, t) for rid, t in rel_tags.items()
        }

        fp = osmium.FileProcessor(_osmium_file(p), osmium.osm.NODE | osmium.osm.WAY)
        untagged_nodes = osmium.filter.EmptyTagFilter()
        untagged_nodes.enable_for(osmium.osm.NODE)  # ways stay: multipolygon members are bare
        fp = fp.with_locations().with_filter(untagged_nodes)
        header = fp.header
        box = header.box()
        bounds = None
        if box.valid():
            bounds = (box.bottom_left.lon, box.bottom_left.lat, box.top_right.lon,
                      box.top_right.lat)
        timestamp = header.get("osmosis_replication_timestamp") or header.get("timestamp") or None
        for obj in fp:
            if obj.is_node():
                tags = obj.tags
                hw = tags.get("highway")
                if hw == "crossing":
                    loc = obj.location
                    crossings[obj.id] = (loc.lon, loc.lat, tags.get("crossing", "unknown"))
                elif hw == "traffic_signals":
                    signals.add(obj.id)
                td = None
                if want(tags):
                    td = dict(tags)
                    loc = obj.location
                    features.append(RawFeature("node", obj.id, td,
                                               [np.array([[loc.lon, loc.lat]])]))
                continue
            tags = obj.tags
            drivable = is_drivable(tags)
            wanted = want(tags)
            members = member_ways.get(obj.id)
            if not (drivable or wanted or members):
                continue
            # one pass over the node list: id and fixed-point coordinates (osmium keeps
            # 1e-7 degree integers; lon = x / 1e7 is exactly what Location.lon returns)
            arr = np.array([(n.ref, n.x, n.y) for n in obj.nodes], dtype=np.int64
                           ).reshape(-1, 3)
            refs = arr[:, 0].copy()
            xi, yi = arr[:, 1], arr[:, 2]
            ok = (xi >= -_LON_MAX) & (xi <= _LON_MAX) & (yi >= -_LAT_MAX) & (yi <= _LAT_MAX)
            coords = np.column_stack([xi / _PRECISION, yi / _PRECISION])
            coords[~ok] = np.nan
            nbad = int((~ok).sum())
            missing += nbad
            if drivable:
                td = {k: tags.get(k) for k in WAY_KEYS if k in tags}
                for run in _runs(ok):
                    if len(run) >= 2:
                        ways.append(RawWay(obj.id, td, refs[run], coords[run]))
            if wanted and nbad == 0:
                features.append(RawFeature("way", obj.id, dict(tags), [coords]))
            elif wanted and nbad:
                runs = [coords[r] for r in _runs(ok) if len(r) >= 2]
                if runs:
                    features.append(RawFeature("way", obj.id, dict(tags), runs))
            if members:
                runs = [coords[r] for r in _runs(ok) if len(r) >= 2]
                for rid, role in members:
                    for run in runs:
                        rel_parts[rid].lonlat.append(run)
                        rel_parts[rid].roles.append(role)
        features.extend(f for f in rel_parts.values() if f.lonlat)
    except RuntimeError as exc:
        msg = str(exc).strip().splitlines()[0] if str(exc).strip() else "unreadable"
        raise InputFileError(f"cannot read as OSM data ({msg})", path=p) from exc
    if missing:
        log.info("%s: %d way node references point to nodes not in the file (clipped "
                 "extract); kept the runs of nodes that exist", p, missing)
    return RawOSM(str(p), ways, features, crossings, signals, bounds, missing, timestamp)


def _runs(ok: np.ndarray) -> list[np.ndarray]:
    """Return index arrays of the maximal runs of True in ``ok``."""
    if ok.all():
        return [np.arange(len(ok))]
    idx = np.flatnonzero(ok)
    if len(idx) == 0:
        return []
    breaks = np.flatnonzero(np.diff(idx) > 1) + 1
    return np.split(idx, breaks)
