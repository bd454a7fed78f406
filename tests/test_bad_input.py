"""Bad-input catalogue: every command, every input format, tried as a new user would.

Each case runs the command line in-process (``routerisk.cli.main``) on a small invented
fixture written here, and checks what a user sees: exit status 2, one line on stderr that
names the file or the field, no traceback, and no output left behind (no output folder or
file, no hidden ``.name.*.part`` or ``.name.old-*`` leftovers, an existing output untouched).
A few cases are inputs that must WORK (a clipped extract, GeoJSON in a projected CRS).
All fixtures are invented (CC0); coordinates lie in open ocean around the sample town.
"""

from __future__ import annotations

import bz2
import gzip
import hashlib
import json
import os
import shutil
import subprocess
import sys
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import pyproj
import pytest
import yaml

from routerisk import datasets
from routerisk.cli import main
from routerisk.errors import RouteriskError
from routerisk.network.folder import load_network
from routerisk.profile import DEFAULT_PROFILE

from . import _osm_snippets as osm

ROOT = Path(__file__).resolve().parents[1]
# Two points on the sample town's streets (waypoints of sample_area/routes.geojson).
A = (-38.0143295, 38.503153)
B = (-38.0022927, 38.5090085)
DEPART = "2027-03-09T11:00"


# ------------------------------------------------------------------------------ helpers


def _write(path: Path, text: str | bytes) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    if isinstance(text, bytes):
        path.write_bytes(text)
    else:
        path.write_text(text, encoding="utf-8")
    return path


def _grid(tmp: Path, name: str = "grid.osm", **kw) -> Path:
    return osm.grid_town(tmp / name, **kw)


def _geojson(tmp: Path, coords, name: str = "routes.geojson", **props) -> Path:
    feat = {
        "type": "Feature",
        "properties": {"name": "r1", "depart": DEPART, **props},
        "geometry": {"type": "LineString", "coordinates": coords},
    }
    return _write(tmp / name, json.dumps({"type": "FeatureCollection", "features": [feat]}))


def _good_routes(tmp: Path) -> Path:
    return _geojson(tmp, [list(A), list(B)], name="good.geojson")


def _profile(tmp: Path, edit: Callable[[dict], None], name: str = "bad.yaml") -> Path:
    doc = yaml.safe_load(DEFAULT_PROFILE.read_text(encoding="utf-8"))
    edit(doc)
    return _write(tmp / name, yaml.safe_dump(doc, sort_keys=False))


def _set(doc: dict, path: str, value) -> None:
    keys = path.split(".")
    d = doc
    for k in keys[:-1]:
        d = d[int(k)] if isinstance(d, list) else d[k]
    d[keys[-1]] = value


def _net_copy(tmp: Path, town_dir: Path, edit: Callable[[Path], None] | None = None) -> Path:
    d = tmp / "netcopy"
    shutil.copytree(town_dir, d)
    if edit is not None:
        edit(d)
    return d


def _meta_edit(fn: Callable[[dict], None]) -> Callable[[Path], None]:
    def edit(d: Path) -> None:
        meta = json.loads((d / "meta.json").read_text())
        fn(meta)
        (d / "meta.json").write_text(json.dumps(meta))

    return edit


def _area(tmp: Path, geometry, name: str = "area.geojson") -> Path:
    feat = {"type": "Feature", "properties": {"name": "zone"}, "geometry": geometry}
    return _write(tmp / name, json.dumps({"type": "FeatureCollection", "features": [feat]}))


def _gpx(tmp: Path, body: str, name: str = "drives/d1.gpx") -> Path:
    return _write(
        tmp / name,
        '<?xml version="1.0"?>\n<gpx version="1.1" '
        'xmlns="http://www.topografix.com/GPX/1/1">' + body + "</gpx>\n",
    )


def _trkpts(times: bool) -> str:
    pts = []
    for i in range(12):
        t = f"<time>2027-03-01T11:10:{i * 2:02d}Z</time>" if times else ""
        pts.append(f'<trkpt lat="{38.4888052 + i * 0.0003:.7f}" lon="-38.0000528">{t}</trkpt>')
    return "<trk><name>d</name><trkseg>" + "".join(pts) + "</trkseg></trk>"


def _events(tmp: Path, text: str | None = None) -> Path:
    return _write(
        tmp / "events.csv",
        text
        if text is not None
        else "time,lat,lon,type\n2027-03-01T08:10:25-03:00,38.4890,-38.0000,near_miss\n",
    )


def _snapshot(paths: list[Path]) -> dict[Path, str | None]:
    out: dict[Path, str | None] = {}
    for p in paths:
        if p.is_dir():
            h = hashlib.sha256()
            for f in sorted(p.rglob("*")):
                if f.is_file():
                    h.update(str(f.relative_to(p)).encode() + f.read_bytes())
            out[p] = "dir:" + h.hexdigest()
        elif p.is_file():
            out[p] = "file:" + hashlib.sha256(p.read_bytes()).hexdigest()
        else:
            out[p] = None
    return out


def _leftovers(root: Path) -> list[str]:
    return sorted(
        str(p.relative_to(root))
        for p in root.rglob(".*")
        if p.name.endswith(".part") or ".old-" in p.name
    )


# --------------------------------------------------------------------------- the catalogue


@dataclass
class Case:
    """One bad input: how to make it, what the message must name, what must not appear."""

    make: Callable[[Path, Path], list[str]]  # (tmp, town_dir) -> argv
    names: tuple[str, ...]  # the message names each of these (file and/or field)
    outputs: tuple[str, ...] = ()  # paths (relative to tmp) that must not exist afterwards
    keep: tuple[str, ...] = ()  # existing outputs (relative to tmp) that must be unchanged
    setup: Callable[[Path], None] | None = None  # creates ``keep`` before the run
    town: bool = False  # needs the sample town's network folder
    xfail: str | None = None  # a known bug in a module this test file may not fix


def _build(src: Callable[[Path], Path], *extra: str) -> Callable[[Path, Path], list[str]]:
    return lambda tmp, _town: ["build", str(src(tmp)), "--out", str(tmp / "out"), *extra]


def _build_profile(edit: Callable[[dict], None]) -> Callable[[Path, Path], list[str]]:
    return lambda tmp, _town: [
        "build",
        str(_grid(tmp)),
        "--out",
        str(tmp / "out"),
        "--profile",
        str(_profile(tmp, edit)),
    ]


