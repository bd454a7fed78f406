"""Exposure tagging: a hand-computed case, sampling, crossings, rules."""

from __future__ import annotations

import dataclasses

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from shapely import LineString, Point, box

from routerisk.network import tagging
from routerisk.profile import parse_profile

CRS = "EPSG:32625"


def _profile(**over):
    doc = {
        "version": 1,
        "name": "hand",
        "sample_spacing_m": 10,
        "baseline": {"by_road_class": {"residential": 0.5}, "default": 0.1},
        "categories": {
            "school": {
                "select": [{"amenity": ["school"]}],
                "weight": 2.0,
                "radius_m": 20,
                "decay": "none",
            }
        },
        "crossing_weight": 0.25,
        "rules": [{"name": "no school", "category": "school", "within_m": 5}],
    }
    doc.update(over)
    return parse_profile(doc)


def _edges(lines, highway="residential", speed=25 * 1.609344):
    return gpd.GeoDataFrame(
        {
            "highway": [highway] * len(lines),
            "length": [ln.length for ln in lines],
            "speed_kph": [speed] * len(lines),
        },
        geometry=lines,
        crs=CRS,
    )


def test_hand_computed_exposure():
    # Edge A: 100 m along y = 0 from x = 0 to 100; 10 samples at x = 5, 15, ..., 95.
    # School grounds: the square x in [0, 40], y in [10, 30] (10 m north of the edge).
    # Radius 20 m, no decay: a sample is inside when its distance to the square is <= 20:
    # x <= 40 -> distance 10 (x = 5..35: 4 samples); 40 < x -> distance sqrt((x-40)^2 + 100)
    # <= 20 -> x - 40 <= sqrt(300) = 17.32 -> x = 45, 55 (2 samples). Total 6 of 10 -> 0.6.
    # Edge B: 50 m along y = 100, far away -> 0. Edge C: 30 m up x = 200 -> 0.
    lines = [
        LineString([(0, 0), (100, 0)]),
        LineString([(0, 100), (50, 100)]),
        LineString([(200, 0), (200, 30)]),
    ]
    src = gpd.GeoDataFrame({"category": ["school"]}, geometry=[box(0, 10, 40, 30)], crs=CRS)
    cross = gpd.GeoDataFrame({"osmid": [1]}, geometry=[Point(50, 0)], crs=CRS)
    out = tagging.tag_edges(_edges(lines), src, cross, _profile())
    assert out["exp_school"].tolist() == [0.6, 0.0, 0.0]
    assert out["infl_school"].tolist() == [0.6, 0.0, 0.0]
    assert out["crossings"].tolist() == [1, 0, 0]
    assert out["baseline"].tolist() == [0.5, 0.5, 0.5]
    # severity at 25 mph with reference 25 mph is exactly 1
    assert out["severity"].to_numpy() == pytest.approx([1.0, 1.0, 1.0])
    # exposure per km: 0.5 + 2.0 * 0.6 + 0.25 * 1 crossing / 0.1 km = 4.2
    assert out["exposure_km"].iloc[0] == pytest.approx(4.2)
    # the school rule (within 5 m) does not reach edge A (10 m away)
    assert out["rule_0"].tolist() == [False, False, False]


def test_linear_decay_value():
    # One sample (edge 10 m long, spacing 10): midpoint (5, 0); school point at (5, 30);
    # radius 60, linear decay -> nearness 1 - 30/60 = 0.5.
    prof = _profile(
        categories={
            "school": {
                "select": [{"amenity": "school"}],
                "weight": 1.0,
                "radius_m": 60,
                "decay": "linear",
            }
        },
        rules=[],
    )
    src = gpd.GeoDataFrame({"category": ["school"]}, geometry=[Point(5, 30)], crs=CRS)
    empty = gpd.GeoDataFrame({"osmid": []}, geometry=[], crs=CRS)
    out = tagging.tag_edges(_edges([LineString([(0, 0), (10, 0)])]), src, empty, prof)
    assert out["exp_school"].iloc[0] == pytest.approx(0.5)


