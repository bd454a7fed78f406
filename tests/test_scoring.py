"""Route scoring: hand-computed risk, time windows, rule breaks, left turns."""

from __future__ import annotations

import datetime as dt

import geopandas as gpd
import pandas as pd
import pytest
from shapely import LineString

from routerisk.analysis.scoring import Scorer
from routerisk.network.folder import Network
from routerisk.profile import parse_profile

CRS = "EPSG:32625"
TZ = "Etc/GMT+3"


def _profile():
    return parse_profile(
        {
            "version": 1,
            "name": "hand",
            "time_profiles": {
                "school_days": {
                    "default": 1.0,
                    "windows": [
                        {
                            "days": ["mon", "tue", "wed", "thu", "fri"],
                            "start": "08:00",
                            "end": "09:00",
                            "multiplier": 3.0,
                        }
                    ],
                }
            },
            "categories": {
                "school": {
                    "select": [{"amenity": "school"}],
                    "weight": 2.0,
                    "radius_m": 50,
                    "time_profile": "school_days",
                },
                "retail": {"select": [{"shop": "*"}], "weight": 1.0, "radius_m": 30},
            },
            "crossing_weight": 0.1,
            "rules": [
                {
                    "name": "school hours",
                    "category": "school",
                    "within_m": 20,
                    "windows": [
                        {
                            "days": ["mon", "tue", "wed", "thu", "fri"],
                            "start": "08:00",
                            "end": "09:00",
                        }
                    ],
                }
            ],
        }
    )


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
    edges = gpd.GeoDataFrame(
        {
            "highway": "residential",
            "name": [f"Street {r[0][0]}-{r[0][1]}" for r in rows],
            "length": 100.0,
            "travel_time": 10.0,
            "speed_kph": 40.0,
            "severity": [r[2] for r in rows],
            "baseline": [r[3] for r in rows],
            "exp_school": [r[4] for r in rows],
            "exp_retail": [r[5] for r in rows],
            "infl_school": [1.0 if r[4] else 0.0 for r in rows],
            "infl_retail": [1.0 if r[5] else 0.0 for r in rows],
            "crossings": [r[6] for r in rows],
            "rule_0": [r[7] and r[4] > 0 for r in rows],
            "band": "quiet",
            "exposure_km": 1.0,
        },
        geometry=[LineString(r[1]) for r in rows],
        index=idx,
        crs=CRS,
    )
    xy = {1: (0, 0), 2: (100, 0), 3: (200, 0), 4: (200, 100), 5: (100, -100), 6: (300, 0)}
    nodes = gpd.GeoDataFrame(
        {"x": [p[0] for p in xy.values()], "y": [p[1] for p in xy.values()]},
        index=pd.Index(list(xy), name="osmid"),
        geometry=gpd.points_from_xy([p[0] for p in xy.values()], [p[1] for p in xy.values()]),
        crs=CRS,
    )
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
    assert s.by_category == pytest.approx(
        {"baseline": 0.05 + 0.1 + 0.02, "crossings": 0.2, "school": 0.2, "retail": 0.02}
    )
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


# -- issue 17, point 10: time profiles on the street baseline and on crossings -----------------


def _timed_profile(**over):
    """Return the hand profile with a night profile on baseline and crossings (0.25, 22-06)."""
    doc = {
        "version": 1,
        "name": "hand-timed",
        "time_profiles": {
            "school_days": {
                "default": 1.0,
                "windows": [
                    {
                        "days": ["mon", "tue", "wed", "thu", "fri"],
                        "start": "08:00",
                        "end": "09:00",
                        "multiplier": 3.0,
                    }
                ],
            },
            "streets": {
                "default": 1.0,
                "windows": [
                    {
                        "days": ["mon", "tue", "wed", "thu", "fri", "sat", "sun"],
                        "start": "22:00",
                        "end": "06:00",
                        "multiplier": 0.25,
                    }
                ],
            },
        },
        "baseline": {"time_profile": "streets"},
        "crossing_time_profile": "streets",
        "categories": {
            "school": {
                "select": [{"amenity": "school"}],
                "weight": 2.0,
                "radius_m": 50,
                "time_profile": "school_days",
            },
            "retail": {"select": [{"shop": "*"}], "weight": 1.0, "radius_m": 30},
        },
        "crossing_weight": 0.1,
    }
    doc.update(over)
    return parse_profile(doc)


