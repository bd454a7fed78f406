"""The top-level functions give the same numbers as the commands on the sample town."""

from __future__ import annotations

import inspect
import json
import os
import subprocess
import sys
from pathlib import Path

import folium
import pandas as pd
import pytest

import routerisk as rr
from routerisk import api, datasets
from routerisk.cli import main
from routerisk.errors import OptionError, RouteriskError
from routerisk.io.atomic import dumps_json
from routerisk.render import mapview

ROOT = Path(__file__).resolve().parents[1]
DEPARTS = ["2027-03-09T08:05", "2027-03-09T14:00"]  # a Tuesday: school windows apply


@pytest.fixture(scope="module")
def net(town_dir):
    """Load the saved sample town the way the commands load it."""
    return rr.load_network(town_dir)


@pytest.fixture(scope="module")
def routes(net):
    return rr.read_routes(datasets.get_path("routes"), timezone=net.timezone)


@pytest.fixture(scope="module")
def drives(net):
    return rr.read_drives(datasets.get_path("drives"), timezone=net.timezone)


def _cli(capsys, *argv: str) -> dict:
    code = main(list(argv))
    out = capsys.readouterr().out
    assert code == 0, out
    doc = json.loads(out)
    doc.pop("made_from", None)  # the record of input files; a result from objects has none
    return doc


def _same(result_dict: dict) -> dict:
    """Return the result's dict as the command prints it (same serialiser and key order)."""
    return json.loads(dumps_json(result_dict))


# ----------------------------------------------------------------------- a light import


def test_import_is_light():
    code = (
        "import sys, routerisk\n"
        "heavy = [m for m in ('geopandas', 'matplotlib', 'folium', 'dask', 'scipy', "
        "'shapely', 'osmnx') if m in sys.modules]\n"
        "print(','.join(heavy))\n"
        "assert callable(routerisk.score_routes)\n"  # the lazy attribute resolves
        "print('routerisk.api' in sys.modules)\n"
        "print(','.join(m for m in ('geopandas', 'matplotlib', 'folium') "
        "if m in sys.modules))\n"
    )
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, env=env, check=True
    ).stdout.splitlines()
    assert out[0] == ""  # nothing heavy loaded by the import itself
    assert out[1] == "True"  # the first use imports routerisk.api ...
    assert out[2] == ""  # ... which loads the library only when a function runs


def test_unknown_attribute_is_an_attribute_error():
    with pytest.raises(AttributeError, match="no attribute 'scroe_routes'"):
        rr.scroe_routes  # noqa: B018
    assert "score_routes" in dir(rr)


# ------------------------------------------------------------- same numbers as commands


def test_score_same_as_command(capsys, town_dir, net, routes, tmp_path):
    path = str(datasets.get_path("routes"))
    flags = [x for d in DEPARTS for x in ("--depart", d)]
    doc = _cli(capsys, "score", path, "--network", str(town_dir), *flags, "--json")
    result = rr.score_routes(net, routes, departs=DEPARTS)
    assert _same(result.to_dict()) == doc
    assert len(doc["routes"]) == 2 * len(routes)
    # the table and the segments are the files score --out writes
    main(["score", path, "--network", str(town_dir), *flags, "--out", str(tmp_path / "o")])
    capsys.readouterr()
    csv = pd.read_csv(tmp_path / "o" / "routes.csv", comment="#")
    frame = result.to_frame()
    assert list(frame.columns) == list(csv.columns)
    pd.testing.assert_series_equal(frame["risk"].round(6), csv["risk"])
    assert frame["name"].tolist() == csv["name"].tolist()
    gdf = result.to_geodataframe()
    assert gdf.crs.to_epsg() == 4326
    seg = json.loads((tmp_path / "o" / "segments.geojson").read_text())
    assert len(gdf) == len(seg["features"])
    assert gdf["risk"].sum() == pytest.approx(
        sum(f["properties"]["risk"] for f in seg["features"]), abs=1e-5
    )


def test_suggest_same_as_command(capsys, town_dir, net, routes):
    path = str(datasets.get_path("routes"))
    doc = _cli(
        capsys,
        "suggest",
        path,
        "--network",
        str(town_dir),
        "--depart",
        DEPARTS[0],
        "--count",
        "2",
        "--max-extra-time",
        "0.4",
        "--json",
    )
    result = rr.suggest_routes(net, routes, departs=DEPARTS[0], count=2, max_extra_time=0.4)
    assert _same(result.to_dict()) == doc
    frame = result.to_frame()
    first = doc["routes"][0]
    assert frame["option"].iloc[0] == "planned"
    assert frame["risk"].iloc[0] == pytest.approx(first["planned"]["risk"], abs=1e-6)
    assert len(frame) == sum(1 + len(r["alternatives"]) for r in doc["routes"])
    gdf = result.to_geodataframe()
    assert gdf.crs.to_epsg() == 4326 and set(gdf["option"]) == set(frame["option"])


