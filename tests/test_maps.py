"""Maps: background from the extract, classes (fixed or quantiles), legends, tiles, clusters."""

from __future__ import annotations

import base64
import importlib.util
import sqlite3
from pathlib import Path

import geopandas as gpd
import numpy as np
import pytest
import shapely

from routerisk import datasets
from routerisk.analysis import scoring
from routerisk.cli import main
from routerisk.errors import InputFileError, OptionError
from routerisk.io import routes
from routerisk.network import context as _context
from routerisk.network.folder import Network, load_network, save_network
from routerisk.render import mapview, routemap

from ._browser import inspect_page, needs_chromium
from ._nets import without_context

# A 1x1 PNG (common practice, no source: the smallest valid PNG, one grey pixel).
PNG = base64.b64decode(
    "iVBORw0KGgoAAAANSUhEUgAAAAEAAAABCAAAAAA6fptVAAAACklEQVR4nGNoAAAAggCBd81ytgAAAABJRU5ErkJggg=="
)


def test_build_saves_the_context_layer(town_net, town_dir):
    ctx = town_net.context
    assert ctx is not None
    kinds = set(ctx["kind"])
    assert {"street", "park"} <= kinds
    # footways are not drivable, so the context has more streets than the drivable edges
    assert (ctx["kind"] == "street").sum() > 0
    assert set(ctx[ctx["kind"] == "park"].geom_type) == {"Polygon"}
    loaded = load_network(town_dir)
    assert loaded.context is not None and len(loaded.context) == len(ctx)
    assert list(loaded.context["kind"]) == list(ctx["kind"])


def test_real_extract_context_has_buildings(real_pbf):
    """Real extract: pyogrio's sample.osm.pbf (OpenStreetMap data, ODbL 1.0)."""
    from routerisk.network.folder import build_network

    net = build_network(real_pbf)
    assert {"street", "park", "building"} <= set(net.context["kind"])
    m = mapview.new_map(tuple(net.edges.to_crs(4326).total_bounds), context=net)
    drawn = mapview.background_of(m)
    assert {"street", "park", "building"} <= drawn and "water" not in drawn
    legend = mapview.legend_html("t", [], background=drawn)
    assert "<span>building</span>" in legend and "<span>water</span>" not in legend


def test_folder_without_context_draws_streets_from_edges(town_net, tmp_path):
    old = without_context(town_net)  # as built before the layer existed
    out = save_network(old, tmp_path / "old")
    import pyogrio

    assert "context" not in {n for n, _ in pyogrio.list_layers(out / "network.gpkg")}
    net = load_network(out)
    assert net.context is None
    view = _context.for_view(net, tuple(net.edges.to_crs(4326).total_bounds))
    assert len(view) > 0 and set(view["kind"]) == {"street"}
    text = mapview.render(mapview.network_map(net))
    assert "background: streets, water, parks, buildings" in text


def test_context_is_clipped_to_the_view(town_net):
    ll = town_net.edges.to_crs(4326).total_bounds
    w, s, e, n = ll
    small = (w, s, w + (e - w) * 0.2, s + (n - s) * 0.2)
    part = _context.for_view(town_net, small, pad=0.0)
    whole = _context.for_view(town_net, tuple(ll))
    assert 0 < len(part) < len(whole)
    box = shapely.box(w - 3e-4, s - 3e-4, small[2] + 3e-4, small[3] + 3e-4)
    assert all(box.covers(g) for g in part.geometry)


