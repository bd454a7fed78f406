"""Tests of routerisk.matching: snapping, waypoint joining and HMM map matching.

All tests run on the synthetic projected grid of tests/_graphs.py (8 x 8 nodes, 120 m blocks,
one-way streets, curved and parallel links), never on networkx's own routing inside the code.
"""

from __future__ import annotations

import re
from datetime import UTC, datetime, timedelta

import networkx as nx
import numpy as np
import pytest

from routerisk.errors import EmptyNetworkError, OptionError, RouteInputError
from routerisk.io.routes import PlannedRoute
from routerisk.matching import (
    MatchedRoute,
    RoadIndex,
    is_dense_trace,
    join_many,
    join_waypoints,
    match_many,
    match_trace,
    to_edges,
    to_edges_many,
)

from ._graphs import grid_graph, path_length, random_drive, sample_trace, to_lonlat

N = 8


def nid(r: int, c: int) -> int:
    return 10_000 + r * N + c


@pytest.fixture(scope="module")
def grid() -> nx.MultiDiGraph:
    return grid_graph(N)


@pytest.fixture(scope="module")
def index(grid) -> RoadIndex:
    return RoadIndex(grid)


def node_lonlat(grid, n) -> list[float]:
    return [grid.nodes[n]["lon"], grid.nodes[n]["lat"]]


def on_edge(grid, e, f: float) -> list[float]:
    """Return lon, lat of the point at share f along edge e."""
    p = grid.edges[e]["geometry"].interpolate(f, normalized=True)
    return to_lonlat(np.array([[p.x, p.y]]))[0].tolist()


def assert_connected(m: MatchedRoute) -> None:
    """Each edge leads to the next one, except where a new piece starts."""
    for i in range(1, len(m.edges)):
        if i not in m.piece_starts:
            assert m.edges[i - 1][1] == m.edges[i][0], (i, m.edges[i - 1], m.edges[i])
    assert m.piece_starts[0] == 0
    assert np.all((m.fractions > 0) & (m.fractions <= 1 + 1e-12))


def edges_length(grid, m: MatchedRoute) -> float:
    return float(
        sum(grid.edges[e]["length"] * f for e, f in zip(m.edges, m.fractions, strict=True))
    )


# ---------------------------------------------------------------------------------------------
# the index


def test_index_keeps_the_fastest_parallel_edge_and_every_edge(grid, index):
    assert len(index.edge_u) == grid.number_of_edges()
    parallel = [(u, v) for u, v, k in grid.edges(keys=True) if k == 1]
    assert parallel, "the test graph has parallel links"
    for u, v in parallel:
        best = min(d["travel_time"] for d in grid.get_edge_data(u, v).values())
        assert index.csr_time[index.node_pos[u], index.node_pos[v]] == pytest.approx(best)
    assert index.crs == "EPSG:32625"


def test_index_refuses_an_empty_graph():
    with pytest.raises(EmptyNetworkError):
        RoadIndex(nx.MultiDiGraph(crs="EPSG:32625"))


# ---------------------------------------------------------------------------------------------
# joining waypoints


def test_join_agrees_with_networkx_fastest_paths_for_50_node_pairs(grid, index):
    rng = np.random.default_rng(7)
    nodes = list(grid.nodes)
    routes, pairs = [], []
    for k in range(50):
        s, t = (nodes[i] for i in rng.choice(len(nodes), 2, replace=False))
        pairs.append((s, t))
        routes.append(
            PlannedRoute(name=f"p{k}", lonlat=[node_lonlat(grid, s), node_lonlat(grid, t)])
        )
    ties = 0
    for (s, t), m in zip(pairs, join_many(index, routes), strict=True):
        assert_connected(m)
        assert m.edges[0][0] == s and m.edges[-1][1] == t
        assert np.all(m.fractions == 1.0)
        # networkx's own answer: time, and the length of the path it finds
        nx_time = nx.shortest_path_length(grid, s, t, weight="travel_time")
        nx_path = nx.shortest_path(grid, s, t, weight="travel_time")
        nx_len = sum(
            min(grid.get_edge_data(a, b).values(), key=lambda d: d["travel_time"])["length"]
            for a, b in zip(nx_path[:-1], nx_path[1:], strict=True)
        )
        assert m.time_s == pytest.approx(nx_time, rel=1e-12)
        assert edges_length(grid, m) == pytest.approx(m.length_m, rel=1e-12)
        if abs(m.length_m - nx_len) > 1e-6:  # a different path of exactly equal time
            ties += 1
    assert ties <= 2, f"{ties} of 50 paths differ in length from networkx's equally fast path"


