"""Tests of routerisk.analysis.review, routerisk.render.report and the ``routerisk review`` command.

The test town is built here, by hand, in EPSG:32625 (metres; local offsets from X0, Y0):

* Alder Road (residential, two-way, 40 km/h): nodes 1..5 at x = 0, 100, 200, 300, 400, y = 0;
* Birch Lane (tertiary, one-way north, 35 mph): nodes 11, 12, 3, 14, 15 at x = 200,
  y = -200, -100, 0, 100, 200 (it crosses Alder Road at node 3);
* Heron School: a point at (100, 50); Far School at (100, 200); Distant School at (1000, 1000);
  Reed Park: a rectangle x 320..380, y 20..60; crossings at (250, 0) and (20, 0);
* the area "Centre": the rectangle x 50..350, y -100..100.

Expected values of the hand-built town are worked out by hand in the comments (no outside
source); the one outside reference, geopandas, is named at its test.
"""

from __future__ import annotations

import io
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
from routerisk.analysis import review
from routerisk.cli import main
from routerisk.errors import InputFileError, OptionError
from routerisk.network.folder import FORMAT_VERSION, Network, save_network
from routerisk.network.tagging import tag_edges
from routerisk.profile import load_profile
from routerisk.render import report, review_files, review_report

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


NODES = {
    1: (0, 0),
    2: (100, 0),
    3: (200, 0),
    4: (300, 0),
    5: (400, 0),
    11: (200, -200),
    12: (200, -100),
    14: (200, 100),
    15: (200, 200),
}


def make_network(profile_path: Path, *, birch_name: str = "Birch Lane") -> Network:
    """Return the hand-built test town, tagged with routerisk.network.tagging.tag_edges."""
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
        pd.DataFrame(
            rows, columns=["u", "v", "key", "osmid", "highway", "name", "oneway", "speed_kph"]
        ),
        geometry=geoms,
        crs=CRS,
    )
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
    nodes = gpd.GeoDataFrame(
        {"osmid": ids, "x": xs, "y": ys, "lon": lon, "lat": lat},
        geometry=gpd.points_from_xy(xs, ys),
        crs=CRS,
    ).set_index("osmid")
    sources = gpd.GeoDataFrame(
        {
            "category": ["school", "school", "school", "park"],
            "osm_type": ["node", "node", "node", "way"],
            "osmid": [900, 901, 902, 950],
            "name": ["Heron School", "Far School", "Distant School", "Reed Park"],
        },
        geometry=[
            Point(_xy(100, 50)),
            Point(_xy(100, 200)),
            Point(_xy(1000, 1000)),
            _box(320, 20, 380, 60),
        ],
        crs=CRS,
    )
    crossings = gpd.GeoDataFrame(
        {"osmid": [800, 801], "crossing": ["marked", "marked"]},
        geometry=[Point(_xy(250, 0)), Point(_xy(20, 0))],
        crs=CRS,
    )
    tagged = tag_edges(edges, sources, crossings, profile)
    meta = {
        "format_version": FORMAT_VERSION,
        "timezone": "Etc/GMT+3",
        "crs": CRS,
        "source_name": "test-town.osm",
        "source_sha256": "0" * 64,
        "source_timestamp": "2024-05-01T00:00:00Z",
        "data_licence": "OpenStreetMap data: ODbL 1.0",
        "profile": profile.fingerprint,
    }
    return Network(tagged, nodes, sources, crossings, profile, meta)


CENTRE = _box(50, -100, 350, 100)


@pytest.fixture(scope="module")
def hand(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, Network]:
    d = tmp_path_factory.mktemp("hand")
    prof = d / "profile.yaml"
    prof.write_text(PROFILE_YAML, encoding="utf-8")
    return prof, make_network(prof)


@pytest.fixture(scope="module")
def hand_dir(hand: tuple[Path, Network], tmp_path_factory: pytest.TempPathFactory) -> Path:
    d = tmp_path_factory.mktemp("net") / "network"
    save_network(hand[1], d)
    return d


def _area_file(path: Path, geoms: list, names: list | None = None, crs: str = CRS) -> Path:
    gdf = gpd.GeoDataFrame(
        {"name": names or [f"a{i}" for i in range(len(geoms))]}, geometry=geoms, crs=crs
    )
    gdf.to_file(path, driver="GPKG" if path.suffix == ".gpkg" else "GeoJSON")
    return path