def _with_profile(prof) -> Network:
    net = hand_network()
    return Network(net.edges, net.nodes, net.sources, net.crossings, prof, net.meta)


def test_old_profile_without_street_time_profiles_scores_as_before():
    # The hand profile has neither key: its fingerprint is the one the previous release gave
    # it (f7319ddbdee442bf, computed with the code before this change), and at 02:00 the
    # baseline and crossings keep their daytime values, exactly as the formula without them.
    prof = _profile()
    assert prof.baseline_time_profile is None and prof.crossing_time_profile is None
    assert prof.fingerprint == "f7319ddbdee442bf"
    night = Scorer(hand_network()).score("hand", ROUTE, _at(2, 0))
    assert night.risk == pytest.approx(0.59, abs=1e-12)  # the 11:00 figure, by hand above
    assert night.by_category["baseline"] == pytest.approx(0.17, abs=1e-12)
    assert night.by_category["crossings"] == pytest.approx(0.2, abs=1e-12)


def test_street_time_profile_scales_baseline_and_crossings_at_night():
    net = _with_profile(_timed_profile())
    day = Scorer(net).score("hand", ROUTE, _at(11, 0))
    night = Scorer(net).score("hand", ROUTE, _at(2, 0))
    assert day.risk == pytest.approx(0.59, abs=1e-12)  # multiplier 1 by day: as before
    # at 02:00: baseline 0.17 x 0.25, crossings 0.2 x 0.25, categories unchanged
    assert night.by_category["baseline"] == pytest.approx(0.17 * 0.25, abs=1e-12)
    assert night.by_category["crossings"] == pytest.approx(0.2 * 0.25, abs=1e-12)
    assert night.by_category["school"] == pytest.approx(day.by_category["school"], abs=1e-12)
    assert night.risk == pytest.approx(0.59 - 0.75 * 0.37, abs=1e-12)
    # the segments and the quick screen agree with the total
    assert night.segments["risk"].sum() == pytest.approx(night.risk)
    sc = Scorer(net)
    assert sc.quick(sc.positions(ROUTE), _at(2, 0))[0] == pytest.approx(night.risk)


def test_relative_index_compares_with_the_area_at_the_same_minutes_under_the_profile():
    # Every edge of the network driven once at 02:00 is the area's average km then: index 1.
    net = _with_profile(_timed_profile())
    sc = Scorer(net)
    edges = list(net.edges.index)
    risks = [sc.score("e", [e], _at(2, 0)).risk for e in edges]
    assert float(sc.network_risk_per_km([2 * 60 + 1440])[0]) == pytest.approx(
        sum(risks) / (0.1 * len(edges))
    )


def test_edge_risk_parts_follow_the_street_time_profiles():
    from routerisk.analysis.scoring import edge_risk_parts

    prof = _timed_profile()
    net = _with_profile(prof)
    day = edge_risk_parts(net.edges, prof, 1440 + 11 * 60)
    night = edge_risk_parts(net.edges, prof, 1440 + 2 * 60)
    assert night["baseline"].to_numpy() == pytest.approx(0.25 * day["baseline"].to_numpy())
    assert night["crossings"].to_numpy() == pytest.approx(0.25 * day["crossings"].to_numpy())
    assert night["school"].to_numpy() == pytest.approx(day["school"].to_numpy())


