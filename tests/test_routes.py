"""Tests of routerisk.io.routes: reading GeoJSON, GPX and CSV route files, and their errors."""

from __future__ import annotations

import json
from datetime import UTC, datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import pyproj
import pytest

from routerisk.errors import InputFileError, OptionError, OutputExistsError, RouteInputError
from routerisk.io.routes import PlannedRoute, read_routes, routes_to_geojson, write_routes

# Points in the open ocean around the invented town (CONVENTIONS.md), never a real place.
LONLAT = np.array(
    [[-38.0012, 38.4991], [-38.0003, 38.5004], [-37.9991, 38.5011], [-37.9985, 38.5023]]
)
T0 = datetime(2026, 5, 4, 8, 30, tzinfo=timezone(timedelta(hours=-3)))


def _route(name: str = "east-loop", *, times: bool = True, depart: bool = True) -> PlannedRoute:
    return PlannedRoute(
        name=name,
        lonlat=LONLAT,
        times=[T0 + timedelta(seconds=5 * i) for i in range(len(LONLAT))] if times else None,
        required=[False, True, False, False],
        depart=T0 if depart else None,
    )


def _write(tmp_path: Path, name: str, text: str) -> Path:
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def _fc(*features: dict, **extra: object) -> str:
    return json.dumps({"type": "FeatureCollection", "features": list(features), **extra})


def _line(coords: list, **props: object) -> dict:
    return {
        "type": "Feature",
        "geometry": {"type": "LineString", "coordinates": coords},
        "properties": props,
    }


COORDS = LONLAT.tolist()


# ---------------------------------------------------------------------------------------------
# round trips


@pytest.mark.parametrize("ext", [".geojson", ".gpx", ".csv"])
def test_round_trip_each_format(tmp_path, ext):
    routes = [_route("east-loop"), _route("west-run", times=False, depart=False)]
    path = write_routes(tmp_path / f"routes{ext}", routes)
    back = read_routes(path)
    assert [r.name for r in back] == ["east-loop", "west-run"]
    for a, b in zip(routes, back, strict=True):
        np.testing.assert_array_equal(b.lonlat, a.lonlat)  # written with repr: exact
        np.testing.assert_array_equal(b.required, [True, True, False, True])
        assert b.source == str(path)
        if a.times is None:
            assert b.times is None
        else:
            assert list(b.times) == list(a.times)  # same instants (GPX writes UTC)
        if ext == ".gpx":
            assert b.depart is None  # GPX has no field for it
        else:
            assert b.depart == a.depart


def test_write_refuses_an_existing_file_and_unknown_extension(tmp_path):
    path = write_routes(tmp_path / "r.geojson", [_route()])
    with pytest.raises(OutputExistsError) as exc:
        write_routes(path, [_route()])
    assert str(path) in exc.value.one_line()
    with pytest.raises(OptionError):
        write_routes(tmp_path / "r.kml", [_route()])


def test_geojson_feature_bare_geometry_and_default_names(tmp_path):
    feat = _write(tmp_path, "f.geojson", json.dumps(_line(COORDS, name=" harbour ")))
    assert [r.name for r in read_routes(feat)] == ["harbour"]
    bare = _write(tmp_path, "g.geojson", json.dumps({"type": "LineString", "coordinates": COORDS}))
    assert [r.name for r in read_routes(bare)] == ["route-1"]
    two = _write(tmp_path, "two.json", _fc(_line(COORDS), _line(COORDS[::-1])))
    assert [r.name for r in read_routes(two)] == ["route-1", "route-2"]


def test_multilinestring_parts_are_joined_without_repeating_the_shared_point(tmp_path):
    parts = [COORDS[:2], COORDS[1:3], COORDS[3:]]  # parts 1-2 share a point, 2-3 do not
    feat = {
        "type": "Feature",
        "properties": {"name": "joined", "required": [2]},
        "geometry": {"type": "MultiLineString", "coordinates": parts},
    }
    (r,) = read_routes(_write(tmp_path, "m.geojson", _fc(feat)))
    np.testing.assert_array_equal(r.lonlat, LONLAT)
    np.testing.assert_array_equal(r.required, [True, False, True, True])


