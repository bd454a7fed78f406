"""Partitioned tagging (routerisk.parallel) against single-machine tagging: exact agreement."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from shapely import box

pytest.importorskip("dask")
pytest.importorskip("distributed")
pytest.importorskip("dask_geopandas")

from routerisk import datasets
from routerisk import parallel as partition
from routerisk.analysis import review
from routerisk.analysis.review import Area, review_areas  # noqa: E402
from routerisk.cli import main  # noqa: E402
from routerisk.network import tagging  # noqa: E402
from routerisk.network.folder import EDGE_KEEP, build_network  # noqa: E402
from routerisk.testing import synthetic


@pytest.fixture(scope="module")
def client():
    # threads in this process: starts in well under a second; the code is the same for
    # worker processes or a remote scheduler
    with partition.cluster(workers=2, processes=False) as c:
        yield c


@pytest.fixture(scope="module")
def city_net(tmp_path_factory, default_profile):
    """A generated city of about 5,000 edges (routerisk.testing.synthetic; invented, CC0)."""
    path = tmp_path_factory.mktemp("city") / "city.osm.pbf"
    synthetic.write_city(path, edges=5000, seed=11)
    return build_network(path, profile=default_profile)


def _base(net):
    return net.edges[[c for c in net.edges.columns if c in EDGE_KEEP]]


def _window(base, window_m):
    """Keep the edges meeting a central square (tiny tiles on the whole area are slow)."""
    if window_m is None:
        return base
    x0, y0, x1, y1 = base.total_bounds
    cx, cy, h = (x0 + x1) / 2, (y0 + y1) / 2, window_m / 2
    return base[base.intersects(box(cx - h, cy - h, cx + h, cy + h))]


def _tagged_columns(df):
    return [c for c in df.columns if c.startswith(("exp_", "infl_", "rule_")) or c == "crossings"]


def _assert_identical(single, parts):
    assert parts.index.equals(single.index)
    assert list(parts.columns) == list(single.columns)
    cols = _tagged_columns(single)
    assert len(cols) >= 15  # 7 categories x (exp, infl) + crossings + rules
    for c in cols:
        assert np.array_equal(single[c].to_numpy(), parts[c].to_numpy()), c
    for c in ("baseline", "severity", "exposure_km"):
        assert np.array_equal(single[c].to_numpy(), parts[c].to_numpy()), c
    assert (single["band"] == parts["band"]).all()
    assert parts.crs == single.crs and parts.geometry.name == single.geometry.name
    assert parts.geometry.geom_equals_exact(single.geometry, 0).all()
    assert list(parts.dtypes) == list(single.dtypes)


def test_halo_covers_the_largest_reach(default_profile):
    # default profile: largest radius 150 m (school), sample spacing 10 m, snap 1 m
    assert partition.halo_m(default_profile) == pytest.approx(150 + 10 + 1)


@pytest.mark.parametrize(("tile_m", "window_m"), [(140.0, 1600.0), (400.0, None), (1200.0, None)])
def test_sample_town_identical(town_net, default_profile, client, tile_m, window_m):
    # 140 m tiles are smaller than the largest influence radius (150 m): edges near a tile
    # border still see every source of the neighbouring tiles through the halo
    base = _window(_base(town_net), window_m)
    single = tagging.tag_edges(base, town_net.sources, town_net.crossings, default_profile)
    parts = partition.tag_partitioned(
        base,
        town_net.sources,
        town_net.crossings,
        default_profile,
        tile_m=tile_m,
        client=client,
        task_edges=100,
    )
    assert partition.last_tile_count() > 1
    _assert_identical(single, parts)


@pytest.mark.parametrize(("tile_m", "window_m"), [(145.0, 1200.0), (700.0, None), (2500.0, None)])
def test_generated_city_identical(city_net, default_profile, client, tile_m, window_m):
    base = _window(_base(city_net), window_m)
    single = tagging.tag_edges(base, city_net.sources, city_net.crossings, default_profile)
    parts = partition.tag_partitioned(
        base,
        city_net.sources,
        city_net.crossings,
        default_profile,
        tile_m=tile_m,
        client=client,
        task_edges=300,
    )
    assert partition.last_tile_count() > 1
    _assert_identical(single, parts)


def test_stacked_category_and_no_client(town_net, default_profile):
    # a category that sums over overlapping sources adds them in source order in both runs
    cats = tuple(
        dataclasses.replace(c, stack=True) if c.name in ("retail", "transit") else c
        for c in default_profile.categories
    )
    prof = dataclasses.replace(default_profile, categories=cats)
    base = _base(town_net)
    single = tagging.tag_edges(base, town_net.sources, town_net.crossings, prof)
    parts = partition.tag_partitioned(
        base, town_net.sources, town_net.crossings, prof, tile_m=300.0, client=None
    )
    _assert_identical(single, parts)
    assert (single["exp_retail"] > 1).any()  # sources do stack here


def test_review_sums_match_review(town_net, client):
    x0, y0, x1, y1 = town_net.edges.total_bounds
    areas = [
        Area("west half", 0, box(x0, y0, (x0 + x1) / 2, y1), "test", "f[0]"),
        Area("centre", 1, box(x0 + 500, y0 + 400, x1 - 500, y1 - 400), "test", "f[1]"),
    ]
    ref = review_areas(town_net, areas).areas
    for cl in (None, client):
        got = partition.review_sums(town_net, areas, tile_m=600.0, client=cl)
        for r, g in zip(ref, got, strict=True):
            # review rounds to 4 decimals; the tile sums differ only by order of addition
            assert g["network_km"] == pytest.approx(r["network_km"], abs=6e-5)
            for b, km in r["km_by_band"].items():
                assert g["km_by_band"][b] == pytest.approx(km, abs=6e-5)
            for c, km in r["km_in_influence"].items():
                assert g["km_in_influence"][c] == pytest.approx(km, abs=6e-5)


def _town_areas(net):
    x0, y0, x1, y1 = net.edges.total_bounds
    return [
        Area("west half", 0, box(x0, y0, (x0 + x1) / 2, y1), "test", "f[0]"),
        Area("centre", 1, box(x0 + 500, y0 + 400, x1 - 500, y1 - 400), "test", "f[1]"),
    ]


@pytest.mark.parametrize("tile_m", [140.0, 900.0])
def test_clip_on_tiles_identical(town_net, client, tile_m):
    for area in _town_areas(town_net):
        single = review.clip_edges(town_net.edges, area.geometry)
        for cl in (None, client):
            tiles = partition.clip_partitioned(
                town_net.edges, area.geometry, tile_m=tile_m, client=cl, task_edges=50
            )
            assert tiles.index.equals(single.index)
            assert list(tiles.columns) == list(single.columns)
            for c in ("clip_m", "clip_share", "length", "exposure_km"):
                assert np.array_equal(tiles[c].to_numpy(), single[c].to_numpy()), c
            assert all(
                a.equals_exact(b, 0) for a, b in zip(tiles.geometry, single.geometry, strict=True)
            )


def test_review_on_tiles_gives_the_same_figures(town_net, client):
    # the whole review (km, bands, influence, closures, connectivity, hot spots) and a
    # weight what-if (re-tagged on tiles) agree exactly with the single-machine review
    areas = _town_areas(town_net)
    wi = [review.parse_what_if(["weight:school=5"], town_net.profile)]
    single = review_areas(town_net, areas, what_ifs=wi).to_json()
    tiled = review_areas(
        town_net,
        areas,
        what_ifs=wi,
        clipper=partition.clipper(client=client, tile_m=400.0),
        tagger=partition.tagger(client=client, tile_m=400.0),
    ).to_json()
    assert tiled == single
    assert single["areas"][0]["network_km"] > 10


def test_review_command_on_a_local_cluster(town_dir, tmp_path, capsys):
    # --workers starts a local cluster of worker processes: same JSON as the plain run
    area = str(datasets.get_path("area"))
    assert main(["review", area, "--network", str(town_dir), "--json"]) == 0
    plain = capsys.readouterr().out
    assert (
        main(
            [
                "review",
                area,
                "--network",
                str(town_dir),
                "--json",
                "--workers",
                "1",
                "--tile-m",
                "800",
            ]
        )
        == 0
    )
    assert capsys.readouterr().out == plain
    assert main(["review", area, "--network", str(town_dir), "--tile-m", "800"]) == 2
    assert "--tile-m" in capsys.readouterr().err


def test_bad_options():
    from routerisk.errors import OptionError

    with pytest.raises(OptionError, match="tile"):
        partition.tile_ids(_base_empty(), -5)
    with pytest.raises(OptionError, match="not both"):
        with partition.cluster(workers=2, scheduler="tcp://127.0.0.1:1"):
            pass


def _base_empty():
    import geopandas as gpd

    return gpd.GeoDataFrame(geometry=[], crs="EPSG:32624")