def test_join_through_several_waypoints_sums_the_legs(grid, index):
    stops = [nid(0, 0), nid(3, 5), nid(7, 1), nid(6, 6)]
    m = join_waypoints(
        index, PlannedRoute(name="legs", lonlat=[node_lonlat(grid, n) for n in stops])
    )
    legs = sum(
        nx.shortest_path_length(grid, a, b, weight="travel_time")
        for a, b in zip(stops[:-1], stops[1:], strict=True)
    )
    assert m.time_s == pytest.approx(legs, rel=1e-12)
    assert_connected(m)
    for i, n in enumerate(stops):  # each waypoint sits on an edge that touches its node
        e = m.edges[m.point_edge[i]]
        assert n in (e[0], e[1])


def test_waypoints_in_the_middle_of_edges_split_them(grid, index):
    e = (nid(0, 1), nid(0, 2), 0)  # a straight two-way residential link
    m = join_waypoints(
        index, PlannedRoute(name="part", lonlat=[on_edge(grid, e, 0.25), on_edge(grid, e, 0.75)])
    )
    assert m.edges == (e,)
    assert m.fractions[0] == pytest.approx(0.5, abs=1e-9)
    assert m.length_m == pytest.approx(0.5 * grid.edges[e]["length"], rel=1e-9)
    assert (m.start_offset, m.end_offset) == pytest.approx((0.25, 0.75), abs=1e-9)
    back = join_waypoints(
        index, PlannedRoute(name="back", lonlat=[on_edge(grid, e, 0.75), on_edge(grid, e, 0.25)])
    )
    assert back.edges == ((e[1], e[0], 0),)  # the other direction of the street
    assert back.fractions[0] == pytest.approx(0.5, abs=1e-9)


def test_one_way_streets_are_followed(grid, index):
    # row 2 is one-way eastbound: west -> east is direct, east -> west goes round a block
    west, east = (nid(2, 1), nid(2, 2), 0), (nid(2, 4), nid(2, 5), 0)
    assert not grid.has_edge(nid(2, 2), nid(2, 1))
    a, b = on_edge(grid, west, 0.5), on_edge(grid, east, 0.5)
    ahead = join_waypoints(index, PlannedRoute(name="ahead", lonlat=[a, b]))
    around = join_waypoints(index, PlannedRoute(name="around", lonlat=[b, a]))
    assert ahead.edges[0] == west and ahead.edges[-1] == east
    assert ahead.fractions[0] == pytest.approx(0.5) and ahead.fractions[-1] == pytest.approx(0.5)
    assert around.time_s > ahead.time_s
    assert_connected(around)
    assert all(grid.has_edge(*e) for e in around.edges)


def test_join_widens_the_bound_when_the_road_detour_is_long(grid, index):
    # 48 m apart on a one-way street, driven backwards: round the block, far beyond the first
    # Dijkstra bound (1.5 x straight distance at the median speed + 30 s)
    e = (nid(2, 3), nid(2, 4), 0)
    a, b = on_edge(grid, e, 0.9), on_edge(grid, e, 0.5)
    m = join_waypoints(index, PlannedRoute(name="back", lonlat=[a, b]))
    tt = grid.edges[e]["travel_time"]
    expect = 0.1 * tt + nx.shortest_path_length(grid, e[1], e[0], weight="travel_time") + 0.5 * tt
    assert m.time_s == pytest.approx(expect, rel=1e-9)
    assert m.edges[0] == e and m.edges[-1] == e and len(m.edges) > 3
    assert m.fractions[0] == pytest.approx(0.1) and m.fractions[-1] == pytest.approx(0.5)
    assert_connected(m)


def test_off_network_waypoint_names_route_point_and_distance(grid, index, tmp_path):
    xy = np.array([[grid.nodes[nid(3, 7)]["x"] + 500.0, grid.nodes[nid(3, 7)]["y"]]])
    far = to_lonlat(xy)[0].tolist()  # 500 m east of the last column
    r = PlannedRoute(
        name="stray", lonlat=[node_lonlat(grid, nid(3, 3)), far], source=str(tmp_path / "r.geojson")
    )
    with pytest.raises(RouteInputError) as exc:
        join_waypoints(index, r)
    line = exc.value.one_line()
    assert str(tmp_path / "r.geojson") in line
    assert exc.value.field == "route 'stray' point 1"
    assert re.search(r"\b(49\d|50\d) m from the nearest drivable road", line), line