def test_required_point_features_mark_the_nearest_route_point(tmp_path):
    marker = {
        "type": "Feature",
        "geometry": {"type": "Point", "coordinates": [-38.00031, 38.50041]},
        "properties": {"required": True, "route": "east-loop"},
    }
    other = {
        "type": "Feature",
        "geometry": {"type": "Point", "coordinates": [-38.0, 38.5]},
        "properties": {"kind": "note"},
    }  # a Point without required: ignored
    p = _write(tmp_path, "r.geojson", _fc(_line(COORDS, name="east-loop"), marker, other))
    (r,) = read_routes(p)
    np.testing.assert_array_equal(r.required, [True, True, False, True])


def test_geojson_times_and_depart_with_a_default_time_zone(tmp_path):
    times = [
        "2026-05-04T08:30:00",
        "2026-05-04T08:30:05",
        "2026-05-04T08:30:10",
        "2026-05-04T08:30:15",
    ]
    p = _write(
        tmp_path,
        "t.geojson",
        _fc(_line(COORDS, name="a", times=times, depart="2026-05-04T08:29:00")),
    )
    with pytest.raises(RouteInputError) as exc:
        read_routes(p)
    assert "features[0].properties" in exc.value.one_line()
    (r,) = read_routes(p, default_tz="Etc/GMT+3")  # Etc/GMT+3 is UTC-3 (POSIX sign)
    assert r.times[0] == datetime(2026, 5, 4, 11, 30, tzinfo=UTC)
    assert r.depart == datetime(2026, 5, 4, 11, 29, tzinfo=UTC)
    with pytest.raises(OptionError):
        read_routes(p, default_tz="Not/AZone")


@pytest.mark.parametrize("crs_name", ["urn:ogc:def:crs:EPSG::3857", "EPSG:32625"])
def test_legacy_crs_member_is_reprojected(tmp_path, crs_name):
    fwd = pyproj.Transformer.from_crs("EPSG:4326", crs_name, always_xy=True)
    x, y = fwd.transform(LONLAT[:, 0], LONLAT[:, 1])
    fc = _fc(
        _line(np.column_stack([x, y]).tolist(), name="projected"),
        crs={"type": "name", "properties": {"name": crs_name}},
    )
    (r,) = read_routes(_write(tmp_path, "p.geojson", fc))
    np.testing.assert_allclose(r.lonlat, LONLAT, atol=1e-9)


def test_crs84_is_taken_as_lon_lat(tmp_path):
    fc = _fc(
        _line(COORDS), crs={"type": "name", "properties": {"name": "urn:ogc:def:crs:OGC:1.3:CRS84"}}
    )
    (r,) = read_routes(_write(tmp_path, "c.geojson", fc))
    np.testing.assert_array_equal(r.lonlat, LONLAT)


GPX10 = """<?xml version="1.0" encoding="UTF-8"?>
<gpx version="1.0" creator="hand" xmlns="http://www.topografix.com/GPX/1/0">
  <wpt lat="38.5" lon="-38.0"><name>ignored waypoint</name></wpt>
  <trk><name>drive one</name>
    <trkseg>
      <trkpt lat="38.4991" lon="-38.0012"><time>2026-05-04T11:30:00Z</time></trkpt>
      <trkpt lat="38.5004" lon="-38.0003"><time>2026-05-04T11:30:05Z</time></trkpt>
    </trkseg>
    <trkseg>
      <trkpt lat="38.5011" lon="-37.9991"><time>2026-05-04T11:30:10</time></trkpt>
    </trkseg>
  </trk>
  <rte><name>plan</name>
    <rtept lat="38.4991" lon="-38.0012"/>
    <rtept lat="38.5004" lon="-38.0003"><type>required</type></rtept>
    <rtept lat="38.5023" lon="-37.9985"/>
  </rte>
</gpx>
"""


def test_gpx_1_0_tracks_and_routes(tmp_path):
    trk, rte = read_routes(_write(tmp_path, "d.gpx", GPX10))
    assert (trk.name, rte.name) == ("drive one", "plan")
    np.testing.assert_array_equal(trk.lonlat, LONLAT[:3])  # the two segments joined
    # a GPX time without an offset is UTC, as the GPX schema says
    assert trk.times[2] == datetime(2026, 5, 4, 11, 30, 10, tzinfo=UTC)
    assert rte.times is None
    np.testing.assert_array_equal(rte.required, [True, True, True])


