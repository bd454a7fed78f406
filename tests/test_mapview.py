"""Maps render offline: no network request, no console error, map data escaped."""

from __future__ import annotations

import re

import pytest

from routerisk import CAUTION
from routerisk.render import mapview

from ._browser import inspect_page, needs_chromium


@pytest.fixture(scope="module")
def town_map(town_net, tmp_path_factory):
    path = tmp_path_factory.mktemp("map") / "network.html"
    mapview.save(mapview.network_map(town_net), path)
    return path


def test_page_is_self_contained(town_map):
    text = town_map.read_text()
    # no script or style is loaded from anywhere: everything is inline
    assert not re.search(r'<(script|link)[^>]+(src|href)="https?://', text)
    assert "L.map(" in text or "L.map (" in text
    assert mapview.escape(CAUTION) in text


def test_deterministic(town_net, tmp_path):
    a, b = tmp_path / "a.html", tmp_path / "b.html"
    mapview.save(mapview.network_map(town_net), a)
    mapview.save(mapview.network_map(town_net), b)
    assert a.read_bytes() == b.read_bytes()


def test_hostile_street_name_is_escaped(town_net, tmp_path):
    net = town_net
    edges = net.edges.copy()
    edges.iloc[0, edges.columns.get_loc("name")] = (
        '<script>alert(1)</script>"><img src=x onerror=alert(2)>'
    )
    from routerisk.network.folder import Network

    hostile = Network(edges, net.nodes, net.sources, net.crossings, net.profile, net.meta)
    path = tmp_path / "h.html"
    mapview.save(mapview.network_map(hostile), path)
    text = path.read_text()
    assert "<script>alert(1)" not in text
    assert "onerror=alert(2)>" not in text


@needs_chromium
@pytest.mark.browser
def test_renders_in_headless_chromium_offline(town_map, tmp_path):
    res = inspect_page(
        town_map,
        screenshot=tmp_path / "map.png",
        script=(
            "[document.querySelectorAll('.leaflet-control-layers-selector').length,"
            " document.querySelectorAll('canvas').length,"
            " !!document.getElementById('rr-legend')]"
        ),
    )
    assert res["errors"] == []
    assert res["requests"] == []
    n_layers, n_canvas, legend = res["value"]
    # background + streets by class + one layer per source category
    assert n_layers == 1 + 1 + 7
    assert n_canvas >= 1 and legend
    assert (tmp_path / "map.png").stat().st_size > 10000