def _one(net: Network, geom, name: str = "Centre", **kw) -> dict:
    area = review.Area(name, 0, geom, "areas.geojson", "features[0].geometry")
    return review.review_areas(net, [area], **kw).areas[0]


# --- the hand-built area: every figure worked out by hand -----------------------------------


def test_km_by_band_influence_sources_speed(hand: tuple[Path, Network]) -> None:
    a = _one(hand[1], CENTRE)
    # Clipped to x 50..350, y -100..100 (hand computation, no outside source):
    # Alder Road, per direction: 50 (x 50-100) + 100 + 100 + 50 (x 300-350) = 300 m, two-way;
    # Birch Lane, one-way: y -100..0 and 0..100 = 200 m (the edges that only touch the
    # boundary at y = -100 and y = 100 are not in the area). Directed 0.8 km, centreline 0.5.
    assert a["network_km"] == pytest.approx(0.8, abs=1e-9)
    assert a["centreline_km"] == pytest.approx(0.5, abs=1e-9)
    assert a["edges"] == 10
    # Heron School at (100, 50), radius 100, decay none: a point (x, 0) is within 100 m when
    # |x - 100| <= 86.6; samples every 10 m at 5, 15, ... so 9 of 10 samples are in on Alder
    # x 0-100 and x 100-200: exposure 0.9, exposure per km 0.5 + 2 x 0.9 = 2.3 (busy, >= 1).
    # Everything else is quiet (Reed Park lifts Alder x 300-400 only to 0.5 + 0.296).
    # busy = (50 + 100) x 2 directions = 300 m; quiet = 800 - 300 = 500 m.
    assert a["km_by_band"] == {"quiet": pytest.approx(0.5), "busy": pytest.approx(0.3)}
    assert a["centreline_km_by_band"] == {"quiet": pytest.approx(0.35), "busy": pytest.approx(0.15)}
    # km in school influence = clipped km x infl (0.9): (0.05 + 0.1) x 0.9 x 2 = 0.27.
    # Reed Park (x 320..380, y 20..60, radius 30): every sample of Alder x 300-400 is within
    # 30 m (x 305: 25 m), so infl 1.0 there: 0.05 km x 1.0 x 2 = 0.1.
    assert a["km_in_influence"] == {"school": pytest.approx(0.27), "park": pytest.approx(0.1)}
    assert a["share_in_influence"]["school"] == pytest.approx(0.27 / 0.8, abs=1e-4)
    # Heron School inside; Far School (100, 200) exactly 100 m from the edge y = 100: within
    # the radius; Distant School far away. Reed Park overlaps the area.
    assert a["sources"] == {"school": 2, "park": 1}
    assert a["sources_inside"] == {"school": 1, "park": 1}
    # Crossing (250, 0) is inside, (20, 0) on Alder Road but outside: 1 per 0.5 centreline km.
    assert a["crossings"] == 1
    assert a["crossings_per_km"] == pytest.approx(2.0)
    # Alder 40 km/h = 24.9 mph; Birch exactly 35 mph, which belongs to 26-35 (inclusive).
    assert a["km_by_speed"] == {
        "<= 25 mph": pytest.approx(0.6),
        "26-35 mph": pytest.approx(0.2),
        "36-45 mph": 0.0,
        "> 45 mph": 0.0,
    }
    # Exposure (multipliers 1) = sum km x exposure per km:
    # 0.3 x 2.3 + 0.2 x 0.5 (Alder 200-300) + 0.2 x 0.5 (Birch) + 0.1 x (0.5 + 0.29589)
    # where 0.29589 = mean of linear nearness 1 - d/30 over the samples of Alder x 300-400
    # (d = 25, 20.6, 20 x 6, 20.6, 25 m) = 0.9696.
    assert a["exposure"] == pytest.approx(0.9696, abs=1e-4)
    # School time profile: 2.0 on weekdays 07-09, 0.5 otherwise; the school part at weight
    # 2 is 0.27 km x 2 = 0.54, so hour 7 minus hour 6 = (2.0 - 0.5) x 0.54 = 0.81.
    hours = a["exposure_by_hour"]
    assert len(hours) == 168
    assert hours[7] - hours[6] == pytest.approx(0.81, abs=1e-4)
    assert hours[5 * 24 + 7] == pytest.approx(hours[6], abs=1e-9)  # Saturday: no window


