"""The one-pass OSM reader (routerisk/network/osm.py) on tiny invented files (CC0).

What the loader and the source extraction rely on: clipped ways split into runs of nodes
that exist, crossings and signals collected from node tags, wanted features (nodes, ways and
multipolygon members with their roles), background kinds, only the way keys the graph uses,
the same result from every file format, and one-line errors naming the object at fault.
"""

from __future__ import annotations

import bz2
import gzip
from pathlib import Path

import numpy as np
import osmium
import pytest

from routerisk.errors import InputFileError
from routerisk.network.osm import WAY_KEYS, context_kind, read_osm

from ._osm_snippets import node, way, write

SCHOOL = {"amenity": {"school"}}


def _wanted(tags) -> bool:
    return tags.get("amenity") == "school"


def _town(path: Path) -> Path:
    parts = [node(i, 38.5 + 0.001 * i, -38.0 + 0.0005 * i) for i in range(1, 9)]
    parts += [
        node(20, 38.5005, -37.9995, highway="crossing", crossing="zebra"),
        node(21, 38.5006, -37.9994, highway="crossing"),
        node(22, 38.5007, -37.9993, highway="traffic_signals"),
        node(23, 38.5008, -37.9992, amenity="school", name="Hollin School"),
        # a closed school ground, and a multipolygon with an outer and an inner ring
        node(30, 38.51, -38.01),
        node(31, 38.51, -38.009),
        node(32, 38.511, -38.009),
        node(40, 38.52, -38.02),
        node(41, 38.52, -38.018),
        node(42, 38.522, -38.018),
        node(43, 38.5205, -38.0195),
        node(44, 38.5205, -38.0190),
        node(45, 38.521, -38.019),
    ]
    parts += [
        # ref 99 is not in the file (a clipped extract): the way splits into two runs
        way(100, [1, 2, 99, 3, 4], highway="residential", name="Marrow Lane", surface="asphalt"),
        # a run of one node is dropped (ref 98 missing after node 5)
        way(101, [5, 98, 6, 7], highway="tertiary", maxspeed="30 mph"),
        way(102, [7, 8], highway="footway"),  # not drivable, but a background street
        way(103, [30, 31, 32, 30], amenity="school"),
        way(104, [40, 41, 42, 40]),
        way(105, [43, 44, 45, 43]),
        way(106, [1, 8], building="yes"),
    ]
    parts.append(
        '<relation id="500"><member type="way" ref="104" role="outer"/>'
        '<member type="way" ref="105" role="inner"/>'
        '<tag k="type" v="multipolygon"/><tag k="amenity" v="school"/></relation>\n'
    )
    return write(path, parts)


@pytest.fixture(scope="module")
def raw(tmp_path_factory):
    return read_osm(_town(tmp_path_factory.mktemp("osm") / "town.osm"), feature_filter=_wanted)


def test_clipped_ways_split_into_runs_of_existing_nodes(raw):
    runs = [(w.osmid, w.refs.tolist()) for w in raw.ways]
    assert runs == [(100, [1, 2]), (100, [3, 4]), (101, [6, 7])]
    assert raw.missing_refs == 2  # refs 99 and 98
    for w in raw.ways:
        assert w.lonlat.shape == (len(w.refs), 2) and np.isfinite(w.lonlat).all()


def test_coordinates_are_the_files_decimal_degrees(raw):
    w = raw.ways[0]
    # node 1 was written as lat 38.5010000, lon -37.9995000 (7 decimals, osmium's precision)
    assert w.lonlat[0].tolist() == [-37.9995, 38.501]


def test_only_the_way_keys_the_graph_uses_are_kept(raw):
    tags = raw.ways[0].tags
    assert tags == {"highway": "residential", "name": "Marrow Lane"}  # surface dropped
    assert set(raw.ways[2].tags) <= set(WAY_KEYS) and raw.ways[2].tags["maxspeed"] == "30 mph"


def test_crossings_and_signals_from_node_tags(raw):
    assert raw.crossings[20] == pytest.approx((-37.9995, 38.5005, "zebra"))
    assert raw.crossings[21][2] == "unknown"  # no crossing=* tag
    assert raw.signals == {22}