def test_quiet_industrial_loop_at_night_on_the_sample_town(town_net, tmp_path):
    # Sample town, default profile: the industrial loop is (nearly) street baseline only.
    # Before, its risk stayed at the daytime figure at night while the area's fell, so its
    # relative index rose from 0.30 to 0.47; now the baseline follows street_presence
    # (0.2 at night, 1.0 on weekday daytime, judgment in configs/default.yaml).
    import copy

    import yaml

    from routerisk import datasets
    from routerisk.analysis.scoring import score_routes
    from routerisk.io import routes
    from routerisk.profile import DEFAULT_PROFILE, load_profile

    loop = [
        r
        for r in routes.read_routes(datasets.get_path("routes"), default_tz=town_net.timezone)
        if r.name == "industrial-loop"
    ]
    tz = town_net.timezone
    day_t, night_t = (dt.datetime(2027, 3, 11, h, 0, tzinfo=tz) for h in (10, 2))  # Thursday
    day, night = score_routes(town_net, loop, [day_t, night_t])
    assert night.by_category["baseline"] == pytest.approx(0.2 * day.by_category["baseline"])
    assert night.risk < 0.25 * day.risk
    assert night.relative_index <= day.relative_index
    # the same profile without the two keys gives the old behaviour: night = day
    doc = copy.deepcopy(yaml.safe_load(DEFAULT_PROFILE.read_text()))
    doc["baseline"].pop("time_profile")
    doc.pop("crossing_time_profile")
    (tmp_path / "old.yaml").write_text(yaml.safe_dump(doc))
    old = town_net.retag(load_profile(tmp_path / "old.yaml"))
    oday, onight = score_routes(old, loop, [day_t, night_t])
    assert oday.risk == pytest.approx(day.risk, rel=1e-12)  # weekday daytime: multiplier 1
    assert onight.by_category["baseline"] == pytest.approx(oday.by_category["baseline"])
    assert onight.relative_index > 1.4 * oday.relative_index


# -- issue 17, point 11: crash likelihood by speed --------------------------------------------


def test_likelihood_factor_enters_the_risk(tmp_path):
    # Edges of the hand network at 40 km/h; reference 25 mph; injury exponent 2.0.
    from routerisk.network.severity import MPH_TO_KPH

    prof = _timed_profile(likelihood={"crashes": "injury", "reference_mph": 25})
    net = _with_profile(prof)
    edges = net.edges.copy()
    edges["likelihood"] = prof.likelihood_factor(edges["speed_kph"].to_numpy())
    net = Network(edges, net.nodes, net.sources, net.crossings, prof, net.meta)
    s = Scorer(net).score("hand", ROUTE, _at(11, 0))
    # Nilsson's power model, re-estimated by Elvik (2009), all injury crashes: exponent
    # about 2.0 [memory, /work/shared/DOMAIN.md]
    assert s.risk == pytest.approx(0.59 * (40.0 / (25 * MPH_TO_KPH)) ** 2.0, rel=1e-12)


def test_likelihood_on_the_sample_town_multiplies_each_segment(town_net, tmp_path):
    # A profile with the power model on (fatal crashes, exponent 4.6, Elvik 2009 [memory]):
    # each segment's risk is the segment's risk without it x (speed / 25 mph) ** 4.6.
    import copy

    import yaml

    from routerisk import datasets
    from routerisk.analysis.scoring import model_note, score_routes
    from routerisk.io import routes
    from routerisk.network.severity import MPH_TO_KPH
    from routerisk.profile import DEFAULT_PROFILE, load_profile

    doc = copy.deepcopy(yaml.safe_load(DEFAULT_PROFILE.read_text()))
    doc["likelihood"] = {"model": "power", "crashes": "fatal", "reference_mph": 25}
    (tmp_path / "like.yaml").write_text(yaml.safe_dump(doc))
    prof = load_profile(tmp_path / "like.yaml")
    net = town_net.retag(prof)
    assert "likelihood" in net.edges and "likelihood" not in town_net.edges
    planned = routes.read_routes(datasets.get_path("routes"), default_tz=town_net.timezone)
    off = score_routes(town_net, planned)
    on = score_routes(net, planned)
    for a, b in zip(off, on, strict=True):
        pos = b.segments["_pos"].to_numpy()
        speed = net.edges["speed_kph"].to_numpy()[pos]
        want = a.segments["risk"].to_numpy() * (speed / (25 * MPH_TO_KPH)) ** 4.6
        assert b.segments["risk"].to_numpy() == pytest.approx(want, rel=1e-9)
    assert "crash likelihood by speed (power model" in model_note(prof)
    assert "exponent 4.6" in model_note(prof) and "off in this profile" not in model_note(prof)
