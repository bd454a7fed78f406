"""Route scoring: hand-computed risk, time windows, rule breaks, left turns."""

from __future__ import annotations

import datetime as dt

import geopandas as gpd
import pandas as pd
import pytest
from shapely import LineString

from routerisk.network import Network
from routerisk.profile import parse_profile
from routerisk.scoring import Scorer

CRS = "EPSG:32625"
TZ = "Etc/GMT+3"


def _profile():
    return parse_profile({
        "version": 1, "name": "hand",
        "time_profiles": {"school_days": {"default": 1.0, "windows": [
            {"days": ["mon", "tue", "wed", "thu", "fri"], "start": "08:00", "end": "09:00",
             "multiplier": 3.0}]}},
        "categories": {
            "school": {"select": [{"amenity": "school"}], "weight": 2.0, "radius_m": 50,
                       "time_profile": "school_days"},
            "retail": {"select": [{"shop": "*"}], "weight": 1.0, "radius_m": 30}},
        "crossing_weight": 0.1,
        "rules": [{"name": "school hours", "category": "school", "within_m": 20, "windows": [
            {"days": ["mon", "tue", "wed", "thu", "fri"], "start": "08:00",
             "end": "09:00"}]}],
    })


def hand_network() -> Network:
    """Four nodes: 1 (0,0) -> 2 (100,0) -> 3 (200,0) -> 4 (200,100), plus a spur 2 -> 5 up.

    Edges (u, v): length m, travel s, severity, baseline, exp_school, exp_retail, crossings
      (1,2): 100, 10, 1.0, 0.5, 0.0, 0.2, 0
      (2,3): 100, 10, 2.0, 0.5, 0.5, 0.0, 1   (passes the school; rule covers it)
      (3,4): 100, 10, 1.0, 0.2, 0.0, 0.0, 0   (a left turn from heading east to north)
      (2,5), (2,1), (3,2), (3,6): extra edges so nodes 2 and 3 are junctions.
    """
    rows = [
        ((1, 2, 0), [(0, 0), (100, 0)], 1.0, 0.5, 0.0, 0.2, 0, True),
        ((2, 3, 0), [(100, 0), (200, 0)], 2.0, 0.5, 0.5, 0.0, 1, True),
        ((3, 4, 0), [(200, 0), (200, 100)], 1.0, 0.2, 0.0, 0.0, 0, False),
        ((2, 1, 0), [(100, 0), (0, 0)], 1.0, 0.5, 0.0, 0.2, 0, False),
        ((3, 2, 0), [(200, 0), (100, 0)], 2.0, 0.5, 0.5, 0.0, 1, True),
        ((2, 5, 0), [(100, 0), (100, -100)], 1.0, 0.5, 0.0, 0.0, 0, False),
        ((3, 6, 0), [(200, 0), (300, 0)], 1.0, 0.5, 0.0, 0.0, 0, False),
    ]
    idx = pd.MultiIndex.from_tuples([r[0] for r in rows], names=["u", "v", "key"])
    edges = gpd.GeoDataFrame({
        "highway": "residential", "name": [f"Street {r[0][0]}-{r[0][1]}" for r in rows],
        "length": 100.0, "travel_time": 10.0, "speed_kph": 40.0,
        "severity": [r[2] for r in rows], "baseline": [r[3] for r in rows],
        "exp_school": [r[4] for r in rows], "exp_retail": [r[5] for r in rows],
        "infl_school": [1.0 if r[4] else 0.0 for r in rows],
        "infl_retail": [1.0 if r[5] else 0.0 for r in rows],
        "crossings": [r[6] for r in rows], "rule_0": [r[7] and r[4] > 0 for r in rows],
        "band": "quiet", "exposure_km": 1.0,
    }, geometry=[LineString(r[1]) for r in rows], index=idx, crs=CRS)
    xy = {1: (0, 0), 2: (100, 0), 3: (200, 0), 4: (200, 100), 5: (100, -100), 6: (300, 0)}
    nodes = gpd.GeoDataFrame({"x": [p[0] for p in xy.values()], "y": [p[1] for p in xy.values()]},
                             index=pd.Index(list(xy), name="osmid"),
                             geometry=gpd.points_from_xy([p[0] for p in xy.values()],
                                                         [p[1] for p in xy.values()]), crs=CRS)
    empty = gpd.GeoDataFrame({"category": []}, geometry=[], crs=CRS)
    return Network(edges, nodes, empty, empty, _profile(), {"timezone": TZ})