def test_csv_groups_routes_in_first_appearance_order_and_keeps_file_order(tmp_path):
    text = (
        "Route,LAT,lon,time,required\n"
        "b,38.4991,-38.0012,2026-05-04T08:30:00-03:00,no\n"
        "a,38.5004,-38.0003,,\n"
        "b,38.5011,-37.9991,2026-05-04T08:31:00-03:00,yes\n"
        "\n"
        "a,38.5023,-37.9985,,0\n"
        "b,38.5023,-37.9985,2026-05-04T08:32:00-03:00,1\n"
    )
    b, a = read_routes(_write(tmp_path, "w.csv", text))
    assert (b.name, a.name) == ("b", "a")
    np.testing.assert_array_equal(b.lonlat, LONLAT[[0, 2, 3]])
    np.testing.assert_array_equal(b.required, [True, True, True])
    assert a.times is None and b.times[1] == T0 + timedelta(minutes=1)


def test_values_are_taken_literally_never_evaluated(tmp_path):
    name = "__import__('os').system('exit 3')"
    (r,) = read_routes(_write(tmp_path, "n.geojson", _fc(_line(COORDS, name=name))))
    assert r.name == name
    text = "route,lat,lon\nx,=1+1,-38.0\nx,38.5,-38.0\n"
    with pytest.raises(RouteInputError, match="not a number"):
        read_routes(_write(tmp_path, "e.csv", text))


def test_format_is_sniffed_for_other_extensions(tmp_path):
    assert read_routes(_write(tmp_path, "r.dat", json.dumps(_line(COORDS))))[0].name == "route-1"
    assert read_routes(_write(tmp_path, "r.trace", GPX10))[0].name == "drive one"


# ---------------------------------------------------------------------------------------------
# validation: every error names the file and the field


