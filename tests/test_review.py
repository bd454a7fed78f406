"""Tests of routerisk.review, routerisk.report and the ``routerisk review`` command.

The test town is built here, by hand, in EPSG:32625 (metres; local offsets from X0, Y0):

* Alder Road (residential, two-way, 40 km/h): nodes 1..5 at x = 0, 100, 200, 300, 400, y = 0;
* Birch Lane (tertiary, one-way north, 35 mph): nodes 11, 12, 3, 14, 15 at x = 200,
  y = -200, -100, 0, 100, 200 (it crosses Alder Road at node 3);
* Heron School: a point at (100, 50); Far School at (100, 200); Distant School at (1000, 1000);
  Reed Park: a rectangle x 320..380, y 20..60; crossings at (250, 0) and (20, 0);
* the area "Centre": the rectangle x 50..350, y -100..100.

Every expected value below is worked out by hand in the comments (no outside source).
"""

from __future__ import annotations

import dataclasses
import json
import re
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import pytest
import shapely
from shapely.geometry import LineString, MultiPolygon, Point, Polygon

import routerisk
from routerisk import report, review
from routerisk.cli import main
from routerisk.errors import InputFileError, OptionError
from routerisk.network import Network, save_network
from routerisk.profile import load_profile
from routerisk.tagging import tag_edges

CRS = "EPSG:32625"
X0, Y0 = 420_000.0, 4_262_000.0
MPH = 1.609344
HOSTILE = "<script>alert(1)</script>"

PROFILE_YAML = """\
version: 1
name: review-test
sample_spacing_m: 10
baseline:
  by_road_class: {residential: 0.5, tertiary: 0.5}
  default: 0.5
time_profiles:
  school_days:
    default: 0.5
    windows:
      - {days: [mon, tue, wed, thu, fri], start: "07:00", end: "09:00", multiplier: 2.0}
categories:
  school:
    label: Schools
    select: [{amenity: [school]}]
    weight: 2.0
    radius_m: 100
    decay: none
    time_profile: school_days
  park:
    label: Parks
    select: [{leisure: [park]}]
    weight: 1.0
    radius_m: 30
    decay: linear
crossing_weight: 0.0
bands:
  - {name: quiet, from: 0.0}
  - {name: busy, from: 1.0}
rules:
  - name: school hours
    category: school
    within_m: 60
    windows:
      - {days: [mon, tue, wed, thu, fri], start: "07:30", end: "09:00"}
  - name: tertiary at night
    road_classes: [tertiary]
    windows:
      - {days: [mon, tue, wed, thu, fri, sat, sun], start: "22:00", end: "06:00"}
"""


def _xy(x: float, y: float) -> tuple[float, float]:
    return (X0 + x, Y0 + y)


def _box(x1: float, y1: float, x2: float, y2: float) -> Polygon:
    return shapely.box(X0 + x1, Y0 + y1, X0 + x2, Y0 + y2)


NODES = {1: (0, 0), 2: (100, 0), 3: (200, 0), 4: (300, 0), 5: (400, 0),
         11: (200, -200), 12: (200, -100), 14: (200, 100), 15: (200, 200)}


def make_network(profile_path: Path, *, birch_name: str = "Birch Lane") -> Network:
    """Return the hand-built test town, tagged with routerisk.tagging.tag_edges."""
    profile = load_profile(profile_path)
    rows = []
    alder = [1, 2, 3, 4, 5]
    for a, b in zip(alder[:-1], alder[1:], strict=True):
        for u, v in ((a, b), (b, a)):
            rows.append((u, v, 0, 100 + a, "residential", "Alder Road", False, 40.0))
    birch = [11, 12, 3, 14, 15]
    for u, v in zip(birch[:-1], birch[1:], strict=True):
        rows.append((u, v, 0, 200, "tertiary", birch_name, True, 35 * MPH))
    geoms = [LineString([_xy(*NODES[r[0]]), _xy(*NODES[r[1]])]) for r in rows]
    edges = gpd.GeoDataFrame(
        pd.DataFrame(rows, columns=["u", "v", "key", "osmid", "highway", "name", "oneway",
                                    "speed_kph"]),
        geometry=geoms, crs=CRS)
    edges["lanes"] = np.nan
    edges["sidewalk"] = "both"
    edges["length"] = edges.geometry.length  # straight lines: length = geometry length
    edges["travel_time"] = edges["length"] / (edges["speed_kph"] / 3.6)
    edges = edges.set_index(["u", "v", "key"])
    to_ll = pyproj.Transformer.from_crs(CRS, "EPSG:4326", always_xy=True)
    ids = sorted(NODES)
    xs = np.array([X0 + NODES[i][0] for i in ids])
    ys = np.array([Y0 + NODES[i][1] for i in ids])
    lon, lat = to_ll.transform(xs, ys)
    nodes = gpd.GeoDataFrame({"osmid": ids, "x": xs, "y": ys, "lon": lon, "lat": lat},
                             geometry=gpd.points_from_xy(xs, ys), crs=CRS).set_index("osmid")
    sources = gpd.GeoDataFrame(
        {"category": ["school", "school", "school", "park"],
         "osm_type": ["node", "node", "node", "way"], "osmid": [900, 901, 902, 950],
         "name": ["Heron School", "Far School", "Distant School", "Reed Park"]},
        geometry=[Point(_xy(100, 50)), Point(_xy(100, 200)), Point(_xy(1000, 1000)),
                  _box(320, 20, 380, 60)], crs=CRS)
    crossings = gpd.GeoDataFrame({"osmid": [800, 801], "crossing": ["marked", "marked"]},
                                 geometry=[Point(_xy(250, 0)), Point(_xy(20, 0))], crs=CRS)
    tagged = tag_edges(edges, sources, crossings, profile)
    meta = {"timezone": "Etc/GMT+3", "crs": CRS, "source_name": "test-town.osm",
            "source_sha256": "0" * 64, "source_timestamp": "2024-05-01T00:00:00Z",
            "data_licence": "OpenStreetMap data: ODbL 1.0", "profile": profile.fingerprint}
    return Network(tagged, nodes, sources, crossings, profile, meta)


CENTRE = _box(50, -100, 350, 100)


@pytest.fixture(scope="module")
def town(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Network]:
    d = tmp_path_factory.mktemp("town")
    prof = d / "profile.yaml"
    prof.write_text(PROFILE_YAML, encoding="utf-8")
    return prof, make_network(prof)


@pytest.fixture(scope="module")
def town_dir(town: tuple[Path, Network], tmp_path_factory: pytest.TempPathFactory) -> Path:
    d = tmp_path_factory.mktemp("net") / "network"
    save_network(town[1], d)
    return d


def _area_file(path: Path, geoms: list, names: list | None = None, crs: str = CRS) -> Path:
    gdf = gpd.GeoDataFrame({"name": names or [f"a{i}" for i in range(len(geoms))]},
                           geometry=geoms, crs=crs)
    gdf.to_file(path, driver="GPKG" if path.suffix == ".gpkg" else "GeoJSON")
    return path


def _one(net: Network, geom, name: str = "Centre", **kw) -> dict:
    area = review.Area(name, 0, geom, "areas.geojson", "features[0].geometry")
    return review.review_areas(net, [area], **kw).areas[0]
