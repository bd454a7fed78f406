"""Score outputs: the ranking table, driven geometries of partial edges, deterministic files."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pyproj

from routerisk import datasets
from routerisk.analysis.scoring import score_routes
from routerisk.io.routes import read_routes
from routerisk.render import routemap


def _scores(net):
    routes = read_routes(datasets.get_path("routes"), default_tz=net.timezone)
    later = dt.datetime(2027, 3, 9, 22, 0, tzinfo=net.timezone)
    return score_routes(net, routes) + score_routes(net, routes[:1], [later])


def test_ranking_table_ranks_lowest_risk_first(town_net):
    table = routemap.ranking_table(_scores(town_net))
    assert list(table["rank"]) == list(range(1, len(table) + 1))
    assert np.all(np.diff(table["risk"].to_numpy()) >= 0)
    parts = table[[c for c in table.columns if c.startswith("risk_") and c != "risk_per_km"]]
    parts = parts.sum(axis=1)
    assert np.allclose(parts, table["risk"])  # the parts add up to the total


def test_segment_geometries_cut_partial_edges_to_the_driven_length(town_net):
    gdf = routemap.segments_gdf(town_net, _scores(town_net))
    assert gdf.crs.to_epsg() == 4326
    # the driven geometry of each segment has the length the score used (partial ends cut),
    # measured on the ellipsoid (pyproj.Geod, WGS84) against the UTM length: within 0.5 %
    geod = pyproj.Geod(ellps="WGS84")
    for g, m in zip(gdf.geometry, gdf["length_m"], strict=True):
        assert abs(geod.geometry_length(g) - m) <= 0.005 * m + 0.05


def test_outputs_are_byte_identical_on_a_second_run(town_net, tmp_path):
    scores = _scores(town_net)
    a = routemap.write_outputs(town_net, scores, tmp_path / "a")
    b = routemap.write_outputs(town_net, scores, tmp_path / "b")
    for name in ("routes.csv", "segments.geojson", "map.html"):
        assert (a / name).read_bytes() == (b / name).read_bytes(), name
    assert (a / "routes.csv").read_text().startswith("# Caution")
