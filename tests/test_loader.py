"""Loader checks against osmnx itself on a real OSM extract, and on clipped files."""

from __future__ import annotations

import bz2
import re
from pathlib import Path

import networkx as nx
import osmium
import osmnx as ox
import pytest

from routerisk.errors import EmptyNetworkError, InputFileError
from routerisk.network import loader
from routerisk.network.osm import DRIVE_EXCLUDE, is_drivable

from . import _osm_snippets as osm


def _drive_only_xml(src: Path, out: Path) -> Path:
    """Write the nodes and the drivable ways of ``src`` as OSM XML."""
    w = osmium.SimpleWriter(str(out))
    for o in osmium.FileProcessor(str(src)):
        if o.is_node():
            w.add_node(o)
        elif o.is_way() and is_drivable(o.tags):
            w.add_way(o)
    w.close()
    return out


def _total_length(G: nx.MultiDiGraph) -> float:
    return sum(d["length"] for _, _, d in G.edges(data=True))


def test_matches_osmnx_on_real_extract(real_pbf, tmp_path):
    # Reference library: osmnx (graph_from_xml, simplify, largest strongly connected part)
    # on the same drivable ways of a real OSM extract (pyogrio's sample.osm.pbf, ODbL).
    ref = ox.graph_from_xml(
        _drive_only_xml(real_pbf, tmp_path / "drive.osm"), simplify=True, retain_all=False
    )
    ours = loader.graph_from_file(real_pbf)
    assert ours.number_of_nodes() == ref.number_of_nodes()
    assert ours.number_of_edges() == ref.number_of_edges()
    # stated tolerance: 0.1 % of total length
    assert _total_length(ours) == pytest.approx(_total_length(ref), rel=1e-3)
    assert set(ours.nodes) == set(ref.nodes)


def test_graph_conventions(real_pbf):
    G = loader.graph_from_file(real_pbf)
    assert G.graph["crs"].startswith("EPSG:326")  # a northern UTM zone picked by pyproj
    for _, _, d in G.edges(data=True):
        assert d["geometry"].geom_type == "LineString"
        assert d["length"] > 0 and d["travel_time"] > 0 and d["speed_kph"] > 0
        assert isinstance(d["oneway"], bool) and isinstance(d["name"], str)
    assert nx.is_strongly_connected(G)


def test_drive_filter_matches_osmnx_filter_string():
    # Reference library: osmnx's own Overpass filter for network_type="drive".
    text = ox._overpass._get_network_filter("drive")
    pairs = dict(re.findall(r'\["([a-z_]+)"!~"([^"]+)"\]', text))
    assert pairs == DRIVE_EXCLUDE


@pytest.mark.parametrize(
    ("tags", "expected"),
    [
        ({"highway": "residential"}, True),
        ({"highway": "primary", "oneway": "yes"}, True),
        ({"highway": "footway"}, False),
        ({"highway": "service", "service": "driveway"}, False),
        ({"highway": "service"}, False),  # osmnx "drive" drops all service roads
        ({"highway": "residential", "access": "private"}, False),
        ({"highway": "construction"}, False),
        ({"highway": "proposed"}, False),
        ({"highway": "residential", "motor_vehicle": "no"}, False),
        ({"highway": "pedestrian", "area": "yes"}, False),
        ({"building": "yes"}, False),
    ],
)
def test_drive_filter(tags, expected):
    assert is_drivable(tags) is expected


def test_same_graph_from_xml_bz2_and_pbf(real_pbf, tmp_path):
    xml = tmp_path / "all.osm"
    w = osmium.SimpleWriter(str(xml))
    for o in osmium.FileProcessor(str(real_pbf)):
        w.add(o)
    w.close()
    bz = tmp_path / "all.osm.bz2"
    bz.write_bytes(bz2.compress(xml.read_bytes()))
    graphs = [loader.graph_from_file(p) for p in (real_pbf, xml, bz)]
    sizes = {(g.number_of_nodes(), g.number_of_edges(), round(_total_length(g), 6)) for g in graphs}
    assert len(sizes) == 1


def test_clipped_extract_keeps_runs_of_existing_nodes(tmp_path):
    # A way whose middle node lies outside the clip is split, not dropped or crashed on.
    parts = [osm.node(i, 38.5, -38.0 + 0.001 * i) for i in (1, 2, 4, 5)]
    parts += [osm.node(10 + i, 38.501, -38.0 + 0.001 * i) for i in (1, 2, 4, 5)]
    parts.append(osm.way(1, [1, 2, 3, 4, 5], highway="residential"))  # node 3 is missing
    parts.append(osm.way(2, [11, 12, 14, 15], highway="residential"))
    parts += [
        osm.way(3, [1, 11], highway="residential"),
        osm.way(4, [2, 12], highway="residential"),
        osm.way(5, [4, 14], highway="residential"),
        osm.way(6, [5, 15], highway="residential"),
    ]
    # a relation that lost a member
    parts.append(
        '<relation id="7"><member type="way" ref="999" role="outer"/>'
        '<tag k="type" v="multipolygon"/><tag k="leisure" v="park"/></relation>\n'
    )
    path = osm.write(tmp_path / "clipped.osm", parts)
    G = loader.graph_from_file(path, largest_component=False, simplify=False)
    assert G.has_edge(1, 2) and G.has_edge(4, 5)
    assert not G.has_edge(2, 4) and 3 not in G


def test_oneway_and_reverse(tmp_path):
    parts = [osm.node(i, 38.5, -38.0 + 0.001 * i) for i in range(1, 4)]
    parts += [
        osm.way(1, [1, 2], highway="residential", oneway="yes"),
        osm.way(2, [2, 3], highway="residential", oneway="-1"),
    ]
    G = loader.graph_from_file(
        osm.write(tmp_path / "o.osm", parts), largest_component=False, simplify=False
    )
    assert G.has_edge(1, 2) and not G.has_edge(2, 1)
    assert G.has_edge(3, 2) and not G.has_edge(2, 3)


def test_missing_file(tmp_path):
    with pytest.raises(InputFileError, match="not found"):
        loader.graph_from_file(tmp_path / "nope.osm")


def test_truncated_pbf(real_pbf, tmp_path):
    bad = tmp_path / "cut.osm.pbf"
    bad.write_bytes(real_pbf.read_bytes()[:3000])
    with pytest.raises(InputFileError) as err:
        loader.graph_from_file(bad)
    assert "cut.osm.pbf" in err.value.one_line()


def test_not_osm(tmp_path):
    bad = tmp_path / "notes.osm"
    bad.write_text("this is not xml at all\n")
    with pytest.raises(InputFileError):
        loader.graph_from_file(bad)


def test_no_drivable_roads(tmp_path):
    parts = [
        osm.node(1, 38.5, -38.0),
        osm.node(2, 38.5, -38.001),
        osm.way(1, [1, 2], highway="footway"),
    ]
    with pytest.raises(EmptyNetworkError, match="no drivable"):
        loader.graph_from_file(osm.write(tmp_path / "paths.osm", parts))


def test_place_fails_clearly_offline(monkeypatch):
    from routerisk.errors import OfflineError

    def boom(*a, **k):
        raise ConnectionError("no route to host")

    monkeypatch.setattr(ox, "graph_from_place", boom)
    with pytest.raises(OfflineError, match="internet"):
        loader.graph_from_place("Anywhere")
