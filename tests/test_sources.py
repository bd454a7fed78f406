"""Exposure sources from OSM objects: nodes, closed ways, multipolygons with holes, crossings."""

from __future__ import annotations

from routerisk.network import sources
from routerisk.network.osm import read_osm
from routerisk.profile import load_profile

from ._osm_snippets import node, way, write


def _raw(tmp_path):
    # an invented square of 0.001 degree with a school node, a shop area (closed way) and a
    # park multipolygon with a hole; one crossing on the street
    parts = [
        node(1, 38.500, -38.000),
        node(2, 38.500, -37.999),
        node(3, 38.501, -37.999),
        node(4, 38.501, -38.000),
        node(5, 38.5002, -37.9998),
        node(6, 38.5002, -37.9992),
        node(7, 38.5008, -37.9992),
        node(8, 38.5008, -37.9998),
        node(9, 38.5005, -38.0000, highway="crossing", crossing="zebra"),
        node(10, 38.5003, -37.9995, amenity="school", name="Corvane Primary"),
        way(100, [1, 9, 4], highway="residential", name="Bosky Lane"),
        way(101, [1, 2, 3, 4, 1], landuse="retail"),
        way(102, [1, 2, 3, 4, 1]),
        way(103, [5, 6, 7, 8, 5]),
        '<relation id="200"><member type="way" ref="102" role="outer"/>'
        '<member type="way" ref="103" role="inner"/><tag k="type" v="multipolygon"/>'
        '<tag k="leisure" v="park"/></relation>\n',
    ]
    prof = load_profile()
    path = write(tmp_path / "s.osm", parts)
    return read_osm(path, feature_filter=sources.feature_filter(prof)), prof


def test_sources_keep_each_kind_with_its_geometry(tmp_path):
    raw, prof = _raw(tmp_path)
    src = sources.sources_from_raw(raw, prof, crs="EPSG:32624")
    by = {(r.category, r.osm_type): r for r in src.itertuples(index=False)}
    school = by[("school", "node")]
    assert school.geometry.geom_type == "Point" and school.name == "Corvane Primary"
    assert by[("retail", "way")].geometry.geom_type == "Polygon"
    park = by[("park", "relation")].geometry
    assert park.geom_type == "Polygon" and len(park.interiors) == 1  # the hole is kept
    # hole area is (0.6 of the side)^2 = 36 % of the square: the park keeps about 64 %
    assert abs(park.area / by[("retail", "way")].geometry.area - 0.64) < 0.01
    assert list(src["category"]) == sorted(src["category"])  # deterministic order


def test_crossings_are_points_with_their_kind(tmp_path):
    raw, _ = _raw(tmp_path)
    cr = sources.crossings_from_raw(raw, crs="EPSG:32624")
    assert list(cr["osmid"]) == [9] and list(cr["crossing"]) == ["zebra"]
    assert str(cr.crs).endswith("32624")