ROUTE = [(1, 2, 0), (2, 3, 0), (3, 4, 0)]


def _at(hh, mm, day=9):  # 2027-03-09 is a Tuesday
    return dt.datetime(2027, 3, day, hh, mm, tzinfo=dt.timezone(dt.timedelta(hours=-3)))


def test_hand_computed_route_outside_school_window():
    # At 11:00 the school multiplier is 1. Per edge: severity x (km x (baseline +
    # 2.0 x m x exp_school + 1.0 x exp_retail) + 0.1 x crossings):
    #   (1,2): 1.0 x (0.1 x (0.5 + 0 + 0.2)) = 0.07
    #   (2,3): 2.0 x (0.1 x (0.5 + 2.0 x 1 x 0.5) + 0.1 x 1) = 2.0 x 0.25 = 0.5
    #   (3,4): 1.0 x (0.1 x 0.2) = 0.02                               total 0.59
    s = Scorer(hand_network()).score("hand", ROUTE, _at(11, 0))
    assert s.risk == pytest.approx(0.59, abs=1e-12)
    assert s.length_km == pytest.approx(0.3)
    assert s.duration_min == pytest.approx(0.5)
    assert s.risk_per_km == pytest.approx(0.59 / 0.3)
    assert s.by_category == pytest.approx({"baseline": 0.05 + 0.1 + 0.02, "crossings": 0.2,
                                           "school": 0.2, "retail": 0.02})
    assert s.crossings == 1
    assert s.rule_breaks == []
    assert s.left_turns == 1


def test_school_window_differs_by_exactly_the_multiplier():
    net = hand_network()
    outside = Scorer(net).score("hand", ROUTE, _at(11, 0))
    inside = Scorer(net).score("hand", ROUTE, _at(8, 10))
    # the school part triples (multiplier 3); nothing else changes
    assert inside.by_category["school"] == pytest.approx(3 * outside.by_category["school"])
    assert inside.risk - outside.risk == pytest.approx(2 * outside.by_category["school"])
    assert [b["rule"] for b in inside.rule_breaks] == ["school hours"]
    assert inside.rule_breaks[0]["edge"] == [2, 3, 0]


def test_each_edge_scored_when_reached():
    # Depart 07:59:50: edge (1,2) is entered at 07:59:50 (outside), (2,3) at 08:00:00 (inside).
    s = Scorer(hand_network()).score("hand", ROUTE, _at(7, 59) + dt.timedelta(seconds=50))
    assert s.by_category["school"] == pytest.approx(0.6)
    assert len(s.rule_breaks) == 1


def test_partial_edges_scale():
    s = Scorer(hand_network()).score("hand", ROUTE, _at(11, 0), fractions=[0.5, 1.0, 0.5])
    assert s.length_km == pytest.approx(0.2)
    assert s.risk == pytest.approx(0.035 + 0.5 + 0.01)


def test_route_risk_is_sum_of_segments():
    s = Scorer(hand_network()).score("hand", ROUTE, _at(15, 0))
    assert s.segments["risk"].sum() == pytest.approx(s.risk)
    assert s.hotspots[0]["edge"] == [2, 3, 0]
    # at 15:00 on edge (2,3): school 0.2, crossings 0.2, baseline 0.1 (ties by name)
    assert s.hotspots[0]["reasons"] == ["crossings", "school", "street baseline"]


def test_relative_index_is_one_for_the_average_km():
    # Driving every edge of the network once (each at the same minute) is the average km.
    net = hand_network()
    sc = Scorer(net)
    all_edges = list(net.edges.index)
    risks = [sc.score("e", [e], _at(11, 0)).risk for e in all_edges]
    avg = sum(risks) / (0.1 * len(all_edges))
    assert float(sc.network_risk_per_km([11 * 60 + 1440])[0]) == pytest.approx(avg)