def test_fixed_and_quantile_classes(town_net):
    prof = town_net.profile
    v = town_net.edges["exposure_km"].to_numpy()
    length = town_net.edges["length"].to_numpy()
    fixed = mapview.classes_for(prof, v, mode="fixed")
    assert fixed.lowers == tuple(b.lower for b in prof.bands)
    q = mapview.classes_for(prof, v, mode="quantiles", weights=length)
    idx = q.index(v)
    share = np.bincount(idx, weights=length, minlength=len(q.names)) / length.sum()
    # each class holds about 1/n of the street length (ties at a cut may shift a little)
    assert len(q.names) == len(prof.bands)
    assert np.all(np.abs(share - 1 / len(q.names)) < 0.12), share
    rows = [t for _, t in q.legend_items()]
    assert any("quantiles" in t for t in rows)
    assert all(f"{lo:.3g}" in rows[i + 1] for i, lo in enumerate(q.lowers))
    with pytest.raises(OptionError):
        mapview.classes_for(prof, v, mode="fifths")


def test_quantile_classes_on_the_map_print_thresholds(town_net):
    text = mapview.render(mapview.network_map(town_net, bands="quantiles"))
    q = mapview.classes_for(town_net.profile, [], mode="quantiles")
    assert q.names == ("all",)
    assert "quantiles of street length on this map" in text
    assert "class 1 of 4 (lowest)" in text


def test_ramp_darkens_and_holds_for_colour_blind_readers():
    """Machado, Oliveira and Fernandes (2009) simulation via colour-science; CIEDE2000."""
    pytest.importorskip("colour")
    spec = importlib.util.spec_from_file_location(
        "colour_check", Path(__file__).parents[1] / "scripts" / "colour_check.py"
    )
    cc = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(cc)
    for vision in cc.VISIONS:
        for cols in (mapview.ramp(4), list(mapview.BAND_RAMP)):
            lightness = cc.lab(cols, vision)[:, 0]
            assert np.all(np.diff(lightness) < -5), (vision, lightness)
            assert cc.min_difference(cols, vision)[0] >= 10, vision
        assert cc.min_difference(list(mapview.ROUTE_COLOURS), vision)[0] >= 10, vision
    # the simulation changes colours: a red-green pair collapses for deuteranopia
    # (common practice, no source: pure red and a matched green look alike to deuteranopes)
    assert (
        cc.min_difference(["#d00000", "#7a7a00"], "deuteranopia")[0]
        < cc.min_difference(["#d00000", "#7a7a00"], "normal")[0]
    )


def _scores(net):
    planned = routes.read_routes(datasets.get_path("routes"), default_tz=net.timezone)
    return scoring.score_routes(net, planned)


def test_score_map_legend_names_every_drawn_thing(town_net):
    scores = _scores(town_net)
    assert any(s.rule_breaks for s in scores)
    text = mapview.render(routemap.route_map(town_net, scores))
    for label in (
        "hard rule broken here",
        "hard-rule zone: ",
        "routes (one dash pattern",
        "background (same OSM extract)",
        "quiet: 0 to 0.5 risk per km",
        "fixed bands",
    ):
        assert label in text, label
    for s in scores:
        assert mapview.escape(f"{s.name} @ {s.depart.strftime('%a %d %b %H:%M')}") in text


def _many_shops(net):
    """Return the sample town with 300 more shop points around one shop (a crowded centre)."""
    import pandas as pd

    src = net.sources
    shop = src[src["category"] == "retail"].iloc[:1]
    pts = shop.loc[shop.index.repeat(300)].copy()
    c = pts.geometry.iloc[0].representative_point()
    rng = np.random.default_rng(1)
    pts["geometry"] = gpd.points_from_xy(
        c.x + rng.normal(0, 80, 300), c.y + rng.normal(0, 80, 300), crs=src.crs
    )
    more = gpd.GeoDataFrame(
        pd.concat([src, pts], ignore_index=True), geometry="geometry", crs=src.crs
    )
    return Network(net.edges, net.nodes, more, net.crossings, net.profile, net.meta, net.context)


def test_many_points_are_clustered(town_net):
    text = mapview.render(mapview.network_map(_many_shops(town_net)))
    assert "L.markerClusterGroup(" in text
    assert f'"disableClusteringAtZoom": {mapview.CLUSTER_UNTIL_ZOOM}' in text
    assert "https://cdnjs" not in text  # the cluster script is inlined, not fetched