def test_swapped_latitude_and_longitude_are_named(grid, index):
    lonlat = np.array(
        [node_lonlat(grid, nid(1, 1)), node_lonlat(grid, nid(5, 6)), node_lonlat(grid, nid(2, 3))]
    )
    r = PlannedRoute(name="swapped", lonlat=lonlat[:, ::-1], source="plans.csv")
    for fn in (join_waypoints, match_trace):
        with pytest.raises(RouteInputError, match="latitude and longitude look swapped") as exc:
            fn(index, r)
        assert exc.value.path == "plans.csv" and "swapped" in exc.value.field


def test_options_are_checked(index, grid):
    r = PlannedRoute(name="x", lonlat=[node_lonlat(grid, nid(0, 0)), node_lonlat(grid, nid(1, 1))])
    with pytest.raises(OptionError):
        join_waypoints(index, r, max_snap_m=-1)
    with pytest.raises(OptionError):
        match_trace(index, r, sigma_z=0)
    with pytest.raises(OptionError):
        match_trace(index, r, beta="large")


# ---------------------------------------------------------------------------------------------
# HMM map matching


def _traces(grid, sigma: float, count: int = 8):
    out = []
    for seed in range(count):
        rng = np.random.default_rng(100 + seed)
        drive = random_drive(grid, 3000.0, rng)  # ~3 km, no U-turns
        # 1 s fixes at 10 m/s with Gaussian noise of sigma (m)
        fixes = sample_trace(grid, drive, spacing_m=10.0, sigma_m=sigma, rng=rng)
        out.append((drive, PlannedRoute(name=f"trace-{seed}", lonlat=fixes)))
    return out


def _recovered(grid, drive, m: MatchedRoute) -> float:
    """Share of the true path's length whose edges are in the match."""
    got = set(m.edges)
    return sum(grid.edges[e]["length"] for e in drive if e in got) / path_length(grid, drive)


def _on_path(grid, drive, m: MatchedRoute) -> float:
    """Share of the matched length that lies on edges of the true path."""
    truth = set(drive)
    on = sum(
        grid.edges[e]["length"] * f for e, f in zip(m.edges, m.fractions, strict=True) if e in truth
    )
    return on / edges_length(grid, m)


def test_match_sigma_4_07_recovers_95pct(grid, index):
    # sigma_z = 4.07 m: Newson and Krumm (2009), Hidden Markov map matching through noise and
    # sparseness, ACM SIGSPATIAL GIS '09 [published]; the 95 % bar is the task's requirement
    data = _traces(grid, 4.07)
    matched = match_many(index, [r for _, r in data])
    rec = [_recovered(grid, d, m) for (d, _), m in zip(data, matched, strict=True)]
    for m in matched:
        assert_connected(m)
        assert m.method == "match" and not m.breaks
    assert min(rec) >= 0.95, f"recovered {min(rec):.3f} (mean {np.mean(rec):.3f}) of the path"


def test_match_sigma_15_recovers_85pct(grid, index):
    # 15 m noise, sigma_z estimated from the trace (1.4826 x median distance to the road,
    # Newson and Krumm 2009 [published]); the 85 % bar is the task's requirement
    data = _traces(grid, 15.0)
    matched = match_many(index, [r for _, r in data], sigma_z="estimate")
    rec = [_recovered(grid, d, m) for (d, _), m in zip(data, matched, strict=True)]
    for m in matched:
        assert_connected(m)
        assert 8.0 < m.sigma_z < 20.0  # the estimate lands near the true 15 m
    assert min(rec) >= 0.85, f"recovered {min(rec):.3f} (mean {np.mean(rec):.3f}) of the path"