def test_closed_km_in_and_outside_school_hours(hand: tuple[Path, Network]) -> None:
    a = _one(hand[1], CENTRE, at=review.parse_time("sat 23:10"))
    closed = a["closed_km_by_hour"]
    assert len(closed) == 168
    # "school hours" (within 60 m of a school, weekdays 07:30-09:00) covers Alder x 0-200
    # (50 m from Heron School): 0.3 km of it is in the area. 07:30 starts inside hour 7, so
    # hours 7 and 8 are closed (an hour is closed if a rule is in force at any minute).
    # "tertiary at night" (22:00-06:00 every day) covers Birch Lane: 0.2 km in the area.
    for day in range(7):
        base = 24 * day
        school = 0.3 if day < 5 else 0.0
        assert closed[base + 6] == 0.0
        assert closed[base + 7] == pytest.approx(school)
        assert closed[base + 8] == pytest.approx(school)
        assert closed[base + 9] == 0.0
        assert closed[base + 12] == 0.0
        for h in (22, 23, 0, 5):
            assert closed[base + h] == pytest.approx(0.2)
    # In all: 0.3 km x 10 hours + 0.2 km x 56 hours = 14.2 km-hours a week.
    assert a["closed_km_hours"] == pytest.approx(14.2)
    assert a["closed_km_by_rule"]["school hours"][7] == pytest.approx(0.3)
    assert sum(a["closed_km_by_rule"]["tertiary at night"]) == pytest.approx(11.2)
    assert a["closed_peak"] == {"hour": 7, "label": "Mon 07:00", "km": pytest.approx(0.3)}
    # Open at Mon 07:00: Alder x 200-400 both ways (a strongly connected part of 3 nodes,
    # 0.3 km), and Birch's one-way edges into and out of node 3 (between parts).
    peak = a["connectivity"]["peak"]
    assert a["allowed_parts"] == peak["parts"]
    assert [(p["km"], p["nodes"]) for p in peak["parts"]] == [(pytest.approx(0.3), 3)]
    assert peak["km_between_parts"] == pytest.approx(0.2)
    assert peak["nodes_without_open_edge"] == 2  # nodes 1 and 2
    assert peak["largest_share"] == pytest.approx(0.6)
    # Saturday 23:10: Birch closed, all of Alder open: one part of 5 nodes, 0.6 km.
    at = a["connectivity"]["at"]
    assert at["label"] == "Sat 23:10" and at["closed_km"] == pytest.approx(0.2)
    assert [(p["km"], p["nodes"]) for p in at["parts"]] == [(pytest.approx(0.6), 5)]
    assert a["connectivity"]["none_closed"]["open_km"] == pytest.approx(0.8)


def test_hotspots_and_clusters(hand: tuple[Path, Network]) -> None:
    a = _one(hand[1], CENTRE, top=3)
    top = a["hotspots"]
    assert len(top) == 3
    # Alder x 100-200: 0.1 km x 2.3 = 0.23; Alder x 50-100: 0.05 x 2.3 = 0.115; then 0.05.
    assert (top[0]["u"], top[0]["v"]) in ((2, 3), (3, 2))
    assert top[0]["exposure"] == pytest.approx(0.23)
    assert top[0]["directions"] == 2 and top[0]["street"] == "Alder Road"
    assert top[1]["exposure"] == pytest.approx(0.115)
    # The school part of 2.3 per km is 1.8: a share of 0.7826, nearest school Heron School.
    assert top[0]["reasons"] == [
        {
            "category": "school",
            "label": "Schools",
            "share": pytest.approx(1.8 / 2.3, abs=1e-4),
            "near": "Heron School",
        }
    ]
    # The busy edges form one cluster: Alder x 50-200, 0.3 km directed, 2 segments.
    (cl,) = a["clusters"]
    assert cl["km"] == pytest.approx(0.3) and cl["centreline_km"] == pytest.approx(0.15)
    assert cl["segments"] == 2 and cl["streets"] == ["Alder Road"]


