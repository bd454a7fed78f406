"""The array-built road graph (routerisk.network.simplify) against osmnx's own pipeline.

Reference library: osmnx (simplify_graph with its default arguments, largest_component,
add_edge_speeds, add_edge_travel_times, project_graph, graph_to_gdfs, graph_from_gdfs), run
by ``loader.graph_from_raw_reference`` on the same read of the same file.
"""

from __future__ import annotations

import numpy as np
import osmnx as ox
import pandas as pd
import pytest
import shapely

from routerisk import datasets
from routerisk.network import loader, project, raw_edges
from routerisk.network import simplify as _simplify
from routerisk.network.folder import load_network
from routerisk.network.osm import read_osm
from routerisk.testing import copies, synthetic

from . import _osm_snippets as osm

# Stated tolerance on lengths and travel times (the brief: 1e-6 relative; sums of the same
# segment lengths in the same order agree far closer, so this is generous).
REL = 1e-6


@pytest.fixture(scope="module")
def city(tmp_path_factory):
    """A generated city of about 3,000 edges (routerisk.testing.synthetic, invented, CC0)."""
    path = tmp_path_factory.mktemp("city") / "city.osm.pbf"
    synthetic.write_city(path, edges=3000, seed=5)
    return path


def _assert_same_frames(ref_nodes, ref_edges, fr):
    assert list(fr.edges.columns) == list(ref_edges.columns)
    assert fr.edges.index.equals(ref_edges.index)  # same (u, v, key), same order
    assert list(fr.edges.index.names) == ["u", "v", "key"]
    assert fr.edges.crs == ref_edges.crs and fr.nodes.crs == ref_nodes.crs
    for col in ref_edges.columns:
        a, b = ref_edges[col], fr.edges[col]
        if col == "geometry":
            assert shapely.equals_exact(np.asarray(a.array), np.asarray(b.array), 0).all()
        elif col in ("length", "travel_time"):
            assert a.dtype == b.dtype
            np.testing.assert_allclose(b.to_numpy(), a.to_numpy(), rtol=REL, atol=0)
        else:
            pd.testing.assert_series_equal(a, b, check_exact=True)
    pd.testing.assert_frame_equal(
        fr.nodes.drop(columns="geometry"), ref_nodes.drop(columns="geometry"), check_exact=True
    )
    assert shapely.equals_exact(
        np.asarray(fr.nodes.geometry.array), np.asarray(ref_nodes.geometry.array), 0
    ).all()


def _assert_same_graph(G0, G1):
    assert G0.graph == G1.graph
    assert list(G0.nodes) == list(G1.nodes)
    for (_, a), (_, b) in zip(G0.nodes(data=True), G1.nodes(data=True), strict=True):
        assert list(a.items()) == list(b.items())
    e0 = list(G0.edges(keys=True, data=True))
    e1 = list(G1.edges(keys=True, data=True))
    assert [e[:3] for e in e0] == [e[:3] for e in e1]
    for (*_, a), (*_, b) in zip(e0, e1, strict=True):
        assert list(a) == list(b)  # same attributes in the same order
        for k in a:
            assert type(a[k]) is type(b[k]), k
            if k == "geometry":
                assert a[k].equals_exact(b[k], 0)
            elif k in ("length", "travel_time"):
                assert b[k] == pytest.approx(a[k], rel=REL)
            else:
                assert a[k] == b[k], k


def _check(path, **kw):
    raw = read_osm(path)
    G0 = loader.graph_from_raw_reference(raw, **kw)
    n0, e0 = ox.convert.graph_to_gdfs(G0)
    fr = project.build_frames(
        raw,
        largest_component=kw.get("largest_component", True),
        simplify_graph=kw.get("simplify", True),
    )  # no fallback
    _assert_same_frames(n0, e0, fr)
    _assert_same_graph(G0, loader.graph_from_raw(raw, **kw))
    return G0


@pytest.mark.parametrize(
    "kw",
    [
        {},
        {"simplify": False},
        {"largest_component": False},
        {"simplify": False, "largest_component": False},
    ],
)
def test_real_extract(real_pbf, kw):
    # Real OSM data (pyogrio's sample.osm.pbf, ODbL): curves, way breaks, one-ways.
    G = _check(real_pbf, **kw)
    assert G.number_of_edges() > 50


@pytest.mark.parametrize("kw", [{}, {"simplify": False}])
def test_sample_town(kw):
    _check(datasets.get_path("town"), **kw)


def test_generated_city(city):
    G = _check(city)
    # the generator counts the same simplification independently (its own rules 1-3)
    assert G.number_of_edges() > 2500