NAN_COORDS = [COORDS[0], [float("nan"), 38.5], COORDS[2]]
ERRORS = [
    # (case id, file name, content, error class, field expected in one_line())
    ("empty file", "e.geojson", "  \n", InputFileError, None),
    (
        "malformed json",
        "m.geojson",
        '{"type": "FeatureCollection", "features": [',
        InputFileError,
        "line 1 column",
    ),
    ("malformed xml", "m.gpx", "<gpx><trk></gpx>", InputFileError, "line 1 column"),
    ("not gpx", "n.gpx", "<kml/>", InputFileError, "gpx"),
    ("no features", "n.geojson", _fc(), RouteInputError, "features"),
    (
        "only points",
        "p.geojson",
        _fc(
            {
                "type": "Feature",
                "properties": {},
                "geometry": {"type": "Point", "coordinates": [0, 0]},
            }
        ),
        RouteInputError,
        "features",
    ),
    (
        "gpx no points",
        "n.gpx",
        '<gpx version="1.1"><trk><name>x</name></trk></gpx>',
        RouteInputError,
        "trk",
    ),
    (
        "gpx only waypoints",
        "w.gpx",
        '<gpx><wpt lat="38.5" lon="-38"/></gpx>',
        RouteInputError,
        "trk/rte",
    ),
    (
        "one point",
        "o.geojson",
        _fc(_line(COORDS[:1], name="short")),
        RouteInputError,
        "features[0]",
    ),
    (
        "gpx one point",
        "o.gpx",
        '<gpx><trk><trkseg><trkpt lat="38.5" lon="-38"/></trkseg></trk></gpx>',
        RouteInputError,
        "trk[0]",
    ),
    (
        "nan coordinate",
        "nan.geojson",
        _fc(_line(NAN_COORDS)),
        RouteInputError,
        "features[0].geometry.coordinates[1]",
    ),
    (
        "latitude out of range",
        "lat.geojson",
        _fc(_line([COORDS[0], [-38.0, 91.0]])),
        RouteInputError,
        "features[0].geometry.coordinates[1]",
    ),
    (
        "longitude out of range",
        "lon.gpx",
        '<gpx><rte><rtept lat="38.5" lon="-38"/><rtept lat="38.5" lon="181"/></rte></gpx>',
        RouteInputError,
        "rte[0].rtept[1]",
    ),
    (
        "not a position",
        "pos.geojson",
        _fc(_line([COORDS[0], ["a", 1]])),
        RouteInputError,
        "features[0].geometry.coordinates[1]",
    ),
    (
        "duplicate names",
        "d.geojson",
        _fc(_line(COORDS, name="x"), _line(COORDS, name="x")),
        RouteInputError,
        "features[1]",
    ),
    (
        "unknown geometry",
        "u.geojson",
        _fc(
            {"type": "Feature", "properties": {}, "geometry": {"type": "Circle", "coordinates": []}}
        ),
        RouteInputError,
        "features[0].geometry",
    ),
    (
        "polygon",
        "poly.geojson",
        _fc(
            {
                "type": "Feature",
                "properties": {},
                "geometry": {"type": "Polygon", "coordinates": []},
            }
        ),
        RouteInputError,
        "features[0].geometry",
    ),
    (
        "no geometry",
        "ng.geojson",
        _fc({"type": "Feature", "properties": {}, "geometry": None}),
        RouteInputError,
        "features[0].geometry",
    ),
    ("unknown type", "t.geojson", json.dumps({"type": "Topology"}), InputFileError, "type"),
    (
        "bad time",
        "bt.geojson",
        _fc(
            _line(
                COORDS,
                times=[
                    "2026-05-04T08:30:00Z",
                    "soon",
                    "2026-05-04T08:30:10Z",
                    "2026-05-04T08:30:15Z",
                ],
            )
        ),
        RouteInputError,
        "features[0].properties.times[1]",
    ),
    (
        "times length",
        "tl.geojson",
        _fc(_line(COORDS, times=["2026-05-04T08:30:00Z"])),
        RouteInputError,
        "features[0].properties.times",
    ),
    (
        "bad depart",
        "bd.geojson",
        _fc(_line(COORDS, depart="08:30 tomorrow")),
        RouteInputError,
        "features[0].properties.depart",
    ),
    (
        "time backwards",
        "tb.gpx",
        "<gpx><trk><trkseg>"
        '<trkpt lat="38.5" lon="-38"><time>2026-05-04T11:30:05Z</time></trkpt>'
        '<trkpt lat="38.6" lon="-38"><time>2026-05-04T11:30:00Z</time></trkpt>'
        "</trkseg></trk></gpx>",
        RouteInputError,
        "trk[0]",
    ),
    (
        "gpx bad time",
        "gt.gpx",
        "<gpx><trk><trkseg>"
        '<trkpt lat="38.5" lon="-38"><time>2026-05-04T11:30:00Z</time></trkpt>'
        '<trkpt lat="38.6" lon="-38"><time>noon</time></trkpt>'
        "</trkseg></trk></gpx>",
        RouteInputError,
        "trk[0].trkseg[0].trkpt[1].time",
    ),
    (
        "gpx lat not a number",
        "gl.gpx",
        '<gpx><rte><rtept lat="x" lon="-38"/><rtept lat="38.5" lon="-38"/></rte></gpx>',
        RouteInputError,
        "rte[0].rtept[0].lat",
    ),
    (
        "required index",
        "ri.geojson",
        _fc(_line(COORDS, required=[9])),
        RouteInputError,
        "features[0].properties.required[0]",
    ),
    (
        "required marker route",
        "rm.geojson",
        _fc(
            _line(COORDS, name="a"),
            _line(COORDS, name="b"),
            {
                "type": "Feature",
                "geometry": {"type": "Point", "coordinates": COORDS[1]},
                "properties": {"required": True, "route": "c"},
            },
        ),
        RouteInputError,
        "features[2].properties.route",
    ),
    (
        "required marker far",
        "rf.geojson",
        _fc(
            _line(COORDS, name="a"),
            {
                "type": "Feature",
                "geometry": {"type": "Point", "coordinates": [-38.1, 38.5]},
                "properties": {"required": True, "route": "a"},
            },
        ),
        RouteInputError,
        "features[1].geometry",
    ),
    (
        "bad crs",
        "bc.geojson",
        _fc(_line(COORDS), crs={"type": "name", "properties": {"name": "EPSG:0"}}),
        RouteInputError,
        "crs",
    ),
    ("csv missing column", "mc.csv", "route,lat\na,38.5\n", RouteInputError, "row 1"),
    ("csv no rows", "nr.csv", "route,lat,lon\n", RouteInputError, "row 2"),
    (
        "csv lat not a number",
        "ln.csv",
        "route,lat,lon\na,38.5,-38\na,north,-38\n",
        RouteInputError,
        "row 3: lat",
    ),
    (
        "csv lat out of range",
        "lr.csv",
        "route,lat,lon\na,95,-38\na,38.5,-38\n",
        RouteInputError,
        "row 2: lat",
    ),
    (
        "csv nan lon",
        "nl.csv",
        "route,lat,lon\na,38.5,nan\na,38.5,-38\n",
        RouteInputError,
        "row 2: lon",
    ),
    (
        "csv bad required",
        "rq.csv",
        "route,lat,lon,required\na,38.5,-38,maybe\na,38.6,-38,\n",
        RouteInputError,
        "row 2: required",
    ),
    (
        "csv bad time",
        "ct.csv",
        "route,lat,lon,time\na,38.5,-38,yesterday\na,38.6,-38,\n",
        RouteInputError,
        "row 2: time",
    ),
    (
        "csv naive time",
        "cn.csv",
        "route,lat,lon,time\na,38.5,-38,2026-05-04T08:30:00\na,38.6,-38,2026-05-04T08:31:00\n",
        RouteInputError,
        "row 2: time",
    ),
    ("csv empty route", "cr.csv", "route,lat,lon\n,38.5,-38\n", RouteInputError, "row 2: route"),
    ("csv short row", "cs.csv", "route,lat,lon\na,38.5\n", RouteInputError, "row 2"),
    ("csv one point", "c1.csv", "route,lat,lon\na,38.5,-38\n", RouteInputError, "row 2: route"),
    (
        "all points at one place",
        "same.geojson",
        _fc(_line([COORDS[0], COORDS[0]])),
        RouteInputError,
        "features[0]",
    ),
    ("not utf-8", "b.geojson", None, InputFileError, None),
]