def test_match_adds_little_off_path_length_97pct_at_4_07_and_85pct_at_15(grid, index):
    # the bars are ours (common practice, no source): a match should not invent detours
    low = _traces(grid, 4.07)
    on_low = [
        _on_path(grid, d, m)
        for (d, _), m in zip(low, match_many(index, [r for _, r in low]), strict=True)
    ]
    high = _traces(grid, 15.0)
    on_high = [
        _on_path(grid, d, m)
        for (d, _), m in zip(
            high, match_many(index, [r for _, r in high], sigma_z="estimate"), strict=True
        )
    ]
    assert min(on_low) >= 0.97, f"{min(on_low):.3f} of the matched length on the true path"
    assert np.mean(on_high) >= 0.85, f"{np.mean(on_high):.3f} of the matched length on path"


def test_match_estimated_beta_is_median_over_ln2(grid, index):
    drive, r = _traces(grid, 4.07, count=1)[0]
    m = match_trace(index, r, beta="estimate")
    assert m.beta is not None and 0.5 <= m.beta < 4.07 * 3
    assert _recovered(grid, drive, m) >= 0.95


def test_match_breaks_and_restarts_where_no_route_is_plausible(grid, index):
    rng = np.random.default_rng(3)
    west = [(nid(0, c), nid(0, c + 1), 0) for c in range(3)]
    east = [(nid(7, c), nid(7, c - 1), 0) for c in range(7, 4, -1)]
    a = sample_trace(grid, west, spacing_m=10.0, sigma_m=2.0, rng=rng)
    b = sample_trace(grid, east, spacing_m=10.0, sigma_m=2.0, rng=rng)
    # the jump: ~970 m straight, >= 1,320 m by road, more than the 200 m of extra driving allowed
    m = match_trace(index, PlannedRoute(name="jump", lonlat=np.vstack([a, b])))
    assert m.breaks == (len(a),)
    assert len(m.piece_starts) == 2
    assert_connected(m)
    first = m.edges[: m.piece_starts[1]]
    assert set(first) <= set(west) and set(m.edges[m.piece_starts[1] :]) <= set(east)


def test_fixes_close_together_are_dropped_but_required_ones_kept(grid, index):
    e = [(nid(4, c), nid(4, c + 1), 0) for c in range(4)]
    rng = np.random.default_rng(5)
    fixes = sample_trace(grid, e, spacing_m=2.0, sigma_m=0.5, rng=rng)  # 2 m apart < 2 x 4.07
    required = np.zeros(len(fixes), dtype=bool)
    required[[5, 6, 7]] = True
    m = match_trace(index, PlannedRoute(name="slow", lonlat=fixes, required=required))
    dropped = m.point_edge < 0
    assert dropped.mean() > 0.5 and not dropped[[0, 5, 6, 7, len(fixes) - 1]].any()
    assert set(e) <= set(m.edges)
    assert m.length_m == pytest.approx(path_length(grid, e), abs=3.0)  # noise at the two ends


def test_match_off_network_trace_is_an_error(grid, index):
    xy = np.array(
        [
            [grid.nodes[nid(0, 0)]["x"] - 2000.0 - 10 * i, grid.nodes[nid(0, 0)]["y"]]
            for i in range(20)
        ]
    )
    with pytest.raises(RouteInputError) as exc:
        match_trace(index, PlannedRoute(name="at-sea", lonlat=to_lonlat(xy), source="d.gpx"))
    assert exc.value.field.startswith("route 'at-sea' point")
    assert exc.value.path == "d.gpx"


# ---------------------------------------------------------------------------------------------
# choosing per route


def test_dense_traces_are_matched_and_sparse_waypoints_joined(grid, index):
    drive, trace = _traces(grid, 4.07, count=1)[0]
    stops = [nid(0, 0), nid(4, 4), nid(7, 2)]
    plan = PlannedRoute(name="plan", lonlat=[node_lonlat(grid, n) for n in stops])
    assert is_dense_trace(trace) and not is_dense_trace(plan)
    # sparse points every ~100 m, but logged every 5 s: a trace
    t0 = datetime(2026, 5, 4, 11, 0, tzinfo=UTC)
    pts = trace.lonlat[::10]
    sparse = PlannedRoute(
        name="sparse", lonlat=pts, times=[t0 + timedelta(seconds=5 * i) for i in range(len(pts))]
    )
    assert is_dense_trace(sparse)
    out = to_edges_many(index, [plan, trace, sparse])
    assert [m.name for m in out] == ["plan", trace.name, "sparse"]
    assert [m.method for m in out] == ["join", "match", "match"]
    assert to_edges(index, plan).edges == out[0].edges
    assert _recovered(grid, drive, out[2]) >= 0.9
