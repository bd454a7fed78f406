"""``routerisk score`` on the sample town: matching, joins, outputs, bad input."""

from __future__ import annotations

import datetime as dt
import json

import networkx as nx
import numpy as np
import pandas as pd
import pyproj
import pytest
from shapely import LineString, line_interpolate_point

from routerisk import datasets, matching
from routerisk.cli import main
from routerisk.io.routes import PlannedRoute

from ._nets import without_context

SIGMA_NK = 4.07  # Newson and Krumm (2009), ACM SIGSPATIAL GIS '09 [published]


def _run(capsys, *argv):
    code = main([str(a) for a in argv])
    out = capsys.readouterr()
    return code, out.out, out.err


@pytest.fixture(scope="module")
def town_index(town_net):
    return matching.RoadIndex(town_net.graph)


def _walk(G, rng, length_m):
    nodes = sorted(G.nodes)
    u, prev, edges, total = nodes[int(rng.integers(len(nodes)))], None, [], 0.0
    while total < length_m:
        opts = sorted((a, b, k) for a, b, k in G.out_edges(u, keys=True) if b != prev)
        opts = opts or sorted(G.out_edges(u, keys=True))
        e = opts[int(rng.integers(len(opts)))]
        edges.append(e)
        total += G.edges[e]["length"]
        prev, u = e[0], e[1]
    return edges


def _trace(net, edges, sigma, rng):
    G = net.graph
    coords = []
    for e in edges:
        part = list(G.edges[e]["geometry"].coords)
        coords.extend(part if not coords else part[1:])
    line = LineString(coords)
    s = np.arange(0.0, line.length, 10.0)  # 1 s sampling at 10 m/s
    pts = line_interpolate_point(line, s)
    xy = np.array([[p.x, p.y] for p in pts]) + rng.normal(0, sigma, (len(s), 2))
    lon, lat = pyproj.Transformer.from_crs(net.crs, "EPSG:4326", always_xy=True).transform(
        xy[:, 0], xy[:, 1]
    )
    t0 = dt.datetime(2027, 3, 9, 10, 0, tzinfo=dt.UTC)
    times = [t0 + dt.timedelta(seconds=i) for i in range(len(s))]
    return PlannedRoute("trace", np.column_stack([lon, lat]), times=times)


def _recovered(G, truth, m):
    got = set(m.edges)
    tot = sum(G.edges[e]["length"] for e in truth)
    return sum(G.edges[e]["length"] for e in truth if e in got) / tot


@pytest.mark.parametrize(("sigma", "bar"), [(SIGMA_NK, 0.95), (15.0, 0.85)])
def test_map_matching_on_the_town(town_net, town_index, sigma, bar):
    # Traces made by walking known paths on the sample town, Gaussian noise, 1 s sampling;
    # acceptance: >= 95 % of the path's length recovered at sigma 4.07 m, >= 85 % at 15 m.
    rng = np.random.default_rng(7)
    shares = []
    for _ in range(6):
        truth = _walk(town_net.graph, rng, 2500)
        m = matching.match_trace(
            town_index,
            _trace(town_net, truth, sigma, rng),
            sigma_z=SIGMA_NK if sigma == SIGMA_NK else "estimate",
        )
        shares.append(_recovered(town_net.graph, truth, m))
    assert min(shares) >= bar, f"sigma {sigma} m: recovered {min(shares):.3f} (bar {bar})"


def test_joins_agree_with_networkx_on_the_town(town_net, town_index):
    # Reference library: networkx shortest_path_length on the same graph (travel time).
    G = town_net.graph
    rng = np.random.default_rng(3)
    nodes = sorted(G.nodes)
    for _ in range(20):
        a, b = (nodes[i] for i in rng.choice(len(nodes), 2, replace=False))
        ll = np.array(
            [[G.nodes[a]["lon"], G.nodes[a]["lat"]], [G.nodes[b]["lon"], G.nodes[b]["lat"]]]
        )
        m = matching.join_waypoints(town_index, PlannedRoute("p", ll))
        ref = nx.shortest_path(G, a, b, weight="travel_time")
        ref_len = sum(
            min(d["length"] for d in G[u][v].values())
            for u, v in zip(ref[:-1], ref[1:], strict=True)
        )
        ref_time = nx.shortest_path_length(G, a, b, weight="travel_time")
        assert m.time_s == pytest.approx(ref_time, rel=1e-9)
        assert m.length_m == pytest.approx(ref_len, rel=1e-6)