def test_review_same_as_command(capsys, town_dir, net, tmp_path):
    area = str(datasets.get_path("area"))
    doc = _cli(
        capsys,
        "review",
        area,
        "--network",
        str(town_dir),
        "--at",
        "wed 08:15",
        "--top",
        "5",
        "--json",
        "--what-if",
        "weight:school=5",
        "weight:retail=0",
    )
    areas = rr.read_areas(area, crs=net.crs)
    result = rr.review_areas(
        net, areas, at="wed 08:15", top=5, what_ifs=[["weight:school=5", "weight:retail=0"]]
    )
    assert _same(result.to_dict()) == doc
    frame = result.to_frame()
    assert frame["network_km"].tolist() == [a["network_km"] for a in doc["areas"]]
    gdf = result.to_geodataframe()
    assert gdf.crs == net.crs
    assert gdf.geometry.area.round(-3).tolist() == (frame["area_km2"] * 1e6).round(-3).tolist()


def test_plan_same_as_command(capsys, town_dir, net):
    runs = str(datasets.get_path("runs"))
    doc = _cli(
        capsys,
        "plan",
        runs,
        "--network",
        str(town_dir),
        "--date",
        "2027-03-09",
        "--vehicles",
        "2",
        "--step",
        "30",
        "--json",
    )
    result = rr.plan_day(net, rr.read_runs(runs), "2027-03-09", vehicles=2, step_min=30)
    assert _same(result.to_dict()) == doc
    frame = result.to_frame()
    assert frame["risk"].round(6).tolist() == [r["risk"] for r in doc["runs"]]
    assert result.to_geodataframe().crs.to_epsg() == 4326


def test_evidence_same_as_command(capsys, town_dir, net, drives):
    doc = _cli(
        capsys,
        "evidence",
        "--benchmark",
        "11",
        "--per",
        "1e9",
        "--fleet",
        "20",
        "--drives",
        str(datasets.get_path("drives")),
        "--network",
        str(town_dir),
        "--json",
    )
    result = rr.plan_evidence(benchmark=11, per=1e9, fleet=20, network=net, drives=drives)
    assert _same(result.to_dict()) == doc
    assert doc["strata"] is not None  # the drives were split by exposure
    frame = result.to_frame()
    assert frame["miles"].tolist() == [r["miles"] for r in doc["allowed_events"]]


def test_evidence_from_scored_segments_same_as_command(capsys, town_dir, net, routes, tmp_path):
    path = str(datasets.get_path("routes"))
    main(
        [
            "score",
            path,
            "--network",
            str(town_dir),
            "--depart",
            DEPARTS[0],
            "--out",
            str(tmp_path / "o"),
        ]
    )
    capsys.readouterr()
    doc = _cli(
        capsys,
        "evidence",
        "--benchmark",
        "11",
        "--per",
        "1e9",
        "--segments",
        str(tmp_path / "o" / "segments.geojson"),
        "--json",
    )
    segments = rr.score_routes(net, routes, departs=DEPARTS[0]).to_geodataframe()
    got = _same(rr.plan_evidence(benchmark=11, per=1e9, segments=segments).to_dict())
    # the file holds the segments rounded to 6 decimals; the tables agree to that
    for key in ("by_band", "by_category"):
        assert len(got[key]) == len(doc[key]) > 0
        for a, b in zip(got[key], doc[key], strict=True):
            assert a.keys() == b.keys()
            for k, v in a.items():
                assert v == (pytest.approx(b[k], rel=1e-6) if isinstance(v, float) else b[k])
    assert {k: v for k, v in got.items() if k not in ("by_band", "by_category")} == {
        k: v for k, v in doc.items() if k not in ("by_band", "by_category")
    }


def test_watch_same_as_command(capsys, town_dir, net, drives):
    events = str(datasets.get_path("events"))
    doc = _cli(
        capsys,
        "watch",
        events,
        "--drives",
        str(datasets.get_path("drives")),
        "--network",
        str(town_dir),
        "--group",
        "band",
        "--fdr",
        "0.2",
        "--json",
    )
    result = rr.watch_events(
        net, rr.read_events(events, timezone=net.timezone), drives, group="band", fdr=0.2
    )
    assert _same(result.to_dict()) == doc
    assert doc["events_matched"] > 0
    gdf = result.to_geodataframe()
    assert gdf.crs == net.crs and gdf.geometry.notna().all()
    assert gdf["events"].sum() == doc["events_matched"]


# ------------------------------------------------------------------ results and inputs


def test_network_same_as_build(capsys, net, tmp_path):
    doc = _cli(
        capsys,
        "build",
        str(datasets.get_path("town")),
        "--out",
        str(tmp_path / "n"),
        "--timezone",
        "Etc/GMT+3",
        "--json",
    )
    built = rr.build_network(datasets.get_path("town"), timezone="Etc/GMT+3")
    assert _same(built.to_dict()) == doc
    summary = net.to_dict()  # the loaded folder has the same summary
    assert summary == doc and summary["edges"] == len(net.to_frame())
    gdf = net.to_geodataframe()
    assert gdf.crs == net.crs and {"u", "v", "key", "geometry"} <= set(gdf.columns)
    assert "geometry" not in net.to_frame().columns
    assert gdf["length"].sum() / 1000 == pytest.approx(summary["length_km"], abs=1e-3)
    assert isinstance(net.to_map(), folium.Map)