@pytest.mark.parametrize(
    ("case", "name", "content", "cls", "field"), ERRORS, ids=[e[0] for e in ERRORS]
)
def test_errors_name_the_file_and_the_field(tmp_path, case, name, content, cls, field):
    p = tmp_path / name
    if content is None:
        p.write_bytes(b'{"type": "\xff\xfe"}')
    else:
        p.write_text(content, encoding="utf-8")
    with pytest.raises(cls) as exc:
        read_routes(p)
    line = exc.value.one_line()
    assert type(exc.value) is cls, case
    assert line.startswith(str(p)), line
    if field is not None:
        assert exc.value.field is not None and field in exc.value.field, line
    assert "\n" not in line


def test_missing_file_and_folder(tmp_path):
    with pytest.raises(InputFileError) as exc:
        read_routes(tmp_path / "absent.geojson")
    assert str(tmp_path / "absent.geojson") in exc.value.one_line()
    assert "no such file" in exc.value.one_line()
    with pytest.raises(InputFileError, match="not a file"):
        read_routes(tmp_path)


def test_routes_to_geojson_is_plain_json():
    fc = routes_to_geojson([_route()])
    text = json.dumps(fc, allow_nan=False)
    assert json.loads(text)["features"][0]["properties"]["required"] == [0, 1, 3]


def test_planned_route_freezes_its_arrays_and_checks_shapes():
    r = _route()
    with pytest.raises(ValueError):
        r.lonlat[0, 0] = 0.0
    assert r.required[0] and r.required[-1]
    with pytest.raises(ValueError):
        PlannedRoute(name="x", lonlat=LONLAT[:1])
    with pytest.raises(ValueError):
        PlannedRoute(name="x", lonlat=LONLAT, times=[datetime(2026, 1, 1)] * 4)  # naive