def test_score_json_and_outputs_are_byte_identical(town_dir, tmp_path, capsys):
    routes = datasets.get_path("routes")
    outs = []
    for name in ("a", "b"):
        code, stdout, _ = _run(
            capsys, "score", routes, "--network", town_dir, "--json", "--out", tmp_path / name
        )
        assert code == 0
        outs.append(stdout)
    assert outs[0] == outs[1]
    for f in ("routes.csv", "segments.geojson", "map.html"):
        assert (tmp_path / "a" / f).read_bytes() == (tmp_path / "b" / f).read_bytes()
    data = json.loads(outs[0])
    r = data["routes"][0]
    assert set(r) >= {
        "name",
        "length_km",
        "duration_min",
        "risk",
        "risk_per_km",
        "relative_index",
        "by_category",
        "rule_breaks",
        "hotspots",
    }
    school = next(r for r in data["routes"] if r["name"] == "school-run")
    assert school["rule_breaks"] and school["rule_breaks"][0]["street"]
    seg = json.loads((tmp_path / "a" / "segments.geojson").read_text())
    total = sum(
        f["properties"]["risk"] for f in seg["features"] if f["properties"]["route"] == "school-run"
    )
    assert total == pytest.approx(school["risk"], rel=1e-5)


def test_several_departures_rank_in_one_table(town_dir, tmp_path, capsys):
    code, stdout, _ = _run(
        capsys,
        "score",
        datasets.get_path("routes"),
        "--network",
        town_dir,
        "--depart",
        "2027-03-09T08:10",
        "--depart",
        "2027-03-09T11:00",
        "--json",
    )
    data = json.loads(stdout)
    school = [r for r in data["routes"] if r["name"] == "school-run"]
    assert code == 0 and len(school) == 2
    at_8, at_11 = sorted(school, key=lambda r: r["depart"])
    assert at_8["by_category"]["school"] == pytest.approx(
        3 * at_11["by_category"]["school"], rel=1e-6
    )  # JSON keeps 6 decimals


def _write(p, text):
    p.write_text(text)
    return p


def _routes_file(tmp_path, coords, name="r.geojson"):
    fc = {
        "type": "FeatureCollection",
        "features": [
            {
                "type": "Feature",
                "properties": {"name": "bad-route", "depart": "2027-03-09T10:00:00"},
                "geometry": {"type": "LineString", "coordinates": coords},
            }
        ],
    }
    return _write(tmp_path / name, json.dumps(fc))


def _town_points(town_net, n=2):
    G = town_net.graph
    nodes = sorted(G.nodes)
    return [[G.nodes[x]["lon"], G.nodes[x]["lat"]] for x in (nodes[5], nodes[60])][:n]


def test_bad_inputs_exit_2(town_net, town_dir, tmp_path, capsys):
    pts = _town_points(town_net)
    cases = {
        "off network": (_routes_file(tmp_path, [pts[0], [-38.2, 38.7]], "off.geojson"), "point 1"),
        "empty file": (_write(tmp_path / "empty.geojson", ""), "empty.geojson"),
        "gpx no points": (
            _write(
                tmp_path / "none.gpx",
                '<?xml version="1.0"?><gpx version='
                '"1.1" xmlns="http://www.topografix.com/GPX/1/1"><trk><name>x'
                "</name><trkseg></trkseg></trk></gpx>",
            ),
            "none.gpx",
        ),
        "swapped": (_routes_file(tmp_path, [p[::-1] for p in pts], "swap.geojson"), "swapped"),
    }
    for case, (path, needle) in cases.items():
        code, _, err = _run(capsys, "score", path, "--network", town_dir)
        assert code == 2, case
        assert needle in err and err.count("\n") == 1, (case, err)
    code, _, err = _run(
        capsys,
        "score",
        datasets.get_path("routes"),
        "--network",
        town_dir,
        "--depart",
        "next tuesday",
    )
    assert code == 2 and "--depart" in err