def test_overlapping_sources_do_not_double_count_unless_stacked():
    src = gpd.GeoDataFrame(
        {"category": ["school", "school"]}, geometry=[Point(5, 5), Point(6, 5)], crs=CRS
    )
    empty = gpd.GeoDataFrame({"osmid": []}, geometry=[], crs=CRS)
    edges = _edges([LineString([(0, 0), (10, 0)])])
    once = tagging.tag_edges(edges, src, empty, _profile())
    cats = {
        "school": {
            "select": [{"amenity": "school"}],
            "weight": 2.0,
            "radius_m": 20,
            "decay": "none",
            "stack": True,
        }
    }
    twice = tagging.tag_edges(edges, src, empty, _profile(categories=cats, rules=[]))
    assert once["exp_school"].iloc[0] == 1.0
    assert twice["exp_school"].iloc[0] == 2.0


def test_long_edge_touching_school_briefly():
    # A 600 m edge that passes within the radius for 50 m only is not scored as fully exposed.
    src = gpd.GeoDataFrame({"category": ["school"]}, geometry=[box(300, 5, 350, 40)], crs=CRS)
    empty = gpd.GeoDataFrame({"osmid": []}, geometry=[], crs=CRS)
    prof = _profile(
        categories={
            "school": {
                "select": [{"amenity": "school"}],
                "weight": 1.0,
                "radius_m": 4,
                "decay": "none",
            }
        },
        rules=[],
    )
    out = tagging.tag_edges(_edges([LineString([(0, 0), (600, 0)])]), src, empty, prof)
    assert out["exp_school"].iloc[0] == pytest.approx(0.0)
    prof = dataclasses.replace(
        prof, categories=(dataclasses.replace(prof.categories[0], radius_m=5.0),)
    )
    out = tagging.tag_edges(_edges([LineString([(0, 0), (600, 0)])]), src, empty, prof)
    assert out["exp_school"].iloc[0] == pytest.approx(50 / 600)


def test_sample_points_midpoints():
    pts, owner = tagging.sample_points(np.array([LineString([(0, 0), (25, 0)])]), 10.0)
    # ceil(25 / 10) = 3 equal pieces of 8.33 m: midpoints at 4.17, 12.5, 20.83
    assert owner.tolist() == [0, 0, 0]
    assert [p.x for p in pts] == pytest.approx([25 / 6, 12.5, 125 / 6])


def test_rule_flag_within_distance():
    src = gpd.GeoDataFrame({"category": ["school"]}, geometry=[Point(50, 4)], crs=CRS)
    empty = gpd.GeoDataFrame({"osmid": []}, geometry=[], crs=CRS)
    out = tagging.tag_edges(
        _edges([LineString([(0, 0), (100, 0)]), LineString([(0, 50), (100, 50)])]),
        src,
        empty,
        _profile(),
    )
    assert out["rule_0"].tolist() == [True, False]


def test_tagging_in_small_chunks_gives_the_same_columns(town_net, monkeypatch):
    # The sample town tagged in pieces of 7 sample points must equal the one-piece tagging
    # value for value (each edge's exposure depends only on its own samples).
    net = town_net
    cols = [c for c in net.edges.columns if c.startswith(("exp_", "infl_"))] + [
        "exposure_km",
        "crossings",
    ]
    plain = tagging.tag_edges(net.edges, net.sources, net.crossings, net.profile)
    monkeypatch.setattr(tagging, "CHUNK_POINTS", 7)
    assert len(tagging._chunks(net.edges.geometry.to_numpy(), 10.0, 7)) > 100
    chunked = tagging.tag_edges(net.edges, net.sources, net.crossings, net.profile)
    for c in cols:
        np.testing.assert_array_equal(chunked[c].to_numpy(), plain[c].to_numpy(), err_msg=c)
    assert plain["exp_school"].gt(0).any()