def _score(routes: Callable[[Path], Path], *extra: str) -> Callable[[Path, Path], list[str]]:
    return lambda tmp, town: [
        "score",
        str(routes(tmp)),
        "--network",
        str(town),
        "--out",
        str(tmp / "out"),
        *extra,
    ]


def _score_net(edit: Callable[[Path], None]) -> Callable[[Path, Path], list[str]]:
    return lambda tmp, town: [
        "score",
        str(_good_routes(tmp)),
        "--network",
        str(_net_copy(tmp, town, edit)),
        "--out",
        str(tmp / "out"),
    ]


def _review(area: Callable[[Path], Path], *extra: str) -> Callable[[Path, Path], list[str]]:
    return lambda tmp, town: [
        "review",
        str(area(tmp)),
        "--network",
        str(town),
        "--out",
        str(tmp / "out"),
        *extra,
    ]


def _watch(
    events: Callable[[Path], Path], drives: Callable[[Path], Path], *extra: str
) -> Callable[[Path, Path], list[str]]:
    return lambda tmp, town: [
        "watch",
        str(events(tmp)),
        "--drives",
        str(drives(tmp)),
        "--network",
        str(town),
        "--out",
        str(tmp / "out"),
        *extra,
    ]


def _plan(
    runs: Callable[[Path], Path], *extra: str, date: str = "2027-03-09"
) -> Callable[[Path, Path], list[str]]:
    return lambda tmp, town: [
        "plan",
        str(runs(tmp)),
        "--network",
        str(town),
        "--date",
        date,
        "--out",
        str(tmp / "out"),
        *extra,
    ]


def _evidence(*extra: str) -> Callable[[Path, Path], list[str]]:
    return lambda tmp, _town: ["evidence", *extra, "--chart", str(tmp / "chart.png")]


def _rm(name: str) -> Callable[[Path], None]:
    return lambda d: (d / name).unlink()


def _corrupt_gpkg(d: Path) -> None:
    with open(d / "network.gpkg", "r+b") as fh:
        fh.seek(5000)
        byte = fh.read(1)
        fh.seek(5000)
        fh.write(bytes([byte[0] ^ 0xFF]))