def test_every_score_output_says_how_the_index_reads_and_what_is_modelled(
    town_dir, tmp_path, capsys
):
    # issue 17, points 10 and 11: the relative index is "against the area at the same
    # minutes under the same profile", and each output names what "risk" models.
    import routerisk
    from routerisk.analysis import scoring
    from routerisk.render import mapview

    assert "same minutes under the same profile" in routerisk.CAUTION
    assert "do not model" in routerisk.CAUTION and "crash likelihood" in routerisk.CAUTION
    routes = datasets.get_path("routes")
    code, stdout, _ = _run(
        capsys, "score", routes, "--network", town_dir, "--json", "--out", tmp_path / "o"
    )
    data = json.loads(stdout)
    assert code == 0 and data["relative_index_note"] == scoring.RELATIVE_INDEX_NOTE
    assert "same minutes under the same profile" in data["relative_index_note"]
    assert data["model"].startswith("modelled: exposure")
    assert "severity given a crash" in data["model"]
    assert "crash likelihood by speed (off in this profile)" in data["model"]
    assert "baseline and crossings timed too" in data["model"]
    csv = (tmp_path / "o" / "routes.csv").read_text()
    page = (tmp_path / "o" / "map.html").read_text()
    for note in (scoring.RELATIVE_INDEX_NOTE, data["model"]):
        assert f"# {note}\n" in csv
        assert mapview.escape(note) in page
    meta = json.loads((tmp_path / "o" / "segments.geojson").read_text())["routerisk"]
    assert meta["model"] == data["model"]
    assert meta["relative_index_note"] == scoring.RELATIVE_INDEX_NOTE
    code, text, _ = _run(capsys, "score", routes, "--network", town_dir)
    assert code == 0 and scoring.RELATIVE_INDEX_NOTE in text and data["model"] in text


def _same_index(a, b) -> None:
    """Every array, matrix and mapping of two RoadIndex objects is equal."""
    assert a.crs == b.crs
    assert a.node_ids.tolist() == b.node_ids.tolist()
    assert a.node_pos == b.node_pos and a.edge_pos == b.edge_pos
    assert a.edge_key == b.edge_key
    for name in ("node_xy", "edge_u", "edge_v", "edge_length", "edge_time"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)
    assert all(x.equals_exact(y, 0) for x, y in zip(a.edge_geom, b.edge_geom, strict=True))
    for name in ("csr_time", "csr_length"):
        m, n = getattr(a, name), getattr(b, name)
        np.testing.assert_array_equal(m.indptr, n.indptr)
        np.testing.assert_array_equal(m.indices, n.indices)
        np.testing.assert_array_equal(m.data, n.data)
    for name in ("_seg_ax", "_seg_ay", "_seg_dx", "_seg_dy", "_seg_cum", "_grp_edge"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)
    assert a._reach == b._reach and a.median_speed == b.median_speed


def test_index_from_frames_equals_index_of_graph(town_net, town_index):
    """RoadIndex.of_network reads the frames in the graph's order, without building it."""
    fresh = without_context(town_net)
    _same_index(matching.RoadIndex.of_network(fresh), town_index)
    assert "graph" not in fresh.__dict__  # the cached graph was never built


def test_index_from_frames_with_gaps_equals_index_of_graph(town_net):
    """Null geometry, length or travel time, an isolated node and shuffled rows: still equal."""
    from routerisk.network import project

    edges = town_net.edges.sample(frac=1.0, random_state=3).copy()
    nodes = town_net.nodes.copy()
    edges.iloc[0, edges.columns.get_loc("geometry")] = None
    edges.iloc[1, edges.columns.get_loc("length")] = np.nan
    edges.iloc[2, edges.columns.get_loc("travel_time")] = np.nan
    lonely = nodes.iloc[[0]].copy()
    lonely.index = [-7]
    nodes = pd.concat([nodes, lonely])
    crs = town_net.edges.crs.to_string()
    graph = project.graph_from_gdfs(nodes, edges, graph_attrs={"crs": crs})
    _same_index(matching.RoadIndex.from_frames(nodes, edges, crs), matching.RoadIndex(graph))


def test_score_does_not_build_the_graph(town_net):
    """Scoring matches on the frames: the networkx graph is never made."""
    from routerisk.analysis import scoring
    from routerisk.io import routes

    fresh = without_context(town_net)

    planned = routes.read_routes(datasets.get_path("routes"), default_tz=fresh.timezone)[:1]
    scores = scoring.score_routes(
        fresh, planned, [dt.datetime(2027, 3, 9, 8, 0, tzinfo=fresh.timezone)]
    )
    assert scores and scores[0].risk > 0
    assert "graph" not in fresh.__dict__