def test_wanted_features_nodes_ways_and_multipolygon_roles(raw):
    got = {(f.kind, f.osmid): f for f in raw.features}
    assert set(got) == {("node", 23), ("way", 103), ("relation", 500)}
    assert got["node", 23].tags["name"] == "Hollin School"
    assert len(got["way", 103].lonlat) == 1 and len(got["way", 103].lonlat[0]) == 4
    rel = got["relation", 500]
    assert rel.roles == ["outer", "inner"] and len(rel.lonlat) == 2


def test_background_kinds():
    assert context_kind({"highway": "footway"}) == "street"
    assert context_kind({"highway": "pedestrian", "area": "yes"}) is None
    assert context_kind({"building": "school"}) == "building"
    assert context_kind({"natural": "water"}) == "water"
    assert context_kind({"leisure": "park"}) == "park"
    assert context_kind({"amenity": "school"}) is None


def test_background_ways_collected(raw):
    kinds = {(k, osmid) for k, osmid, *_ in raw.context}
    assert {("street", 100), ("street", 101), ("street", 102), ("building", 106)} <= kinds
    names = {osmid: name for _, osmid, name, *_ in raw.context}
    assert names[100] == "Marrow Lane"


def _same(a, b) -> None:
    assert [(w.osmid, w.refs.tolist(), w.tags) for w in a.ways] == [
        (w.osmid, w.refs.tolist(), w.tags) for w in b.ways
    ]
    for wa, wb in zip(a.ways, b.ways, strict=True):
        assert np.array_equal(wa.lonlat, wb.lonlat)
    assert a.crossings == b.crossings and a.signals == b.signals
    assert sorted((f.kind, f.osmid, f.roles) for f in a.features) == sorted(
        (f.kind, f.osmid, f.roles) for f in b.features
    )
    assert a.missing_refs == b.missing_refs


def test_every_format_reads_the_same(tmp_path, raw):
    src = _town(tmp_path / "town.osm")
    data = src.read_bytes()
    (tmp_path / "town.osm.gz").write_bytes(gzip.compress(data))
    (tmp_path / "town.osm.bz2").write_bytes(bz2.compress(data))
    (tmp_path / "town.xml").write_bytes(data)
    pbf = tmp_path / "town.osm.pbf"
    with osmium.SimpleWriter(str(pbf)) as w:
        for obj in osmium.FileProcessor(str(src)):
            w.add(obj)
    for name in ("town.osm.gz", "town.osm.bz2", "town.xml", "town.osm.pbf"):
        _same(read_osm(tmp_path / name, feature_filter=_wanted), raw)


def test_duplicate_ids_named(tmp_path):
    p = write(
        tmp_path / "dup.osm",
        [
            node(1, 38.5, -38.0),
            node(1, 38.6, -38.0),
            node(2, 38.5, -38.1),
            way(7, [1, 2], highway="residential"),
        ],
    )
    with pytest.raises(InputFileError, match="duplicate id") as e:
        read_osm(p)
    assert e.value.field == "node 1" and str(e.value.path) == str(p)


def test_latitude_out_of_range_named(tmp_path):
    p = write(
        tmp_path / "lat.osm",
        [node(1, 38.5, -38.0), node(2, 95.0, -38.0), way(7, [1, 2], highway="residential")],
    )
    with pytest.raises(InputFileError, match="latitude 95 out of range") as e:
        read_osm(p)
    assert e.value.field == "node 2"


@pytest.mark.parametrize(
    ("name", "body", "message"),
    [
        ("empty.osm", b"", "file is empty"),
        ("town.txt", b"<osm/>", "not an OSM file name"),
        ("broken.osm", b"<osm><node id='1' lat='1'", "cannot read as OSM data"),
    ],
)
def test_unreadable_files_one_line(tmp_path, name, body, message):
    p = tmp_path / name
    p.write_bytes(body)
    with pytest.raises(InputFileError, match=message) as e:
        read_osm(p)
    assert "\n" not in str(e.value) and str(e.value.path) == str(p)


def test_missing_file(tmp_path):
    with pytest.raises(InputFileError, match="file not found"):
        read_osm(tmp_path / "absent.osm")