def _truncated_osm(tmp: Path) -> Path:
    text = _grid(tmp, "whole.osm").read_text()
    return _write(tmp / "cut.osm", text[: len(text) // 2])


def _no_roads(tmp: Path) -> Path:
    return osm.write(
        tmp / "paths.osm",
        [
            osm.node(1, 38.5, -38.0),
            osm.node(2, 38.5, -38.001),
            osm.node(3, 38.501, -38.001),
            osm.way(10, [1, 2], highway="footway"),
            osm.way(11, [2, 3], highway="cycleway"),
            osm.node(4, 38.5005, -38.0005, amenity="school", name="Nowhere School"),
        ],
    )


def _duplicate_ids(tmp: Path) -> Path:
    # node 1 twice with different places, and way 1000 twice: not a consistent OSM file
    return _grid(
        tmp,
        "dupes.osm",
        extra=[osm.node(1, 38.6, -38.2), osm.way(1000, [5, 6, 7], highway="primary")],
    )


def _duplicate_node(tmp: Path) -> Path:
    # grid node 6 written a second time somewhere else; ways are all distinct
    return _grid(tmp, "dupe_node.osm", extra=[osm.node(6, 38.7, -38.3)])


def _repeated_way(tmp: Path) -> Path:
    # way 1001 written twice with exactly the same content: still not a consistent file
    return _grid(
        tmp,
        "twice.osm",
        extra=[
            osm.way(
                1001, [5, 6, 7, 8], highway="residential", name="Row 1 Street", maxspeed="25 mph"
            )
        ],
    )


def _lon200(tmp: Path) -> Path:
    # grid node 7 moved to longitude 200 (osmium reads it; it is no place on Earth)
    text = _grid(tmp, "lon200.osm").read_text()
    old = osm.node(7, 38.501, -37.998)
    assert old in text
    return _write(tmp / "lon200.osm", text.replace(old, osm.node(7, 38.501, 200.0)))


def _bad_crossing(tmp: Path) -> Path:
    # a tagged crossing node far off the map, used by no road: the crossing itself is read
    return _grid(tmp, "crossing.osm", extra=[osm.node(50, -91.0, -38.0, highway="crossing")])


def _nan_coordinate(tmp: Path) -> Path:
    text = _grid(tmp, "nan.osm").read_text()
    return _write(tmp / "nan.osm", text.replace('lat="38.5000000"', 'lat="nan"', 1))


def _lat95(tmp: Path) -> Path:
    return osm.write(
        tmp / "lat95.osm",
        [
            osm.node(1, 95.0, -38.0),
            osm.node(2, 95.001, -38.0),
            osm.node(3, 95.002, -38.0),
            osm.way(10, [1, 2, 3], highway="residential", name="Skyward Road"),
            osm.way(11, [3, 2, 1], highway="residential", name="Skyward Road"),
        ],
    )


def _clipped(tmp: Path) -> Path:
    # the grid's ways also reference nodes 900..903 that the extract does not hold
    extra = [
        osm.way(2000, [900, 1, 2, 3, 901], highway="residential", name="Clipped Road"),
        osm.way(2001, [13, 902, 14, 15, 16, 903], highway="tertiary", name="Edge Road"),
    ]
    return _grid(tmp, "clipped.osm", extra=extra)


def _projected_routes(tmp: Path) -> Path:
    to_utm = pyproj.Transformer.from_crs("EPSG:4326", "EPSG:32624", always_xy=True)
    coords = [list(to_utm.transform(*A)), list(to_utm.transform(*B))]
    path = _geojson(tmp, coords, name="utm.geojson")
    data = json.loads(path.read_text())
    data["crs"] = {"type": "name", "properties": {"name": "urn:ogc:def:crs:EPSG::32624"}}
    return _write(path, json.dumps(data))


def _csv_routes(tmp: Path, text: str) -> Path:
    return _write(tmp / "routes.csv", text)


def _existing(rel: str, *, folder: bool) -> Callable[[Path], None]:
    def setup(tmp: Path) -> None:
        p = tmp / rel
        if folder:
            _write(p / "keep.txt", "an earlier result\n")
        else:
            _write(p, "an earlier result\n")

    return setup


_W = "time_profiles.school_days.windows"
_BOWTIE = {
    "type": "Polygon",
    "coordinates": [
        [[-38.02, 38.49], [-37.99, 38.51], [-37.99, 38.49], [-38.02, 38.51], [-38.02, 38.49]]
    ],
}
_FAR_AREA = {
    "type": "Polygon",
    "coordinates": [[[120.0, -60.0], [120.01, -60.0], [120.01, -59.99], [120.0, -60.0]]],
}

CASES: dict[str, Case] = {
    # ---- build: the OSM file
    "build: missing file": Case(_build(lambda t: t / "nowhere.osm"), ("nowhere.osm",), ("out",)),
    "build: empty file": Case(
        _build(lambda t: _write(t / "empty.osm", "")), ("empty.osm",), ("out",)
    ),
    "build: truncated xml": Case(_build(_truncated_osm), ("cut.osm",), ("out",)),
    "build: gzip corrupted": Case(
        _build(
            lambda t: _write(
                t / "bad.osm.gz", gzip.compress(b"<osm>" * 200)[:40] + b"\x00garbage" * 20
            )
        ),
        ("bad.osm.gz",),
        ("out",),
    ),
    "build: bzip2 corrupted": Case(
        _build(
            lambda t: _write(
                t / "bad.osm.bz2", bz2.compress(b"<osm>" * 200)[:30] + b"\xffnot bzip" * 20
            )
        ),
        ("bad.osm.bz2",),
        ("out",),
    ),
    "build: truncated pbf": Case(
        _build(lambda t: _write(t / "cut.osm.pbf", _grid_pbf_bytes(t)[:300])),
        ("cut.osm.pbf",),
        ("out",),
    ),
    "build: not OSM (GeoJSON named .osm)": Case(
        _build(lambda t: _write(t / "roads.osm", '{"type": "FeatureCollection", "features": []}')),
        ("roads.osm",),
        ("out",),
    ),
    "build: wrong suffix": Case(
        _build(lambda t: _write(t / "roads.txt", "x")), ("roads.txt",), ("out",)
    ),
    "build: a folder as SOURCE": Case(
        _build(lambda t: (t / "folder.osm").mkdir() or t / "folder.osm"), ("folder.osm",), ("out",)
    ),
    "build: no drivable roads": Case(_build(_no_roads), ("paths.osm",), ("out",)),
    "build: duplicate ids": Case(_build(_duplicate_ids), ("dupes.osm", "1000"), ("out",)),
    "build: duplicate node id only": Case(
        _build(_duplicate_node), ("dupe_node.osm", "node 6", "duplicate"), ("out",)
    ),
    "build: same way twice, same content": Case(
        _build(_repeated_way), ("twice.osm", "way 1001", "duplicate"), ("out",)
    ),
    "build: latitude 95": Case(_build(_lat95), ("lat95.osm",), ("out",)),
    "build: latitude 95 named as such": Case(
        _build(_lat95), ("lat95.osm", "node 1", "latitude 95 out of range -90..90"), ("out",)
    ),
    "build: longitude 200 on a road": Case(
        _build(_lon200), ("lon200.osm", "node 7", "longitude 200 out of range -180..180"), ("out",)
    ),
    "build: crossing node at latitude -91": Case(
        _build(_bad_crossing), ("crossing.osm", "node 50", "latitude -91 out of range"), ("out",)
    ),
    "build: coordinate not a number": Case(_build(_nan_coordinate), ("nan.osm", "nan"), ("out",)),
    "build: --out under a file": Case(
        lambda t, _: ["build", str(_grid(t)), "--out", str(_write(t / "afile", "x") / "out")],
        ("afile",),
        ("afile/out",),
    ),
    "build: unknown time zone": Case(
        _build(_grid, "--timezone", "Mars/Olympus"), ("--timezone",), ("out",)
    ),
    "build: existing --out": Case(
        _build(_grid), ("out", "--force"), keep=("out",), setup=_existing("out", folder=True)
    ),
    # ---- profiles (read by build --profile)
    "profile: missing file": Case(
        lambda t, _: [
            "build",
            str(_grid(t)),
            "--out",
            str(t / "out"),
            "--profile",
            str(t / "nope.yaml"),
        ],
        ("nope.yaml",),
        ("out",),
    ),
    "profile: empty file": Case(
        lambda t, _: [
            "build",
            str(_grid(t)),
            "--out",
            str(t / "out"),
            "--profile",
            str(_write(t / "e.yaml", "")),
        ],
        ("e.yaml",),
        ("out",),
    ),
    "profile: YAML syntax error": Case(
        lambda t, _: [
            "build",
            str(_grid(t)),
            "--out",
            str(t / "out"),
            "--profile",
            str(_write(t / "s.yaml", "version: 1\nname: [unclosed\n")),
        ],
        ("s.yaml",),
        ("out",),
    ),
    "profile: python object tag": Case(
        lambda t, _: [
            "build",
            str(_grid(t)),
            "--out",
            str(t / "out"),
            "--profile",
            str(_write(t / "obj.yaml", "version: 1\nname: !!python/object/apply:os.getcwd []\n")),
        ],
        ("obj.yaml",),
        ("out",),
    ),
    "profile: TOML syntax error": Case(
        lambda t, _: [
            "build",
            str(_grid(t)),
            "--out",
            str(t / "out"),
            "--profile",
            str(_write(t / "p.toml", "version = 1\nname = \n")),
        ],
        ("p.toml",),
        ("out",),
    ),
    "profile: unknown top key": Case(
        _build_profile(lambda d: d.update(colour="red")), ("bad.yaml", "colour"), ("out",)
    ),
    "profile: unknown category key": Case(
        _build_profile(lambda d: _set(d, "categories.school.wieght", 2)),
        ("bad.yaml", "categories.school.wieght"),
        ("out",),
    ),
    "profile: weight of wrong type": Case(
        _build_profile(lambda d: _set(d, "categories.school.weight", "heavy")),
        ("bad.yaml", "categories.school.weight"),
        ("out",),
    ),
    "profile: negative weight": Case(
        _build_profile(lambda d: _set(d, "categories.retail.weight", -1)),
        ("bad.yaml", "categories.retail.weight"),
        ("out",),
    ),
    "profile: zero radius": Case(
        _build_profile(lambda d: _set(d, "categories.park.radius_m", 0)),
        ("bad.yaml", "categories.park.radius_m"),
        ("out",),
    ),
    "profile: zero sample spacing": Case(
        _build_profile(lambda d: _set(d, "sample_spacing_m", 0)),
        ("bad.yaml", "sample_spacing_m"),
        ("out",),
    ),
    "profile: overlapping windows": Case(
        _build_profile(lambda d: _set(d, f"{_W}.1.start", "08:00")), ("bad.yaml", _W), ("out",)
    ),
    "profile: bad clock": Case(
        _build_profile(lambda d: _set(d, f"{_W}.0.end", "25:61")),
        ("bad.yaml", f"{_W}[0].end"),
        ("out",),
    ),
    "profile: unknown category in a rule": Case(
        _build_profile(
            lambda d: d["rules"].append({"name": "ghosts", "category": "ghost", "within_m": 50})
        ),
        ("bad.yaml", ".category"),
        ("out",),
    ),
    "profile: rule polygons file missing": Case(
        _build_profile(lambda d: d["rules"].append({"name": "zone", "polygons": "zones.geojson"})),
        ("bad.yaml", ".polygons"),
        ("out",),
    ),
    "profile: absurd weight": Case(
        _build_profile(lambda d: _set(d, "categories.school.weight", 1e308)),
        ("bad.yaml", "categories.school.weight"),
        ("out",),
    ),
    "profile: number YAML reads as text": Case(
        lambda t, _: [
            "build",
            str(_grid(t)),
            "--out",
            str(t / "out"),
            "--profile",
            str(
                _write(
                    t / "bad.yaml",
                    DEFAULT_PROFILE.read_text().replace("weight: 3.0", "weight: 3e2"),
                )
            ),
        ],
        ("bad.yaml", "categories.school.weight", "exponent"),
        ("out",),
    ),
    "profile: bands out of order": Case(
        _build_profile(lambda d: _set(d, "bands.1.from", 0.0)),
        ("bad.yaml", "bands[1].from"),
        ("out",),
    ),
    # ---- score: route files
    "score: routes missing": Case(
        _score(lambda t: t / "none.geojson"), ("none.geojson",), ("out",), town=True
    ),
    "score: routes empty": Case(
        _score(lambda t: _write(t / "e.geojson", "  \n")), ("e.geojson",), ("out",), town=True
    ),
    "score: invalid JSON": Case(
        _score(lambda t: _write(t / "j.geojson", '{"type": "Feat')),
        ("j.geojson",),
        ("out",),
        town=True,
    ),
    "score: one point": Case(
        _score(lambda t: _geojson(t, [list(A)])),
        ("routes.geojson", "features[0]"),
        ("out",),
        town=True,
    ),
    "score: NaN coordinate": Case(
        _score(
            lambda t: _write(
                t / "nan.geojson",
                json.dumps(
                    {
                        "type": "Feature",
                        "properties": {"depart": DEPART},
                        "geometry": {
                            "type": "LineString",
                            "coordinates": [[float("nan"), 38.5], list(B)],
                        },
                    }
                ),
            )
        ),
        ("nan.geojson", "coordinates[0]"),
        ("out",),
        town=True,
    ),
    "score: latitude out of range": Case(
        _score(lambda t: _geojson(t, [[-38.0, 95.0], list(B)])),
        ("routes.geojson", "coordinates[0]"),
        ("out",),
        town=True,
    ),
    "score: swapped axes": Case(
        _score(lambda t: _geojson(t, [[A[1], A[0]], [B[1], B[0]]])),
        ("routes.geojson", "swapped"),
        ("out",),
        town=True,
    ),
    "score: point off the network": Case(
        _score(lambda t: _geojson(t, [list(A), [-38.0, 38.56]])),
        ("routes.geojson", "point 1"),
        ("out",),
        town=True,
    ),
    "score: far outside the area": Case(
        _score(lambda t: _geojson(t, [[120.0, -60.0], [120.01, -60.0]])),
        ("routes.geojson", "point 0"),
        ("out",),
        town=True,
    ),
    "score: Polygon instead of a line": Case(
        _score(
            lambda t: _write(
                t / "poly.geojson",
                json.dumps({"type": "Feature", "properties": {}, "geometry": _BOWTIE}),
            )
        ),
        ("poly.geojson", "geometry"),
        ("out",),
        town=True,
    ),
    "score: coordinates not positions": Case(
        _score(lambda t: _geojson(t, [["a", "b"], [1]])),
        ("routes.geojson", "coordinates[0]"),
        ("out",),
        town=True,
    ),
    "score: unknown CRS": Case(
        _score(
            lambda t: _write(
                t / "crs.geojson",
                json.dumps(
                    {
                        "type": "FeatureCollection",
                        "crs": {"type": "name", "properties": {"name": "EPSG:999999"}},
                        "features": [],
                    }
                ),
            )
        ),
        ("crs.geojson", "crs"),
        ("out",),
        town=True,
    ),
    "score: CSV without lat column": Case(
        _score(lambda t: _csv_routes(t, "route,latitud,lon\nr,38.5,-38.0\nr,38.51,-38.0\n")),
        ("routes.csv", "row 1"),
        ("out",),
        town=True,
    ),
    "score: CSV bad number": Case(
        _score(lambda t: _csv_routes(t, "route,lat,lon\nr,38.5,-38.0\nr,north,-38.0\n")),
        ("routes.csv", "row 3"),
        ("out",),
        town=True,
    ),
    "score: GPX with no track": Case(
        _score(lambda t: _gpx(t, "<wpt lat='38.5' lon='-38'/>", name="only.gpx")),
        ("only.gpx", "trk"),
        ("out",),
        town=True,
    ),
    "score: GPX not XML": Case(
        _score(lambda t: _write(t / "broken.gpx", "<gpx><trk>")),
        ("broken.gpx",),
        ("out",),
        town=True,
    ),
    "score: no departure time": Case(
        lambda t, town: [
            "score",
            str(
                _write(
                    t / "nodep.geojson",
                    json.dumps(
                        {
                            "type": "Feature",
                            "properties": {"name": "nd"},
                            "geometry": {"type": "LineString", "coordinates": [list(A), list(B)]},
                        }
                    ),
                )
            ),
            "--network",
            str(town),
            "--out",
            str(t / "out"),
        ],
        ("nodep.geojson", "--depart"),
        ("out",),
        town=True,
    ),
    "score: --depart malformed": Case(
        _score(_good_routes, "--depart", "2027-13-45T99:00"), ("--depart",), ("out",), town=True
    ),
    "score: --depart in year 9999": Case(
        _score(_good_routes, "--depart", "9999-12-31T23:59"),
        ("--depart", "9999"),
        ("out",),
        town=True,
    ),
    "score: route time in year 9999": Case(
        _score(lambda t: _geojson(t, [list(A), list(B)], depart="9999-12-31T23:59:00+00:00")),
        ("routes.geojson", "properties.depart"),
        ("out",),
        town=True,
    ),
    "score: --out is a file": Case(
        _score(_good_routes),
        ("out", "file"),
        keep=("out",),
        setup=_existing("out", folder=False),
        town=True,
    ),
    "score: overlay factor absurd": Case(
        _score(_good_routes, "--overlay", "OVERLAY_BIG"),
        ("big.yaml", "edges[0].factor"),
        ("out",),
        town=True,
    ),
    "score: existing --out": Case(
        _score(_good_routes),
        ("out", "--force"),
        keep=("out",),
        setup=_existing("out", folder=True),
        town=True,
    ),
    "score: a YAML runs file as ROUTES": Case(
        _score(lambda t: datasets.get_path("runs")),
        ("runs.yaml", "YAML runs file", "routerisk plan", "expected a route file", "route,lat,lon"),
        ("out",),
        town=True,
    ),
    "score: a runs file named .csv": Case(
        _score(
            lambda t: _write(t / "runs.csv", datasets.get_path("runs").read_text(encoding="utf-8"))
        ),
        ("runs.csv", "YAML runs file", "expected a route file"),
        ("out",),
        town=True,
    ),
    "score: an OSM PBF as ROUTES": Case(
        _score(lambda t: _write(t / "town.osm.pbf", _grid_pbf_bytes(t))),
        ("town.osm.pbf", "OpenStreetMap extract", "expected a route file"),
        ("out",),
        town=True,
    ),
    "score: an OSM PBF named .geojson": Case(
        _score(lambda t: _write(t / "pbf.geojson", _grid_pbf_bytes(t))),
        ("pbf.geojson", "OpenStreetMap extract"),
        ("out",),
        town=True,
    ),
    "score: OSM XML named .gpx": Case(
        _score(lambda t: _grid(t, "roads.gpx")),
        ("roads.gpx", "OpenStreetMap extract", "expected a route file"),
        ("out",),
        town=True,
    ),
    "score: a gzip file as ROUTES": Case(
        _score(lambda t: _write(t / "r.csv.gz", gzip.compress(b"route,lat,lon\n"))),
        ("r.csv.gz", "compressed", "expected a route file"),
        ("out",),
        town=True,
    ),
    "score: --netwrok typo": Case(
        lambda t, town: [
            "score",
            str(_good_routes(t)),
            "--netwrok",
            str(town),
            "--out",
            str(t / "out"),
        ],
        ("--netwrok", "unknown option", "did you mean --network?"),
        ("out",),
        town=True,
    ),
    "score: abbreviated --net": Case(
        lambda t, town: [
            "score",
            str(_good_routes(t)),
            "--net",
            str(town),
            "--out",
            str(t / "out"),
        ],
        ("unknown option --net", "did you mean --network?"),
        ("out",),
        town=True,
    ),
    "score: --depart date only": Case(
        _score(_good_routes, "--depart", "2026-03-03"),
        ("--depart", "2026-03-03T08:00", "midnight"),
        ("out",),
        town=True,
    ),
    "score: overlay not an overlay": Case(
        _score(_good_routes, "--overlay", "OVERLAY"), ("ov.yaml", "kind"), ("out",), town=True
    ),
    # ---- the network folder
    "network: folder missing": Case(
        lambda t, _: [
            "score",
            str(_good_routes(t)),
            "--network",
            str(t / "nonet"),
            "--out",
            str(t / "out"),
        ],
        ("nonet",),
        ("out",),
    ),
    "network: half-written (no meta.json)": Case(
        _score_net(_rm("meta.json")), ("netcopy", "meta.json"), ("out",), town=True
    ),
    "network: meta without complete": Case(
        _score_net(_meta_edit(lambda m: m.pop("complete"))),
        ("meta.json", "complete"),
        ("out",),
        town=True,
    ),
    "network: meta.json not JSON": Case(
        _score_net(lambda d: (d / "meta.json").write_text('{"complete": tr')),
        ("meta.json",),
        ("out",),
        town=True,
    ),
    "network: another format version": Case(
        _score_net(_meta_edit(lambda m: m.update(format_version=99))),
        ("meta.json", "format_version"),
        ("out",),
        town=True,
    ),
    "network: gpkg checksum mismatch": Case(
        _score_net(_corrupt_gpkg), ("network.gpkg", "gpkg_sha256"), ("out",), town=True
    ),
    "network: gpkg missing": Case(
        _score_net(_rm("network.gpkg")), ("network.gpkg",), ("out",), town=True
    ),
    "network: profile.yaml missing": Case(
        _score_net(_rm("profile.yaml")), ("profile.yaml",), ("out",), town=True
    ),
    "network: profile.yaml edited": Case(
        _score_net(
            lambda d: (d / "profile.yaml").write_text(
                (d / "profile.yaml").read_text().replace("weight: 3.0", "weight: 30.0")
            )
        ),
        ("profile.yaml",),
        ("out",),
        town=True,
    ),
    "network: profile.yaml not YAML": Case(
        _score_net(lambda d: (d / "profile.yaml").write_text("version: [1\n")),
        ("profile.yaml",),
        ("out",),
        town=True,
    ),
    "network: profile of other categories": Case(
        lambda t, town: [
            "score",
            str(_good_routes(t)),
            "--network",
            str(town),
            "--out",
            str(t / "out"),
            "--profile",
            str(
                _profile(t, lambda d: _set(d, "categories.school.select", [{"amenity": "library"}]))
            ),
        ],
        ("bad.yaml", "categories.school.select"),
        ("out",),
        town=True,
    ),
    # ---- suggest
    "suggest: --count 0": Case(
        lambda t, town: [
            "suggest",
            str(_good_routes(t)),
            "--network",
            str(town),
            "--count",
            "0",
            "--map",
            str(t / "alt.html"),
        ],
        ("--count",),
        ("alt.html",),
        town=True,
    ),
    "suggest: --keep-every 0": Case(
        lambda t, town: [
            "suggest",
            str(_good_routes(t)),
            "--network",
            str(town),
            "--keep-every",
            "0",
            "--map",
            str(t / "alt.html"),
        ],
        ("--keep-every",),
        ("alt.html",),
        town=True,
    ),
    "suggest: --map is a folder": Case(
        lambda t, town: [
            "suggest",
            str(_good_routes(t)),
            "--network",
            str(town),
            "--map",
            str(t / "maps"),
            "--force",
        ],
        ("maps", "folder"),
        keep=("maps",),
        setup=_existing("maps", folder=True),
        town=True,
    ),
    "suggest: existing --map": Case(
        lambda t, town: [
            "suggest",
            str(_good_routes(t)),
            "--network",
            str(town),
            "--map",
            str(t / "alt.html"),
        ],
        ("alt.html", "--force"),
        keep=("alt.html",),
        setup=_existing("alt.html", folder=False),
        town=True,
    ),
    "suggest: point off the network": Case(
        lambda t, town: [
            "suggest",
            str(_geojson(t, [list(A), [-38.0, 38.56]])),
            "--network",
            str(town),
            "--map",
            str(t / "alt.html"),
        ],
        ("routes.geojson", "point 1"),
        ("alt.html",),
        town=True,
    ),
    "suggest: --max-extra-time 25": Case(
        lambda t, town: [
            "suggest",
            str(_good_routes(t)),
            "--network",
            str(town),
            "--max-extra-time",
            "25",
            "--map",
            str(t / "alt.html"),
        ],
        ("--max-extra-time", "fraction", "0.25 means 25 %"),
        ("alt.html",),
        town=True,
    ),
    "suggest: --depart date only": Case(
        lambda t, town: [
            "suggest",
            str(_good_routes(t)),
            "--network",
            str(town),
            "--depart",
            "2026-03-03",
            "--map",
            str(t / "alt.html"),
        ],
        ("--depart", "2026-03-03T08:00"),
        ("alt.html",),
        town=True,
    ),
    "suggest: unknown option": Case(
        lambda t, town: [
            "suggest",
            str(_good_routes(t)),
            "--network",
            str(town),
            "--max-extra-tme",
            "0.2",
            "--map",
            str(t / "alt.html"),
        ],
        ("--max-extra-tme", "did you mean --max-extra-time?"),
        ("alt.html",),
        town=True,
    ),
    # ---- review: area polygons
    "review: area missing": Case(
        _review(lambda t: t / "noarea.geojson"), ("noarea.geojson",), ("out",), town=True
    ),
    "review: area file empty": Case(
        _review(lambda t: _write(t / "a.geojson", "")), ("a.geojson",), ("out",), town=True
    ),
    "review: no features": Case(
        _review(
            lambda t: _write(
                t / "a.geojson", json.dumps({"type": "FeatureCollection", "features": []})
            )
        ),
        ("a.geojson",),
        ("out",),
        town=True,
    ),
    "review: empty polygon": Case(
        _review(lambda t: _area(t, {"type": "Polygon", "coordinates": []})),
        ("area.geojson", "features[0]"),
        ("out",),
        town=True,
    ),
    "review: self-intersecting polygon": Case(
        _review(lambda t: _area(t, _BOWTIE)),
        ("area.geojson", "features[0].geometry"),
        ("out",),
        town=True,
    ),
    "review: a line, not an area": Case(
        _review(lambda t: _area(t, {"type": "LineString", "coordinates": [list(A), list(B)]})),
        ("area.geojson", "features[0].geometry"),
        ("out",),
        town=True,
    ),
    "review: area off the network": Case(
        _review(lambda t: _area(t, _FAR_AREA)), ("zone",), ("out",), town=True
    ),
    "review: area not GeoJSON": Case(
        _review(lambda t: _write(t / "a.geojson", "<html/>")), ("a.geojson",), ("out",), town=True
    ),
    "review: --at malformed": Case(
        _review(lambda t: _area(t, _BOWTIE), "--at", "someday 8"), ("--at",), ("out",), town=True
    ),
    "review: unknown rule in --what-if": Case(
        _review(lambda t: datasets.get_path("area"), "--what-if", "rule:no such rule=off"),
        ("--what-if",),
        ("out",),
        town=True,
    ),
    "review: absurd --what-if weight": Case(
        _review(lambda t: datasets.get_path("area"), "--what-if", "weight:school=1e308"),
        ("--what-if",),
        ("out",),
        town=True,
    ),
    "review: --report not .html": Case(
        _review(lambda t: datasets.get_path("area"), "--report", "REPORT/report.pdf"),
        ("--report",),
        ("out", "report.pdf"),
        town=True,
    ),
    "review: existing --out": Case(
        _review(lambda t: datasets.get_path("area")),
        ("out", "--force"),
        keep=("out",),
        setup=_existing("out", folder=True),
        town=True,
    ),
    "review: existing --report": Case(
        lambda t, town: [
            "review",
            str(datasets.get_path("area")),
            "--network",
            str(town),
            "--report",
            str(t / "report.html"),
        ],
        ("report.html", "--force"),
        keep=("report.html",),
        setup=_existing("report.html", folder=False),
        town=True,
    ),
    # ---- evidence
    "evidence: --benchmark missing": Case(
        _evidence("--per", "1e9"), ("--benchmark",), ("chart.png",)
    ),
    "evidence: --per not a number": Case(
        _evidence("--benchmark", "1", "--per", "lots"), ("--per",), ("chart.png",)
    ),
    "evidence: --confidence 1.5": Case(
        _evidence("--benchmark", "1", "--per", "1e9", "--confidence", "1.5"),
        ("--confidence",),
        ("chart.png",),
    ),
    "evidence: --segments missing": Case(
        _evidence("--benchmark", "1", "--per", "1e9", "--segments", "SEG/none.geojson"),
        ("none.geojson",),
        ("chart.png",),
    ),
    "evidence: --segments not segments": Case(
        lambda t, _: [
            "evidence",
            "--benchmark",
            "1",
            "--per",
            "1e9",
            "--chart",
            str(t / "chart.png"),
            "--segments",
            str(_write(t / "seg.geojson", json.dumps({"type": "Feature"}))),
        ],
        ("seg.geojson", "type"),
        ("chart.png",),
    ),
    "evidence: --drives without --network": Case(
        lambda t, _: [
            "evidence",
            "--benchmark",
            "1",
            "--per",
            "1e9",
            "--chart",
            str(t / "chart.png"),
            "--drives",
            str(t),
        ],
        ("--network",),
        ("chart.png",),
    ),
    "evidence: drives folder without drives": Case(
        lambda t, town: [
            "evidence",
            "--benchmark",
            "1",
            "--per",
            "1e9",
            "--chart",
            str(t / "chart.png"),
            "--drives",
            str((t / "empty").mkdir() or t / "empty"),
            "--network",
            str(town),
        ],
        ("empty", "--drives"),
        ("chart.png",),
        town=True,
    ),
    "evidence: existing --chart": Case(
        lambda t, _: [
            "evidence",
            "--benchmark",
            "1",
            "--per",
            "1e9",
            "--chart",
            str(t / "chart.png"),
        ],
        ("chart.png", "--force"),
        keep=("chart.png",),
        setup=_existing("chart.png", folder=False),
    ),
    # ---- watch: events and drives
    "watch: events missing": Case(
        _watch(lambda t: t / "noevents.csv", lambda t: _gpx(t, _trkpts(True)).parent),
        ("noevents.csv",),
        ("out",),
        town=True,
    ),
    "watch: events without lat column": Case(
        _watch(
            lambda t: _events(t, "time,lon,type\n2027-03-01T08:10:25-03:00,-38.0,stop\n"),
            lambda t: _gpx(t, _trkpts(True)).parent,
        ),
        ("events.csv", "lat"),
        ("out",),
        town=True,
    ),
    "watch: drives folder missing": Case(
        _watch(_events, lambda t: t / "nodrives"), ("nodrives", "--drives"), ("out",), town=True
    ),
    "watch: GPX drive without times": Case(
        _watch(_events, lambda t: _gpx(t, _trkpts(False)).parent),
        ("d1.gpx", "time"),
        ("out",),
        town=True,
    ),
    "watch: GPX drive with no track": Case(
        _watch(_events, lambda t: _gpx(t, "<metadata><name>nothing</name></metadata>").parent),
        ("d1.gpx", "trk"),
        ("out",),
        town=True,
    ),
    "watch: --fdr 2": Case(
        _watch(_events, lambda t: _gpx(t, _trkpts(True)).parent, "--fdr", "2"),
        ("--fdr",),
        ("out",),
        town=True,
    ),
    "watch: existing --out": Case(
        _watch(_events, lambda t: _gpx(t, _trkpts(True)).parent),
        ("out", "--force"),
        keep=("out",),
        setup=_existing("out", folder=True),
        town=True,
    ),
    # ---- plan: the runs file and its options
    "plan: runs file missing": Case(
        _plan(lambda t: t / "noruns.yaml"), ("noruns.yaml",), ("out",), town=True
    ),
    "plan: unknown key in a run": Case(
        _plan(
            lambda t: _write(
                t / "runs.yaml",
                ("runs:\n  - name: x\n    route: routes.geojson\n    colour: red\n"),
            )
        ),
        ("runs.yaml", "runs[0].colour"),
        ("out",),
        town=True,
    ),
    "plan: clock 25:00": Case(
        _plan(
            lambda t: _write(
                t / "runs.yaml",
                (
                    f"runs:\n  - name: x\n    route: {datasets.get_path('routes')}\n"
                    "    route_name: school-run\n    earliest: '25:00'\n    latest: '17:00'\n"
                ),
            )
        ),
        ("runs.yaml", "runs[0].earliest"),
        ("out",),
        town=True,
    ),
    "plan: --date malformed": Case(
        _plan(lambda t: datasets.get_path("runs"), date="2027-02-30"),
        ("--date",),
        ("out",),
        town=True,
    ),
    "plan: --vehicles 0": Case(
        _plan(lambda t: datasets.get_path("runs"), "--vehicles", "0"),
        ("--vehicles",),
        ("out",),
        town=True,
    ),
    "plan: existing --out": Case(
        _plan(lambda t: datasets.get_path("runs")),
        ("out", "--force"),
        keep=("out",),
        setup=_existing("out", folder=True),
        town=True,
    ),
    # ---- demo
    "demo: existing --out": Case(
        lambda t, _: ["demo", "--out", str(t / "out")],
        ("out", "--force"),
        keep=("out",),
        setup=_existing("out", folder=True),
    ),
}


def _grid_pbf_bytes(tmp: Path) -> bytes:
    import osmium

    src = _grid(tmp, "forpbf.osm")
    dst = tmp / "whole.osm.pbf"
    with osmium.SimpleWriter(str(dst)) as w:
        for obj in osmium.FileProcessor(str(src)):
            if obj.is_node():
                w.add_node(obj)
            elif obj.is_way():
                w.add_way(obj)
    return dst.read_bytes()


def _overlay_argv(argv: list[str], tmp: Path) -> list[str]:
    if "OVERLAY_BIG" in argv:
        net = load_network(Path(argv[argv.index("--network") + 1]))
        u, v, k = (int(x) for x in net.edges.index[0])
        ov = _write(
            tmp / "big.yaml",
            yaml.safe_dump(
                {
                    "version": 1,
                    "kind": "routerisk-overlay",
                    "edges": [{"u": u, "v": v, "key": k, "factor": 1e308}],
                }
            ),
        )
        argv = [str(ov) if a == "OVERLAY_BIG" else a for a in argv]
    if "OVERLAY" in argv:
        ov = _write(tmp / "ov.yaml", yaml.safe_dump({"version": 1, "kind": "something else"}))
        argv = [str(ov) if a == "OVERLAY" else a for a in argv]
    return [a.replace("REPORT/", str(tmp) + "/").replace("SEG/", str(tmp) + "/") for a in argv]


def test_catalogue_is_large_enough():
    assert len(CASES) >= 40


def _params() -> list:
    return [
        pytest.param(name, marks=pytest.mark.xfail(reason=c.xfail, strict=True))
        if c.xfail
        else name
        for name, c in CASES.items()
    ]


@pytest.mark.parametrize("name", _params())
def test_bad_input(name, tmp_path, capsys, request):
    case = CASES[name]
    town = request.getfixturevalue("town_dir") if case.town else tmp_path / "no-town"
    work = tmp_path / "w"
    work.mkdir()
    if case.setup is not None:
        case.setup(work)
    before = _snapshot([work / k for k in case.keep])
    argv = _overlay_argv(case.make(work, town), work)
    code = main(argv)
    cap = capsys.readouterr()
    err = cap.err.strip()
    assert code == 2, f"exit {code}; stderr: {cap.err!r}; stdout: {cap.out[-400:]!r}"
    assert "Traceback" not in cap.err and "Traceback" not in cap.out
    assert err.startswith("routerisk: error: "), err
    assert "\n" not in err, f"not one line: {err!r}"
    for needle in case.names:
        assert needle in err, f"{needle!r} not named in {err!r}"
    for rel in case.outputs:
        assert not (work / rel).exists(), f"{rel} was left behind"
    assert _snapshot([work / k for k in case.keep]) == before, "an existing output changed"
    assert not _leftovers(work), _leftovers(work)
    if case.town:
        assert not _leftovers(town.parent)


# ------------------------------------------------------------------ inputs that must work


def test_clipped_extract_builds(tmp_path, capsys):
    # ways referencing nodes missing from the file (a clipped extract) keep their runs of
    # existing nodes: the build works and records how many references were missing
    src = _clipped(tmp_path)
    out = tmp_path / "net"
    assert main(["build", str(src), "--out", str(out), "--json"]) == 0
    summary = json.loads(capsys.readouterr().out)
    assert summary["edges"] > 0
    net = load_network(out)
    assert net.meta["missing_node_refs"] == 4
    assert "Clipped Road" in set(net.edges["name"]) or any(
        "Clipped Road" in n for n in net.edges["name"]
    )


def test_routes_in_a_projected_crs_score_like_wgs84(tmp_path, capsys, town_dir):
    # the same two waypoints given in UTM metres (legacy GeoJSON crs member) and in degrees
    utm = _projected_routes(tmp_path)
    deg = _good_routes(tmp_path)
    assert main(["score", str(utm), "--network", str(town_dir), "--json"]) == 0
    a = json.loads(capsys.readouterr().out)["routes"][0]
    assert main(["score", str(deg), "--network", str(town_dir), "--json"]) == 0
    b = json.loads(capsys.readouterr().out)["routes"][0]
    assert a["length_km"] == pytest.approx(b["length_km"], abs=1e-3)
    assert a["risk"] == pytest.approx(b["risk"], rel=1e-3)


def test_area_in_a_projected_crs_reviews(tmp_path, capsys, town_dir):
    # the sample area reprojected to UTM with its CRS stated (GeoJSON via pyogrio) reviews
    # the same network length as the WGS 84 file
    import geopandas as gpd

    src = gpd.read_file(datasets.get_path("area"))
    utm = tmp_path / "area_utm.gpkg"
    src.to_crs("EPSG:32624").to_file(utm, driver="GPKG")
    assert main(["review", str(utm), "--network", str(town_dir), "--json"]) == 0
    a = json.loads(capsys.readouterr().out)
    assert (
        main(["review", str(datasets.get_path("area")), "--network", str(town_dir), "--json"]) == 0
    )
    b = json.loads(capsys.readouterr().out)
    assert [x["network_km"] for x in a["areas"]] == pytest.approx(
        [x["network_km"] for x in b["areas"]], rel=1e-3
    )


def test_debug_shows_the_traceback(tmp_path):
    # as a user runs it: without --debug one line, with --debug Python's whole traceback
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    argv = [
        sys.executable,
        "-m",
        "routerisk",
        "build",
        str(tmp_path / "nowhere.osm"),
        "--out",
        str(tmp_path / "o"),
    ]
    plain = subprocess.run(argv, env=env, cwd=ROOT, capture_output=True, text=True, timeout=120)
    debug = subprocess.run(
        [*argv[:3], "--debug", *argv[3:]],
        env=env,
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert plain.returncode == 2 and "Traceback" not in plain.stderr
    assert plain.stderr.strip().count("\n") == 0 and "nowhere.osm" in plain.stderr
    assert debug.returncode != 0
    assert "Traceback (most recent call last)" in debug.stderr
    assert "InputFileError" in debug.stderr and "nowhere.osm" in debug.stderr
    assert not (tmp_path / "o").exists()
    # in-process, --debug re-raises the error itself
    with pytest.raises(RouteriskError):
        main(["--debug", "build", str(tmp_path / "nowhere.osm"), "--out", str(tmp_path / "o")])


def test_broken_pipe_is_quiet(tmp_path, town_dir):
    # `routerisk score ... --json | head -1`: the reader goes away; no traceback, no noise
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    argv = [
        sys.executable,
        "-m",
        "routerisk",
        "score",
        str(_good_routes(tmp_path)),
        "--network",
        str(town_dir),
        "--json",
    ]
    proc = subprocess.Popen(argv, env=env, cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    proc.stdout.close()  # before the command prints anything
    err = proc.stderr.read().decode()
    proc.stderr.close()
    code = proc.wait(timeout=120)
    assert code in (0, 1), (code, err)
    assert "Traceback" not in err and "BrokenPipe" not in err and "Exception ignored" not in err


def test_events_beyond_the_calendar_are_left_out(tmp_path, capsys, town_dir):
    # an event log row in year 9999 (or 1) is reported and left out, not a crash
    drives = tmp_path / "drives"
    drives.mkdir()
    shutil.copy(datasets.get_path("drives") / "drive-01.gpx", drives)
    ev = _write(
        tmp_path / "events.csv",
        "time,lat,lon,type\n"
        "9999-12-31T23:59:59+14:00,38.4890,-38.0000,stop\n"
        "0001-01-01T00:00:00-12:00,38.4890,-38.0000,stop\n"
        "2027-03-01T08:02:03-03:00,38.4892562,-38.0069354,stop\n",
    )  # drive-01
    assert (
        main(["watch", str(ev), "--drives", str(drives), "--network", str(town_dir), "--json"]) == 0
    )
    doc = json.loads(capsys.readouterr().out)
    assert [r["row"] for r in doc["events_rejected"]] == [1, 2]
    assert doc["events_matched"] == 1