def _chain_file(tmp_path, extra):
    """A square of two-way streets with a shape-node chain on its south side."""
    parts = [
        osm.node(i, 38.5 + 0.001 * (i // 10), -38.0 + 0.001 * (i % 10))
        for i in (0, 1, 2, 3, 4, 10, 14, 20, 24)
    ]
    parts += [
        osm.way(1, [0, 1, 2, 3, 4], highway="residential", name="South"),
        osm.way(2, [4, 14, 24], highway="residential", name="East"),
        osm.way(3, [24, 20], highway="residential", name="North"),
        osm.way(4, [20, 10, 0], highway="residential", name="West"),
        osm.way(5, [10, 14], highway="tertiary", name="Middle"),
    ]
    return osm.write(tmp_path / "chain.osm", parts + extra)


@pytest.mark.parametrize(
    "case",
    [
        "plain",
        "oneway chain",
        "ring without endpoints",
        "loop with one endpoint",
        "mixed ways on a chain",
    ],
)
def test_small_patterns(tmp_path, case):
    extra = {
        "plain": [],
        "oneway chain": [
            osm.node(30, 38.49, -37.999),
            osm.node(31, 38.49, -37.998),
            osm.way(6, [1, 30, 31, 3], highway="residential", oneway="yes"),
            osm.way(7, [3, 2], highway="residential", oneway="-1"),
        ],
        "ring without endpoints": [
            osm.node(40 + i, 38.52 + 0.0005 * (i % 2), -38.0 + 0.0005 * (i // 2)) for i in range(4)
        ]
        + [osm.way(8, [40, 41, 43, 42, 40], highway="residential")],
        "loop with one endpoint": [osm.node(50, 38.49, -38.001), osm.node(51, 38.489, -38.0)]
        + [osm.way(9, [0, 50, 51, 0], highway="residential", name="Loop")],
        "mixed ways on a chain": [
            osm.node(60, 38.4995, -37.9985),
            osm.way(10, [2, 60], highway="residential", name="Spur", lanes="2", maxspeed="30 mph"),
            osm.way(11, [60, 14], highway="secondary", lanes="3", maxspeed="40", sidewalk="both"),
        ],
    }[case]
    path = _chain_file(tmp_path, extra)
    _check(path, largest_component=False)
    _check(path)


_DUPLICATES = {
    # a one-way way digitised twice over the same shape nodes
    "twice, same tags": [
        osm.way(20, [1, 70, 71, 3], highway="residential", name="Bypass", oneway="yes"),
        osm.way(21, [1, 70, 71, 3], highway="residential", name="Bypass", oneway="yes"),
    ],
    # the copies differ: osmnx merges the first edge of each pair (the first way's tags)
    "twice, other tags": [
        osm.way(20, [1, 70, 71, 3], highway="residential", name="Bypass", oneway="yes"),
        osm.way(21, [1, 70, 71, 3], highway="tertiary", name="Old Bypass", oneway="yes"),
    ],
    # three copies, one drawn the other way round and tagged oneway=-1
    "three times, one reversed": [
        osm.way(20, [3, 71, 70, 1], highway="residential", name="Bypass", oneway="-1"),
        osm.way(21, [1, 70, 71, 3], highway="residential", name="Bypass", oneway="yes"),
        osm.way(22, [1, 70, 71, 3], highway="residential", oneway="yes", lanes="1"),
    ],
    # a copy over part of the chain only, and a copy of a one-way spur between endpoints
    "partly twice": [
        osm.way(20, [1, 70, 71, 3], highway="residential", name="Bypass", oneway="yes"),
        osm.way(21, [1, 70, 71], highway="residential", name="Bypass", oneway="yes"),
        osm.way(22, [71, 3], highway="residential", name="Bypass", oneway="yes"),
        osm.way(23, [2, 14], highway="service", oneway="yes"),
        osm.way(24, [2, 14], highway="service", oneway="yes"),
    ],
}


@pytest.mark.parametrize("case", sorted(_DUPLICATES))
def test_parallel_duplicates_take_the_array_path(tmp_path, case, caplog):
    # osmnx walks unique successors and merges the first edge of each pair; the array build
    # drops the later copies at shape nodes and gives the same graph, without handing back
    nodes = [osm.node(70, 38.499, -37.999), osm.node(71, 38.499, -37.998)]
    path = _chain_file(tmp_path, nodes + _DUPLICATES[case])
    with caplog.at_level("WARNING", logger="routerisk.network.loader"):
        _check(path)
        _check(path, largest_component=False)
    assert not [r for r in caplog.records if r.levelname == "WARNING"]


def test_duplicates_in_mixed_directions_take_the_array_path(tmp_path, caplog):
    # 70 has two edges in from 1 and edges out to 1 and 3: irregular even without the copy.
    # osmnx's walk from 1 runs 1 -> 70 -> 3 and removes 70 with 70 -> 1; the array build
    # walks such clusters with the same rules and gives the same graph, with no warning.
    dup = [
        osm.node(70, 38.499, -37.999),
        osm.way(20, [1, 70, 3], highway="residential", name="Bypass", oneway="yes"),
        osm.way(21, [1, 70], highway="residential", name="Bypass", oneway="yes"),
        osm.way(22, [70, 1], highway="residential", name="Bypass", oneway="yes"),
    ]
    path = _chain_file(tmp_path, dup)
    with caplog.at_level("WARNING", logger="routerisk.network.loader"):
        _check(path)
        _check(path, largest_component=False)
    assert not [r for r in caplog.records if r.levelname == "WARNING"]


_SHAPE = (70, 71, 72)


def _random_ways(rng: np.random.Generator) -> list[str]:
    """Two to five ways over parts of a chain 1-70-71-72-3 (and a loop back to 1), each in
    a random direction and one-way or not: copies, mixed directions, a one-way street that
    turns two-way at a shape node, dead ends inside the chain."""
    chain = [1, *_SHAPE, 3]
    parts = [osm.node(70 + i, 38.499, -37.999 + 0.0005 * i) for i in range(len(_SHAPE))]
    for w in range(int(rng.integers(2, 6))):
        if rng.random() < 0.15:
            refs = [1, 70, 71, 1]  # a loop that closes on its endpoint
        else:
            i, j = sorted(rng.choice(len(chain), 2, replace=False).tolist())
            refs = chain[i : j + 1]
        if rng.random() < 0.5:
            refs = refs[::-1]
        oneway = rng.choice(["yes", "-1", "no"], p=[0.5, 0.15, 0.35])
        parts.append(osm.way(20 + w, refs, highway="residential", name=f"Way {w}", oneway=oneway))
    return parts


# seed 1090: a path runs out at 71 and 70 -> 71 goes with 70, so 71 is left without edges
# (osmnx keeps it as a node when all parts are kept)
@pytest.mark.parametrize("seed", [*range(60), 1090])
def test_random_copies_and_turns_equal_osmnx(tmp_path, seed):
    # Reference library: osmnx's own pipeline on the same read (see module docstring).
    path = _chain_file(tmp_path, _random_ways(np.random.default_rng(seed)))
    for kw in ({}, {"largest_component": False}):
        _check(path, **kw)


def test_a_ring_of_duplicated_ways_with_no_endpoint_is_a_clear_empty_error(tmp_path):
    # Every node is a shape node (the duplicated one-way side included), so osmnx's
    # simplification drops the whole ring and leaves an empty graph; osmnx's largest_component
    # raises on an empty graph, the loader must say "no connected roads" instead.
    from routerisk.errors import EmptyNetworkError

    parts = [
        osm.node(1, -38.5, 38.5),
        osm.node(2, -38.5, 38.502),
        osm.node(3, -38.502, 38.502),
        osm.node(4, -38.502, 38.5),
        osm.node(70, -38.501, 38.5),
        osm.way(10, [1, 2, 3], highway="residential", name="Quillet Row"),
        osm.way(11, [3, 4], highway="residential", name="Marrow Lane"),
        osm.way(20, [4, 70, 1], highway="residential", name="Bypass", oneway="yes"),
        osm.way(21, [4, 70, 1], highway="residential", name="Bypass", oneway="yes"),
    ]
    raw = read_osm(osm.write(tmp_path / "ring.osm", parts))
    with pytest.raises(EmptyNetworkError, match="no connected drivable roads"):
        loader.frames_from_raw(raw)


def test_network_graph_equals_osmnx_graph_from_gdfs(town_dir):
    net = load_network(town_dir)
    ref = ox.convert.graph_from_gdfs(
        net.nodes, net.edges, graph_attrs={"crs": net.edges.crs.to_string()}
    )
    _assert_same_graph(ref, net.graph)


def test_great_circle_is_osmnx_to_the_bit(real_pbf):
    # reference: osmnx.distance.great_circle (the function _simplify writes out)
    rng = np.random.default_rng(3)
    lat = rng.uniform(-89, 89, (2, 5000))
    lon = rng.uniform(-180, 180, (2, 5000))
    lat[1, :50] = lat[0, :50]
    lon[1, :50] = lon[0, :50]  # zero distances
    ours = raw_edges.great_circle(lat[0], lon[0], lat[1], lon[1])
    theirs = ox.distance.great_circle(lat[0], lon[0], lat[1], lon[1])
    assert np.array_equal(ours, theirs)
    assert raw_edges.EARTH_RADIUS_M == ox.distance.EARTH_RADIUS_M


def _fragmented_city(tmp_path, seed: int, bands: int) -> object:
    """A generated city (invented, CC0) with the ways across ``bands`` thin north-south strips
    removed, as a clip or a cut would leave it: several parts, none holding half the nodes."""
    import xml.etree.ElementTree as ET

    whole = tmp_path / f"whole{seed}.osm"
    synthetic.write_city(whole, edges=3000, seed=seed)
    root = ET.parse(whole).getroot()
    lon = {n.get("id"): float(n.get("lon")) for n in root.findall("node")}
    cuts = np.quantile(np.array(list(lon.values())), np.arange(1, bands + 1) / (bands + 1))
    for w in list(root.findall("way")):
        xs = np.array([lon[nd.get("ref")] for nd in w.findall("nd")])
        if any(((xs > c - 0.001) & (xs < c + 0.001)).any() for c in cuts):
            root.remove(w)
    out = tmp_path / f"fragmented{seed}.osm"
    ET.ElementTree(root).write(out)
    return out


@pytest.mark.parametrize("seed, bands", [(5, 2), (6, 3), (7, 5)])
def test_fragmented_extracts_take_the_array_path(tmp_path, seed, bands):
    path = _fragmented_city(tmp_path, seed, bands)
    raw = read_osm(path)
    re = raw_edges.raw_edges(raw)
    g = _simplify.simplify(re)
    n = g.n_nodes
    mat = _simplify.sparse.coo_matrix((np.ones(len(g.u)), (g.u, g.v)), shape=(n, n))
    _, lab = _simplify.csgraph.connected_components(mat, directed=True, connection="strong")
    present = _simplify.isolated_nodes(re)
    present[g.u] = present[g.v] = True
    sizes = np.bincount(lab[present])
    assert 2 * sizes.max() < present.sum()  # the case that used osmnx's own steps
    _check(path)  # build_frames without any fallback equals osmnx's pipeline


def test_tied_parts_take_the_array_path(tmp_path):
    # two separate squares of two-way streets of the same size: the parts tie
    parts = []
    for s, base in enumerate((0, 100)):
        ids = [base + i for i in range(4)]
        for i, (dy, dx) in zip(ids, [(0, 0), (0, 1), (1, 1), (1, 0)], strict=True):
            parts.append(osm.node(i, 38.5 + 0.001 * dy, -38.0 + 0.001 * dx + 0.01 * s))
        parts.append(osm.way(10 + s, ids + [ids[0]], highway="residential", name=f"Sq {s}"))
        parts.append(osm.node(base + 50, 38.5005, -37.9995 + 0.01 * s))
        parts.append(osm.way(20 + s, [ids[0], base + 50, ids[2]], highway="tertiary"))
    path = osm.write(tmp_path / "tied.osm", parts)
    _check(path)


def test_isolated_nodes_kept_by_the_array_build(tmp_path):
    # Ways of one repeated node leave nodes without edges; with every part kept (--all-parts)
    # osmnx's projection adds them back in the order Python iterates a set difference. The
    # array build gives the same frames and graph (no fallback: _check calls build_frames).
    ids = [977, 130, 64, 519, 8, 301, 96, 45, 712, 33, 250, 1000]  # set order != this order
    extra = [osm.node(n, 38.51 + 1e-5 * n, -38.003 - 1e-5 * n) for n in ids]
    extra += [osm.way(40 + i, [n, n], highway="residential") for i, n in enumerate(ids)]
    path = _chain_file(tmp_path, extra)
    raw = read_osm(path)
    assert _simplify.isolated_nodes(raw_edges.raw_edges(raw)).sum() == len(ids)
    for kw in ({"largest_component": False}, {"largest_component": False, "simplify": False}):
        G = _check(path, **kw)
        tail = list(G.nodes)[-len(ids) :]
        assert sorted(tail) == sorted(ids) and tail != ids and tail != sorted(ids)
    _check(path)  # the largest part drops them, as before


def _city_with_copies(tmp_path, seed: int) -> object:
    """A generated city (invented, CC0) with 30 one-way ways copied over the same nodes (some
    only over their first nodes) and 10 two-way ways copied as one-way, as duplicate
    digitising leaves them."""
    whole = tmp_path / f"whole{seed}.osm"
    synthetic.write_city(whole, edges=3000, seed=seed)
    out = tmp_path / f"copies{seed}.osm"
    assert copies.write_with_copies(whole, out, oneway=30, twoway=10, seed=seed) == 40
    return out


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_a_city_with_copied_ways_takes_the_array_path(tmp_path, seed, monkeypatch):
    path = _city_with_copies(tmp_path, seed)
    walked = []
    real = _simplify._walk_clusters
    monkeypatch.setattr(
        _simplify, "_walk_clusters", lambda *a: walked.append(real(*a)) or walked[-1]
    )
    _check(path)
    _check(path, largest_component=False)
    assert walked and all(w.cluster.any() for w in walked)  # the copies made irregular nodes