def test_maps_carry_the_caution(net, routes):
    result = rr.score_routes(net, routes[:1], departs=DEPARTS[0])
    m = result.to_map()
    assert isinstance(m, folium.Map)
    assert mapview.escape(rr.CAUTION) in mapview.render(m) or rr.CAUTION in mapview.render(m)


def test_inputs_convert(net, routes):
    frame = routes.to_frame()
    assert frame.groupby("route", sort=False).size().tolist() == [len(r) for r in routes]
    gdf = routes.to_geodataframe()
    assert gdf.crs.to_epsg() == 4326 and gdf["name"].tolist() == [r.name for r in routes]
    assert [f["properties"]["name"] for f in routes.to_dict()["features"]] == list(gdf["name"])
    events = rr.read_events(datasets.get_path("events"), timezone=net.timezone)
    assert len(events.to_geodataframe()) == len(events) == len(events.to_dict()["events"])
    projected = rr.read_areas(datasets.get_path("area"), crs=net.crs).to_frame()
    lonlat = rr.read_areas(datasets.get_path("area"), crs="EPSG:4326").to_frame()
    assert projected["area_km2"].min() > 1.0  # km², not m² nor square degrees
    # the same areas measured in the network's UTM zone and in an estimated one
    assert lonlat["area_km2"].tolist() == pytest.approx(projected["area_km2"].tolist(), rel=1e-3)


# -------------------------------------------------------------- errors name parameters


@pytest.mark.parametrize(
    ("call", "field"),
    [
        (lambda n, r: rr.score_routes(n, r, departs=["2027-03-09"]), "departs"),
        (lambda n, r: rr.score_routes(n, r, departs=[20270309]), "departs"),
        (lambda n, r: rr.suggest_routes(n, r, departs=DEPARTS[0], count=0), "count"),
        (
            lambda n, r: rr.suggest_routes(n, r, departs=DEPARTS[0], max_extra_time=25),
            "max_extra_time",
        ),
        (
            lambda n, r: rr.plan_day(
                n, rr.read_runs(datasets.get_path("runs")), "2027-03-09", step_min=0
            ),
            "step_min",
        ),
        (
            lambda n, r: rr.plan_day(n, rr.read_runs(datasets.get_path("runs")), "09/03/2027"),
            "date",
        ),
        (lambda n, r: rr.plan_evidence(benchmark=-1, per=1e9), "benchmark"),
        (lambda n, r: rr.plan_evidence(benchmark=1, per=1e9, hours_per_day=30), "hours_per_day"),
        (lambda n, r: rr.plan_evidence(benchmark=1, per=1e9, observed=1e6), "events"),
        (
            lambda n, r: rr.review_areas(
                n, rr.read_areas(datasets.get_path("area"), crs=n.crs), at="someday"
            ),
            "at",
        ),
        (
            lambda n, r: rr.review_areas(
                n,
                rr.read_areas(datasets.get_path("area"), crs=n.crs),
                what_ifs=[["weight:nowhere=2"]],
            ),
            "what_ifs",
        ),
        (
            lambda n, r: rr.review_areas(
                n, rr.read_areas(datasets.get_path("area"), crs="EPSG:4326")
            ),
            "areas",
        ),
    ],
)
def test_errors_name_the_parameter(net, routes, call, field):
    with pytest.raises(RouteriskError) as info:
        call(net, routes)
    assert info.value.field is not None and info.value.field.startswith(field)
    assert "--" not in info.value.one_line()


def test_watch_errors_name_the_parameter(net, drives):
    events = rr.read_events(datasets.get_path("events"), timezone=net.timezone)
    with pytest.raises(OptionError) as info:
        rr.watch_events(net, events, drives, fdr=1.5)
    assert info.value.field == "fdr"
    with pytest.raises(RouteriskError) as info:
        rr.read_drives(ROOT / "no-such-folder")
    assert info.value.field == "folder"


# ---------------------------------------------------------------- typed and documented


@pytest.mark.parametrize("name", api.__all__)
def test_public_function_typed_and_documented(name):
    fn = getattr(rr, name)
    assert fn is getattr(api, name)
    sig = inspect.signature(fn)
    assert sig.return_annotation is not inspect.Signature.empty
    for p in sig.parameters.values():
        assert p.annotation is not inspect.Parameter.empty, p.name
        assert "Any" not in str(p.annotation), p.name
    assert "Any" not in str(sig.return_annotation)
    doc = inspect.getdoc(fn) or ""
    for section in ("Parameters\n----------", "Returns\n-------", "Examples\n--------"):
        assert section in doc, section
    for p in sig.parameters:
        assert p in doc, f"{p} is not documented"


def test_the_top_level_list_and_the_api_list_agree():
    # routerisk/__init__.py keeps its own light copy so `import routerisk` loads nothing heavy;
    # the two static lists (kept static for linters and type checkers) must not drift apart
    import routerisk

    assert list(routerisk._API) == list(api.__all__)