def test_hole_multipolygon_partly_off(hand: tuple[Path, Network]) -> None:
    net = hand[1]
    hole = Polygon(CENTRE.exterior.coords, [_box(120, -20, 180, 20).exterior.coords])
    a = _one(net, hole)
    # The hole removes Alder x 120-180 (both ways): 0.8 - 0.12 = 0.68 km; busy keeps
    # x 50-120 and 180-200: (70 + 20) x 2 = 0.18 km.
    assert a["network_km"] == pytest.approx(0.68)
    assert a["km_by_band"]["busy"] == pytest.approx(0.18)
    multi = MultiPolygon([_box(50, -50, 150, 50), _box(250, -50, 350, 50)])
    b = _one(net, multi)
    # Alder x 50-150 and 250-350, both ways: 0.4 km; Birch (x = 200) is in neither.
    assert b["network_km"] == pytest.approx(0.4)
    assert b["km_by_speed"]["26-35 mph"] == 0.0
    partly = _box(300, -50, 800, 50)
    c = _one(net, partly)
    # Only Alder x 300-400 lies inside: 0.2 km directed; the rest is off the network.
    assert c["network_km"] == pytest.approx(0.2)
    assert c["closed_km_hours"] == 0.0


def test_area_in_another_crs_is_reprojected(hand: tuple[Path, Network], tmp_path: Path) -> None:
    net = hand[1]
    centre_3857 = gpd.GeoSeries([CENTRE], crs=CRS).to_crs("EPSG:3857")
    path = _area_file(tmp_path / "a.geojson", list(centre_3857), ["Centre"], crs="EPSG:3857")
    areas = review.read_areas(path, crs=net.crs)
    assert areas[0].name == "Centre"
    a = review.review_areas(net, areas).areas[0]
    # Same rectangle, reprojected twice: the same 0.8 km within a millimetre.
    assert a["network_km"] == pytest.approx(0.8, abs=1e-5)
    # GeoPackage input, and names defaulting to area-<n>
    gpkg = tmp_path / "a.gpkg"
    gpd.GeoDataFrame(geometry=list(centre_3857), crs="EPSG:3857").to_file(gpkg, driver="GPKG")
    (area,) = review.read_areas(gpkg, crs=net.crs)
    assert area.name == "area-1"


# --- agreement with geopandas on a network built from OSM XML --------------------------------

LAT0, LON0 = 38.5, -38.0


def _osm_town(path: Path) -> Path:
    import math

    dlat = 1 / 111_320.0
    dlon = 1 / (111_320.0 * math.cos(math.radians(LAT0)))
    xml = ['<?xml version="1.0" encoding="UTF-8"?>', '<osm version="0.6" generator="test">']
    grid = {}
    nid = 1
    for i in range(4):
        for j in range(4):
            grid[i, j] = nid
            xml.append(
                f'<node id="{nid}" lat="{LAT0 + j * 150 * dlat:.7f}" '
                f'lon="{LON0 + i * 150 * dlon:.7f}"/>'
            )
            nid += 1
    arc = []
    for t in range(1, 12):  # a curved street from grid (0, 0) to grid (3, 3)
        ang = math.pi / 2 * t / 12
        arc.append(nid)
        xml.append(
            f'<node id="{nid}" lat="{LAT0 + 450 * (1 - math.cos(ang)) * dlat:.7f}" '
            f'lon="{LON0 + 450 * math.sin(ang) * dlon:.7f}"/>'
        )
        nid += 1
    xml.append(
        f'<node id="900" lat="{LAT0 + 75 * dlat:.7f}" lon="{LON0 + 75 * dlon:.7f}">'
        '<tag k="amenity" v="school"/><tag k="name" v="Gull School"/></node>'
    )
    wid = 100
    for j in range(4):
        refs = "".join(f'<nd ref="{grid[i, j]}"/>' for i in range(4))
        xml.append(
            f'<way id="{wid}">{refs}<tag k="highway" v="residential"/>'
            f'<tag k="name" v="Row {j}"/></way>'
        )
        wid += 1
    for i in range(4):
        refs = "".join(f'<nd ref="{grid[i, j]}"/>' for j in range(4))
        xml.append(
            f'<way id="{wid}">{refs}<tag k="highway" v="tertiary"/>'
            f'<tag k="name" v="Column {i}"/></way>'
        )
        wid += 1
    refs = "".join(f'<nd ref="{n}"/>' for n in [grid[0, 0], *arc, grid[3, 3]])
    xml.append(
        f'<way id="{wid}">{refs}<tag k="highway" v="secondary"/>'
        '<tag k="name" v="Curve Road"/></way>'
    )
    xml.append("</osm>")
    path.write_text("\n".join(xml), encoding="utf-8")
    return path