def test_likelihood_column_only_when_the_profile_asks():
    # Two edges at 25 mph and 27.5 mph (10 % faster); reference 25 mph, exponent 3.5
    # (serious injury crashes, Elvik 2009 re-estimate of Nilsson's power model [memory]).
    lines = [LineString([(0, 0), (100, 0)]), LineString([(0, 50), (100, 50)])]
    edges = _edges(lines)
    edges["speed_kph"] = [25 * 1.609344, 27.5 * 1.609344]
    empty = gpd.GeoDataFrame({"category": []}, geometry=[], crs=CRS)
    nocross = gpd.GeoDataFrame({"osmid": []}, geometry=[], crs=CRS)
    off = tagging.tag_edges(edges, empty, nocross, _profile())
    assert "likelihood" not in off.columns
    on_prof = _profile(likelihood={"crashes": "serious_injury", "reference_mph": 25})
    on = tagging.tag_edges(edges, empty, nocross, on_prof)
    assert on["likelihood"].to_numpy() == pytest.approx([1.0, 1.1**3.5])
    # severity is still Tefft's alone; scoring multiplies the two
    assert on["severity"].to_numpy() == pytest.approx(off["severity"].to_numpy())
    # re-tagging tagged edges with a profile without it resets the column to 1
    again = tagging.tag_edges(on, empty, nocross, _profile())
    assert again["likelihood"].tolist() == [1.0, 1.0]


def test_gaussian_smooth_decay_in_tagging():
    # One sample 5 m from a point source, radius 20 (sigma 10): the shifted gaussian.
    line = [LineString([(0, 0), (10, 0)])]
    prof = _profile(
        sample_spacing_m=10,
        categories={
            "school": {
                "select": [{"amenity": ["school"]}],
                "weight": 2.0,
                "radius_m": 20,
                "decay": "gaussian_smooth",
            }
        },
    )
    src = gpd.GeoDataFrame({"category": ["school"]}, geometry=[Point(5, 5)], crs=CRS)
    nocross = gpd.GeoDataFrame({"osmid": []}, geometry=[], crs=CRS)
    out = tagging.tag_edges(_edges(line), src, nocross, prof)
    want = (np.exp(-0.5 * (5 / 10) ** 2) - np.exp(-2)) / (1 - np.exp(-2))
    assert out["exp_school"].iloc[0] == pytest.approx(want)


# --- tagging only the edges within reach; numpy sampling along the vertex arrays ---------