def test_tile_sources(tmp_path, town_net):
    with pytest.raises(OptionError):
        mapview.tile_source("https://tiles.invalid/tile.png")
    assert mapview.tile_source("https://tiles.invalid/{z}/{x}/{y}.png").kind == "url"
    with pytest.raises(InputFileError, match="not found"):
        mapview.tile_source(tmp_path / "missing.mbtiles")
    empty = tmp_path / "empty"
    empty.mkdir()
    with pytest.raises(InputFileError, match="no z/x/y tiles"):
        mapview.tile_source(empty)
    folder = tmp_path / "tiles"
    (folder / "14" / "8000").mkdir(parents=True)
    (folder / "14" / "8000" / "5000.png").write_bytes(PNG)
    src = mapview.tile_source(folder)
    assert src.kind == "folder" and src.url.startswith("file://")
    assert src.url.endswith("/{z}/{x}/{y}.png") and src.max_zoom == 14
    bad = tmp_path / "bad.mbtiles"
    bad.write_bytes(b"not a database at all, just bytes" * 20)
    with pytest.raises(InputFileError, match="MBTiles"):
        mapview.tile_source(bad)
    # a real MBTiles file with the tile under the town at zoom 12 (TMS rows)
    ll = tuple(town_net.edges.to_crs(4326).total_bounds)
    x0, _, y0, _ = mapview._tile_range(ll, 12)
    mb = tmp_path / "town.mbtiles"
    with sqlite3.connect(mb) as db:
        db.execute("CREATE TABLE metadata (name text, value text)")
        db.execute(
            "CREATE TABLE tiles (zoom_level integer, tile_column integer, "
            "tile_row integer, tile_data blob)"
        )
        db.execute("INSERT INTO metadata VALUES ('attribution', 'test tiles')")
        db.execute("INSERT INTO tiles VALUES (12, ?, ?, ?)", (x0, 2**12 - 1 - y0, PNG))
    text = mapview.render(mapview.new_map(ll, tiles=mb))
    assert f'"12/{x0}/{y0}": "data:image/png;base64,' in text
    assert "test tiles" in text
    far = (100.0, 10.0, 100.01, 10.01)
    with pytest.raises(InputFileError, match="no tile inside"):
        mapview.new_map(far, tiles=mb)


def test_cli_bad_tiles_is_one_line_exit_2(town_dir, tmp_path, capsys):
    code = main(
        [
            "score",
            str(datasets.get_path("routes")),
            "--network",
            str(town_dir),
            "--out",
            str(tmp_path / "o"),
            "--tiles",
            str(tmp_path / "nope.mbtiles"),
        ]
    )
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and "--tiles" in err[0]
    assert not (tmp_path / "o").exists()


def test_cli_bands_quantiles(town_dir, tmp_path):
    assert (
        main(
            [
                "score",
                str(datasets.get_path("routes")),
                "--network",
                str(town_dir),
                "--out",
                str(tmp_path / "o"),
                "--bands",
                "quantiles",
            ]
        )
        == 0
    )
    text = (tmp_path / "o" / "map.html").read_text()
    assert "quantiles of street length on this map" in text


@needs_chromium
@pytest.mark.browser
def test_score_map_in_chromium_panels_clear_of_layers(town_net, tmp_path):
    page = tmp_path / "score.html"
    mapview.save(routemap.route_map(town_net, _scores(town_net)), page)
    res = inspect_page(
        page,
        screenshot=tmp_path / "score.png",
        script="""(() => {
        const r = e => e.getBoundingClientRect();
        const over = (a, b) => !(a.right <= b.left || b.right <= a.left ||
                                 a.bottom <= b.top || b.bottom <= a.top);
        const layers = r(document.querySelector('.leaflet-control-layers'));
        const panels = [...document.querySelectorAll('.rr-panel')].map(r);
        const legend = document.getElementById('rr-legend');
        legend.querySelector('summary').click();  // folds up
        const folded = r(legend).height;
        return [panels.length, panels.some(p => over(p, layers)),
                document.querySelectorAll('canvas').length,
                document.querySelectorAll('.leaflet-marker-icon').length, folded];
    })()""",
    )
    assert res["errors"] == [] and res["requests"] == []
    n_panels, covers, n_canvas, n_markers, folded = res["value"]
    assert n_panels == 2 and not covers
    assert n_canvas >= 1 and n_markers >= 1  # rule-break markers
    assert folded < 60