def test_km_agree_with_geopandas_clip(tmp_path: Path) -> None:
    from routerisk.network.folder import build_network

    net = build_network(_osm_town(tmp_path / "t.osm"), profile=load_profile(), timezone="Etc/GMT+3")
    # An irregular hexagon with a hole, in lon/lat, written as GeoJSON.
    c_lon, c_lat = LON0 + 0.0021, LAT0 + 0.0019
    ring = [
        (c_lon + 0.0026 * np.cos(t), c_lat + 0.0017 * np.sin(t) + 0.0003 * np.cos(3 * t))
        for t in np.linspace(0, 2 * np.pi, 7)[:-1]
    ]
    hole = [
        (c_lon + 0.0004 * np.cos(t), c_lat + 0.0004 * np.sin(t))
        for t in np.linspace(0, 2 * np.pi, 9)[:-1]
    ]
    shape = Polygon(ring, [hole])
    path = _area_file(tmp_path / "hex.geojson", [shape], ["Hex"], crs="EPSG:4326")
    a = review.review_areas(net, review.read_areas(path, crs=net.crs)).areas[0]
    # reference library: geopandas (GeoDataFrame.clip, then .length in the projected CRS),
    # reading and reprojecting the file with geopandas too.
    area = gpd.read_file(path).to_crs(net.crs)
    ref_km = float(net.edges.clip(area).length.sum()) / 1000.0
    assert ref_km > 0.5
    assert a["network_km"] == pytest.approx(ref_km, rel=0.005)
    assert sum(a["km_by_band"].values()) == pytest.approx(ref_km, rel=0.005)
    assert sum(a["km_by_speed"].values()) == pytest.approx(ref_km, rel=0.005)


# --- errors -----------------------------------------------------------------------------------


def _fc(*geometries: dict | None) -> str:
    return json.dumps(
        {
            "type": "FeatureCollection",
            "features": [
                {"type": "Feature", "properties": {"name": f"a{i}"}, "geometry": g}
                for i, g in enumerate(geometries)
            ],
        }
    )


SQUARE = {
    "type": "Polygon",
    "coordinates": [
        [[-33.9, 38.5], [-33.89, 38.5], [-33.89, 38.51], [-33.9, 38.51], [-33.9, 38.5]]
    ],
}


@pytest.mark.parametrize(
    ("geometry", "field", "words"),
    [
        ({"type": "Polygon", "coordinates": []}, "features[1].geometry", "empty"),
        (None, "features[1].geometry", "empty"),
        (
            {"type": "Polygon", "coordinates": [[[0, 0], [1, 1], [1, 0], [0, 1], [0, 0]]]},
            "features[1].geometry",
            "Self-intersection",
        ),
        (
            {"type": "LineString", "coordinates": [[0, 0], [1, 1]]},
            "features[1].geometry",
            "got LineString",
        ),
    ],
)
def test_bad_polygons_name_file_and_feature(
    tmp_path: Path, geometry: dict | None, field: str, words: str
) -> None:
    path = tmp_path / "bad.geojson"
    path.write_text(_fc(SQUARE, geometry), encoding="utf-8")
    with pytest.raises(InputFileError) as err:
        review.read_areas(path, crs=CRS)
    assert err.value.path == str(path) and err.value.field == field
    assert words in err.value.message
    if words == "Self-intersection":
        assert "Self-intersection at [0.5 0.5]" in err.value.message


def test_missing_empty_unreadable_files(tmp_path: Path) -> None:
    with pytest.raises(InputFileError, match="not found"):
        review.read_areas(tmp_path / "nope.geojson", crs=CRS)
    (tmp_path / "zero.geojson").write_text("", encoding="utf-8")
    with pytest.raises(InputFileError, match="empty"):
        review.read_areas(tmp_path / "zero.geojson", crs=CRS)
    (tmp_path / "none.geojson").write_text(_fc(), encoding="utf-8")
    with pytest.raises(InputFileError) as err:
        review.read_areas(tmp_path / "none.geojson", crs=CRS)
    assert err.value.field == "features"
    (tmp_path / "junk.geojson").write_text('{"type": "Feat', encoding="utf-8")
    with pytest.raises(InputFileError, match="cannot read"):
        review.read_areas(tmp_path / "junk.geojson", crs=CRS)
    dup = tmp_path / "dup.geojson"
    _area_file(dup, [CENTRE, CENTRE], ["Same", "Same"])
    with pytest.raises(InputFileError) as err:
        review.read_areas(dup, crs=CRS)
    assert err.value.field == "features[1].properties.name"