def _random_lines(seed: int, count: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    lines = []
    for i in range(count):
        pts = np.cumsum(rng.normal(0, 15, (int(rng.integers(2, 90)), 2)), axis=0)
        pts += rng.uniform(-4e5, 4e5, 2) + [5e5, 4e6]  # UTM-sized coordinates
        if i % 5 == 0:
            pts[1] = pts[0]  # a zero-length segment
        lines.append(LineString(pts))
    return np.array(lines, dtype=object)


def test_numpy_interpolation_gives_geos_points_to_the_bit(town_net, real_pbf):
    import shapely

    from routerisk.network import loader

    real = loader.frames_from_raw(
        __import__("routerisk.network.osm", fromlist=["read_osm"]).read_osm(real_pbf)
    ).edges.geometry.to_numpy()
    for geoms in (_random_lines(1, 400), town_net.edges.geometry.to_numpy(), real):
        n = tagging._sample_counts(geoms, 10.0)
        owner = np.repeat(np.arange(len(geoms)), n)
        frac = ((np.arange(owner.size) - np.repeat(np.cumsum(n) - n, n)) + 0.5) / np.repeat(n, n)
        owner = np.concatenate([owner, [0, 1, 2]])
        frac = np.concatenate([frac, [0.0, 1.0, 1e-300]])
        # reference: GEOS through shapely.line_interpolate_point
        ref = shapely.get_coordinates(
            shapely.line_interpolate_point(geoms[owner], frac, normalized=True)
        )
        ours = shapely.get_coordinates(tagging.interpolate_normalized(geoms, owner, frac))
        assert np.max(np.abs(ours - ref)) <= 1e-9
        assert np.array_equal(ours, ref)


def test_sampling_is_the_same_whichever_way_a_line_is_walked(monkeypatch):
    geoms = _random_lines(2, 300)
    assert (np.array([len(g.coords) for g in geoms]) > tagging.MANY_VERTICES).any()
    mixed, own = tagging.sample_points(geoms, 10.0)
    monkeypatch.setattr(tagging, "MANY_VERTICES", 10**9)
    geos, own2 = tagging.sample_points(geoms, 10.0)
    monkeypatch.setattr(tagging, "MANY_VERTICES", 0)
    numpy_only, _ = tagging.sample_points(geoms, 10.0)
    import shapely

    assert np.array_equal(own, own2)
    assert np.array_equal(shapely.get_coordinates(mixed), shapely.get_coordinates(geos))
    assert np.array_equal(shapely.get_coordinates(numpy_only), shapely.get_coordinates(geos))


def _tag_every_edge_with_geos(monkeypatch, *args, **kw):
    """The tagging as it was: every edge sampled, every point interpolated by GEOS."""
    with monkeypatch.context() as m:
        m.setattr(
            tagging,
            "reached_edges",
            lambda geoms, by_cat, profile: np.arange(len(geoms), dtype=np.int64),
        )
        m.setattr(tagging, "MANY_VERTICES", 10**9)
        return tagging.tag_edges(*args, **kw)


def _raw_inputs(path):
    from routerisk.network import loader, sources
    from routerisk.network.folder import EDGE_KEEP, _feature_filter
    from routerisk.network.osm import read_osm
    from routerisk.profile import load_profile

    prof = load_profile()
    raw = read_osm(path, feature_filter=_feature_filter(prof))
    frames = loader.frames_from_raw(raw)
    crs = frames.graph_attrs["crs"]
    edges = frames.edges[[c for c in frames.edges.columns if c in EDGE_KEEP]]
    return (
        edges,
        sources.sources_from_raw(raw, prof, crs=crs),
        sources.crossings_from_raw(raw, crs=crs),
        prof,
    )


def test_tagging_within_reach_equals_tagging_every_edge(monkeypatch, real_pbf, tmp_path):
    from routerisk import datasets
    from routerisk.testing import synthetic

    city = tmp_path / "city.osm.pbf"
    synthetic.write_city(city, edges=3000, seed=11)
    for path in (datasets.get_path("town"), real_pbf, city):
        edges, src, cross, prof = _raw_inputs(path)
        ours = tagging.tag_edges(edges, src, cross, prof)
        before = _tag_every_edge_with_geos(monkeypatch, edges, src, cross, prof)
        pd.testing.assert_frame_equal(ours, before, check_exact=True)
        for col in before.columns:
            assert ours[col].equals(before[col]), (path, col)
        by_cat = {
            c.name: src.geometry.to_numpy()[src["category"].to_numpy() == c.name]
            for c in prof.categories
        }
        reach = tagging.reached_edges(edges.geometry.to_numpy(), by_cat, prof)
        assert 0 < len(reach) < len(edges), path  # some edges really are skipped
        far = np.setdiff1d(np.arange(len(edges)), reach)
        exp_cols = [f"exp_{c.name}" for c in prof.categories]
        assert (ours[exp_cols].to_numpy()[far] == 0.0).all()


def test_an_edge_out_of_reach_is_not_sampled_and_gets_exact_zeros(monkeypatch):
    prof = _profile()
    edges = gpd.GeoDataFrame(
        {"highway": ["residential"] * 2, "speed_kph": [30.0] * 2, "length": [25.0, 25.0]},
        geometry=[LineString([(0, 0), (25, 0)]), LineString([(0, 500), (25, 500)])],
        crs=CRS,
    )
    src = gpd.GeoDataFrame({"category": ["school"]}, geometry=[Point(10, 5)], crs=CRS)
    cross = gpd.GeoDataFrame({"osmid": []}, geometry=[], crs=CRS)
    seen = []
    real = tagging.sample_points
    monkeypatch.setattr(tagging, "sample_points", lambda g, s: seen.append(len(g)) or real(g, s))
    out = tagging.tag_edges(edges, src, cross, prof)
    assert seen == [1]
    assert out["exp_school"].tolist()[1] == 0.0 and out["infl_school"].tolist()[1] == 0.0
    assert out["exp_school"].tolist()[0] > 0