@needs_chromium
@pytest.mark.browser
def test_many_shops_show_as_few_clusters(town_net, tmp_path):
    many = _many_shops(town_net)
    page = tmp_path / "many.html"
    mapview.save(mapview.network_map(many), page)
    res = inspect_page(
        page,
        script="[document.querySelectorAll('.rr-cluster').length,"
        " document.querySelectorAll('.leaflet-marker-icon').length]",
    )
    assert res["errors"] == [] and res["requests"] == []
    clusters, icons = res["value"]
    assert clusters >= 1 and icons < 100  # 300+ points, far fewer icons at the first zoom


def test_hostile_name_in_the_background_is_escaped(town_net):
    ctx = town_net.context.copy()
    i = int(np.flatnonzero(ctx["kind"].to_numpy() == "street")[0])
    ctx.iloc[i, ctx.columns.get_loc("name")] = "<img src=x onerror=alert(3)>`${x}`"
    net = Network(
        town_net.edges,
        town_net.nodes,
        town_net.sources,
        town_net.crossings,
        town_net.profile,
        town_net.meta,
        ctx,
    )
    text = mapview.render(mapview.network_map(net))
    assert "<img src=x onerror=alert(3)>" not in text
    assert "${x}" not in text
    # drawn, as inert text (folium writes & as \u0026 inside its JSON)
    assert "\\u0026lt;img src=x onerror=alert(3)\\u0026gt;" in text


@needs_chromium
@pytest.mark.browser
def test_street_names_are_written_at_close_zoom(town_net, tmp_path):
    page = tmp_path / "names.html"
    mapview.save(mapview.network_map(town_net), page)
    res = inspect_page(
        page,
        script=f"""(() => {{
        // labels on the map (a removed one fades out of the page 200 ms later)
        const n = () => Object.values(map_0000._layers).filter(
            l => l instanceof L.Tooltip && l.options.className === 'rr-street-label').length;
        const before = n();
        map_0000.setZoom({mapview.LABELS_FROM_ZOOM}, {{animate: false}});
        const after = n();
        const shown = document.querySelectorAll('.rr-street-label').length;
        map_0000.setZoom({mapview.LABELS_FROM_ZOOM - 2}, {{animate: false}});
        return [before, after, shown, n()];
    }})()""",
    )
    assert res["errors"] == []
    before, after, shown, back = res["value"]
    assert before == 0 and after > 0 and shown == after and back == 0


def test_review_takes_tiles_and_bands(town_dir, tmp_path, capsys):
    folder = tmp_path / "tiles"
    (folder / "13" / "4000").mkdir(parents=True)
    (folder / "13" / "4000" / "3000.png").write_bytes(PNG)
    area = str(datasets.get_path("area"))
    assert (
        main(
            [
                "review",
                area,
                "--network",
                str(town_dir),
                "--report",
                str(tmp_path / "r.html"),
                "--tiles",
                str(folder),
                "--bands",
                "quantiles",
            ]
        )
        == 0
    )
    text = (tmp_path / "r.html").read_text()
    assert folder.resolve().as_uri() in text
    assert "quantiles of street length on this map" in text
    capsys.readouterr()
    assert (
        main(
            [
                "review",
                area,
                "--network",
                str(town_dir),
                "--report",
                str(tmp_path / "s.html"),
                "--tiles",
                str(tmp_path / "none"),
            ]
        )
        == 2
    )
    assert len(capsys.readouterr().err.strip().splitlines()) == 1
    assert not (tmp_path / "s.html").exists()