def test_area_off_the_network(hand: tuple[Path, Network], tmp_path: Path) -> None:
    path = _area_file(tmp_path / "off.geojson", [CENTRE, _box(2000, 2000, 2500, 2500)])
    areas = review.read_areas(path, crs=CRS)
    with pytest.raises(InputFileError) as err:
        review.review_areas(hand[1], areas)
    assert err.value.field == "features[1].geometry" and "off the road network" in str(err.value)


def test_cli_bad_area_exits_2_with_one_line(
    hand_dir: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    for name, text in (
        ("empty-poly.geojson", _fc({"type": "Polygon", "coordinates": []})),
        (
            "bowtie.geojson",
            _fc({"type": "Polygon", "coordinates": [[[0, 0], [1, 1], [1, 0], [0, 1], [0, 0]]]}),
        ),
    ):
        path = tmp_path / name
        path.write_text(text, encoding="utf-8")
        assert main(["review", str(path), "--network", str(hand_dir)]) == 2
        err = capsys.readouterr().err.strip()
        assert len(err.splitlines()) == 1
        assert str(path) in err and "features[0].geometry" in err


# --- what-ifs ----------------------------------------------------------------------------------


def test_what_if_rule_off_on_and_weight(hand: tuple[Path, Network]) -> None:
    net = hand[1]
    area = review.Area("Centre", 0, CENTRE, "a.geojson", "features[0].geometry")
    wis = [
        review.parse_what_if(["rule:school hours=off"], net.profile),
        review.parse_what_if(["rule:school hours=on"], net.profile),
        review.parse_what_if(["weight:school=0"], net.profile),
    ]
    res = review.review_areas(net, [area], what_ifs=wis)
    off, on, weight = (s["areas"][0] for s in res.what_ifs)
    # School rule off: nothing closed by it; only Birch at night is left (0.2 km x 56 h).
    assert "school hours" not in off["closed_km_by_rule"]
    assert off["closed_km_hours"] == pytest.approx(11.2)
    assert off["closed_km_hours_change"] == pytest.approx(-3.0)
    assert all(off["closed_km_by_hour"][24 * d + h] == 0.0 for d in range(5) for h in (7, 8))
    # School rule on at all hours: 0.3 km closed in each of 168 hours, plus Birch at night.
    assert on["closed_km_by_rule"]["school hours"] == [pytest.approx(0.3)] * 168
    assert on["closed_km_hours"] == pytest.approx(0.3 * 168 + 11.2)
    # Weight 0 for schools: exposure falls by the school part, weight 2 x exposure 0.9 x
    # 0.3 km = 0.54, and the busy band empties (0.5 per km < 1).
    assert weight["exposure_change"] == pytest.approx(-0.54, abs=1e-4)
    assert weight["km_by_band"]["busy"] == 0.0
    assert weight["km_by_band_change"]["busy"] == pytest.approx(-0.3)
    # the base review is unchanged by the scenarios
    assert res.areas[0]["closed_km_hours"] == pytest.approx(14.2)


def test_what_if_errors(hand: tuple[Path, Network]) -> None:
    prof = hand[1].profile
    for spec, words in (
        ("rule:nope=off", "unknown rule"),
        ("rule:school hours=maybe", "'off'"),
        ("weight:school=-1", ">= 0"),
        ("weight:bus=1", "unknown category"),
        ("colour:x=1", "unknown kind"),
        ("school=1", "bad SPEC"),
    ):
        with pytest.raises(OptionError, match=words):
            review.parse_what_if([spec], prof)
    with pytest.raises(OptionError):
        review.parse_time("someday 25:00")
    assert review.parse_time("Wed 08:15") == 2 * 1440 + 8 * 60 + 15
    assert review.minute_label(2 * 1440 + 8 * 60 + 15) == "Wed 08:15"


# --- the report --------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def hostile_page(hand: tuple[Path, Network]) -> tuple[str, review.Review]:
    net = make_network(hand[0], birch_name=HOSTILE)
    areas = [
        review.Area("Centre", 0, CENTRE, "a.geojson", "features[0].geometry"),
        review.Area(HOSTILE, 1, _box(150, -150, 450, 50), "a.geojson", "features[1].geometry"),
    ]
    res = review.review_areas(
        net,
        areas,
        at=review.parse_time("sat 23:10"),
        what_ifs=[review.parse_what_if(["rule:school hours=off"], net.profile)],
    )
    return review_report.review_html(res), res


_LOADS = re.compile(r"""(?i)(?:src|href)\s*=\s*(?:["']|&quot;|&#x27;)?\s*https?://""")


def test_report_is_self_contained_and_escaped(hostile_page: tuple[str, review.Review]) -> None:
    page, _ = hostile_page
    # grep: no http(s) src/href in the page itself (the map sits escaped in srcdoc)
    outer = re.sub(r'srcdoc="[^"]*"', "", page)
    assert not _LOADS.search(outer)
    assert report.external_references(page) == []
    assert routerisk.CAUTION in page
    assert "data:image/png;base64," in page and "<iframe" in page
    # hostile names appear only escaped
    assert HOSTILE not in page
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page
    assert "test-town.osm" in page and "Wed 1 May 2024 00:00 UTC" in page and "ODbL" in page
    assert hostile_page[1].profile.fingerprint in page


def test_areas_side_by_side(hostile_page: tuple[str, review.Review]) -> None:
    page, res = hostile_page
    table = pd.read_csv(io.StringIO(review_files.review_csv(res)))
    assert list(table["area"]) == ["Centre", HOSTILE]
    # Centre as above; the second box x 150..450, y -150..50 holds Alder x 150-400 both ways
    # (0.5 km) and Birch Lane y -150..50 (0.2 km): 0.7 km directed. Busy: Alder x 150-200
    # both ways, 0.1 km. Most closed: Birch at night, 0.2 km (school hours close 0.1 km).
    assert table["network_km"].tolist() == pytest.approx([0.8, 0.7])
    assert table["km_busy"].tolist() == pytest.approx([0.3, 0.1])
    assert table["closed_peak_km"].tolist() == pytest.approx([0.3, 0.2])
    assert "Areas side by side" in page


def test_external_reference_check_can_fail() -> None:
    bad = '<img src="https://tiles.example/a.png"><a href="https://example.org">x</a>'
    assert report.external_references(bad) == ["https://tiles.example/a.png"]
    inner = report.html.escape('<script src="//cdn.example/x.js"></script>')
    assert report.external_references(f'<iframe srcdoc="{inner}"></iframe>') == [
        "//cdn.example/x.js"
    ]


def test_charts_are_deterministic() -> None:
    # (the whole page is compared across two runs in test_cli_json_out_and_force)
    fig = report.week_chart({"a": np.arange(168.0)}, title="t $x", ylabel="km")
    assert report.png_bytes(fig) == report.png_bytes(fig)
    assert b"Software" not in report.png_bytes(fig)


# --- the command line ------------------------------------------------------------------------


def test_cli_json_out_and_force(
    hand_dir: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    areas = _area_file(tmp_path / "areas.geojson", [CENTRE], ["Centre"])
    out = tmp_path / "out"
    argv = [
        "review",
        str(areas),
        "--network",
        str(hand_dir),
        "--json",
        "--out",
        str(out),
        "--what-if",
        "rule:school hours=off",
        "--at",
        "sat 23:10",
    ]
    assert main(argv) == 0
    doc = json.loads(capsys.readouterr().out)
    assert [a["name"] for a in doc["areas"]] == ["Centre"]
    first = doc["areas"][0]
    for key in (
        "network_km",
        "km_by_band",
        "km_in_influence",
        "sources",
        "closed_km_by_hour",
        "allowed_parts",
        "hotspots",
    ):
        assert key in first
    assert first["network_km"] == pytest.approx(0.8)
    assert len(first["closed_km_by_hour"]) == 168
    assert doc["profile"] == load_profile(next(hand_dir.glob("profile.yaml"))).fingerprint
    assert doc["what_if"][0]["areas"][0]["closed_km_hours"] == pytest.approx(11.2)
    assert sorted(p.name for p in out.iterdir()) == ["areas.csv", "areas.json", "report.html"]
    table = pd.read_csv(out / "areas.csv")
    assert list(table["area"]) == ["Centre"]
    assert table.loc[0, "network_km"] == pytest.approx(0.8)
    assert json.loads((out / "areas.json").read_text(encoding="utf-8")) == doc
    first_page = (out / "report.html").read_bytes()
    # an existing output needs --force
    assert main(argv) == 2
    assert "--force" in capsys.readouterr().err
    assert main([*argv, "--force"]) == 0
    assert json.loads(capsys.readouterr().out) == doc
    # deterministic: no clock, stable map ids, stable PNG bytes
    assert (out / "report.html").read_bytes() == first_page


def test_cli_text_and_option_errors(
    hand_dir: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    areas = _area_file(tmp_path / "areas.geojson", [CENTRE], ["Centre"])
    assert main(["review", str(areas), "--network", str(hand_dir)]) == 0
    text = capsys.readouterr().out
    assert "0.800 km of directed edges" in text and routerisk.CAUTION in text
    for extra, field in (
        (["--what-if", "rule:nope=off"], "--what-if"),
        (["--at", "noon"], "--at"),
        (["--report", "x.txt"], "--report"),
        (["--high-from", "loud"], "--high-from"),
    ):
        assert main(["review", str(areas), "--network", str(hand_dir), *extra]) == 2
        err = capsys.readouterr().err
        assert field in err and len(err.strip().splitlines()) == 1


def test_exposure_by_hour_follows_baseline_and_crossing_time_profiles(tmp_path: Path) -> None:
    # issue 17, point 10. The hand profile plus a "nights" time profile (0.5 from 00:00 to
    # 06:00, else 1) on the baseline and the crossings, and crossing weight 0.1.
    # In Centre: baseline 0.5 on 0.8 directed km = 0.4. Crossings count as exposure per km x
    # km in the area: (250, 0) lies on both directions of Alder x 200-300, fully inside:
    # 2 x 0.1 = 0.2; (20, 0) on both directions of Alder x 0-100, half inside: 2 x 0.1 x 0.5
    # = 0.1. Categories are the same at Monday 02:00 and 12:00 (school 0.5 outside 07-09,
    # park 1), so hour 12 - hour 2 = (1 - 0.5) x (0.4 + 0.3) = 0.35; without the keys, 0.
    text = PROFILE_YAML.replace("crossing_weight: 0.0", "crossing_weight: 0.1").replace(
        "time_profiles:\n",
        "time_profiles:\n  nights:\n    default: 1.0\n    windows:\n"
        '      - {days: [mon, tue, wed, thu, fri, sat, sun], start: "00:00", '
        'end: "06:00", multiplier: 0.5}\n',
    )
    plain_p = tmp_path / "plain.yaml"
    plain_p.write_text(text, encoding="utf-8")
    timed_p = tmp_path / "timed.yaml"
    timed_p.write_text(
        text.replace(
            "  default: 0.5\ntime_profiles:",
            "  default: 0.5\n  time_profile: nights\ntime_profiles:",
        )
        + "crossing_time_profile: nights\n",
        encoding="utf-8",
    )
    assert load_profile(timed_p).baseline_time_profile == "nights"
    plain = _one(make_network(plain_p), CENTRE)["exposure_by_hour"]
    timed = _one(make_network(timed_p), CENTRE)["exposure_by_hour"]
    assert plain[12] - plain[2] == pytest.approx(0.0, abs=1e-9)
    assert timed[12] - timed[2] == pytest.approx(0.35, abs=1e-9)
    assert timed[12] == pytest.approx(plain[12], abs=1e-9)  # multiplier 1 at noon: as before


def test_profile_section_names_time_of_baseline_decay_step_and_model_scope() -> None:
    # issue 17, points 10-12: the report says how the baseline is timed, where a gaussian
    # decay has its step at the radius, and what "risk" models.
    text = review_report._model_text(load_profile())
    assert "Baseline time profile: street_presence" in text
    assert "Gaussian decay (retail) is cut at the radius" in text and "0.135" in text
    assert "severity given a crash" in text and "not modelled" in text


def test_old_names_still_reach_the_moved_writers() -> None:
    # issue 19: the map, the report and the files moved to routerisk.render; the old module's
    # names still find them (imported on first use, so analysis.review does not load render's
    # review modules), and a name that never existed is still an AttributeError.
    from routerisk.analysis.review import write_review
    from routerisk.render import review_map

    assert write_review is review_files.write_review
    assert review.review_csv is review_files.review_csv
    assert review.review_html is review_report.review_html
    assert review.review_map is review_map.review_map
    assert review.HOTSPOT_COLOUR == review_map.HOTSPOT_COLOUR
    assert review.read_areas.__module__ == "routerisk.io.areas"
    with pytest.raises(AttributeError, match="no_such_name"):
        review.no_such_name  # noqa: B018
