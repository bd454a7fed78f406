"""The offline page: bundled Leaflet inlined, the map fitted to a view, stable ids, saving."""

from __future__ import annotations

import base64
import re
from functools import cache
from importlib import resources
from pathlib import Path
from typing import Any

import folium
from branca.element import Element

from routerisk.io.atomic import write_text_atomic
from routerisk.render.mapview.background import BACKGROUND, add_context, background_of
from routerisk.render.mapview.classes import classes_for
from routerisk.render.mapview.escaping import escape
from routerisk.render.mapview.layers import add_lines, add_sources, layer_control
from routerisk.render.mapview.legend import (
    add_panel,
    add_provenance,
    category_items,
    legend_html,
)
from routerisk.render.mapview.tiles import TileSource, _add_tiles, tile_source


@cache
def _leaflet_assets() -> tuple[str, str]:
    base = resources.files("routerisk") / "static" / "leaflet"
    js = (base / "leaflet.js").read_text(encoding="utf-8")
    css = (base / "leaflet.css").read_text(encoding="utf-8")

    def inline(m: re.Match[str]) -> str:
        data = (base / "images" / m.group(1)).read_bytes()
        return f"url(data:image/png;base64,{base64.b64encode(data).decode()})"

    css = re.sub(r"url\(images/([a-z0-9-]+\.png)\)", inline, css)
    return js, css


_CSS = (
    ".rr-panel{font:13px/1.35 system-ui,sans-serif;background:#fff;padding:6px 10px;"
    "border-radius:4px;box-shadow:0 1px 4px rgba(0,0,0,.35);max-width:330px;"
    "max-height:calc(50vh - 40px);overflow:auto}"
    ".leaflet-top.leaflet-left .rr-panel{max-height:calc(100vh - 150px)}"
    ".leaflet-control-layers-expanded{max-height:calc(50vh - 40px);overflow:auto}"
    ".rr-panel summary{cursor:pointer;font-weight:600;font-size:14px;margin-bottom:2px}"
    ".rr-panel h5{margin:6px 0 2px;font-size:12px;color:#444}"
    ".rr-row{display:flex;align-items:center;gap:6px;margin:1px 0}"
    ".rr-row svg{flex:none}"
    ".rr-caution{font-size:11px;color:#5a3b00;background:#fff6df;border-left:3px solid "
    "#c9a227;padding:4px 6px;margin-top:6px}"
    ".rr-cluster{background:rgba(255,255,255,.9);border:2px solid #23303c;border-radius:50%;"
    "width:26px;height:26px;display:flex;align-items:center;justify-content:center;"
    "font:11px system-ui,sans-serif;color:#23303c}"
    ".rr-symbol{background:none;border:none}"
    ".rr-street-label{background:rgba(255,255,255,.75);border:none;box-shadow:none;"
    "padding:0 3px;font:11px system-ui,sans-serif;color:#4a4a4a}"
    ".rr-street-label:before{display:none}"
)


def new_map(
    bounds: tuple[float, float, float, float],
    *,
    tiles: str | Path | TileSource | None = None,
    attribution: str | None = None,
    context: Any = None,
) -> folium.Map:
    """Return an offline folium map fitted to (west, south, east, north) in degrees.

    Parameters
    ----------
    bounds
        Area to show, in WGS 84 degrees.
    tiles
        Optional background tiles (see :func:`tile_source`); never needed.
    attribution
        Attribution text for ``tiles``.
    context
        A network (or a context frame): its streets, water, parks and buildings inside
        the view are drawn as the light bottom layer (:mod:`routerisk.network.context`).
    """
    w, s, e, n = bounds
    m = folium.Map(
        location=[(s + n) / 2, (w + e) / 2],
        zoom_start=14,
        tiles=None,
        control_scale=True,
        prefer_canvas=True,
    )
    m.options.update(maxZoom=19, minZoom=3)  # no tile layer sets them; clusters need them
    m.default_js = []
    m.default_css = []
    js, css = _leaflet_assets()
    root = m.get_root()
    root.header.add_child(Element(f"<style>{css}</style>"), name="leaflet_css_inline")
    root.header.add_child(Element(f"<script>{js}</script>"), name="leaflet_js_inline")
    root.header.add_child(
        Element(f"<style>.leaflet-container{{background:{BACKGROUND};}}{_CSS}</style>"),
        name="routerisk_css",
    )
    src = tile_source(tiles)
    if src is not None:
        if attribution:
            src = TileSource(src.kind, src.url, attribution, src.min_zoom, src.max_zoom)
        _add_tiles(m, src, bounds)
    if context is not None:
        add_context(m, context, bounds)
    m.fit_bounds([[s, w], [n, e]])
    return m


_ID = re.compile(r"(?<![0-9A-Za-z])([a-z][a-z_]*?)_([0-9a-f]{32})(?![0-9a-f])")


def render(m: folium.Map) -> str:
    """Return the page HTML with folium's random element ids renumbered deterministically."""
    text = m.get_root().render()
    seen: dict[str, str] = {}

    def repl(mt: re.Match[str]) -> str:
        key = mt.group(0)
        if key not in seen:
            seen[key] = f"{mt.group(1)}_{len(seen):04d}"
        return seen[key]

    return _ID.sub(repl, text)


def save(m: folium.Map, path: str | Path, *, force: bool = True) -> Path:
    """Write the map atomically as one self-contained HTML file."""
    return write_text_atomic(path, render(m), force=force)


def network_map(
    net: Any,
    *,
    tiles: str | Path | TileSource | None = None,
    title: str = "Pedestrian exposure of the road network",
    bands: str = "fixed",
) -> folium.Map:
    """Return the map of a tagged network: edges by exposure class, sources, legend, caution.

    ``bands`` is ``fixed`` (the profile's bands) or ``quantiles`` (length-weighted
    quantiles of this network's exposure per km); the legend prints the thresholds.
    """
    prof = net.profile
    edges = net.edges.reset_index()
    # One line per street segment: keep one direction of two-way pairs for drawing.
    edges = edges.sort_values(["exposure_km"], ascending=False, kind="stable")
    key = edges.apply(lambda r: (min(r["u"], r["v"]), max(r["u"], r["v"])), axis=1)
    edges = edges.loc[~key.duplicated()]
    cls = classes_for(prof, edges["exposure_km"], mode=bands, weights=edges["length"])
    edges["_band_colour"] = cls.colour_of(edges["exposure_km"])
    edges["class"] = [cls.names[i] for i in cls.index(edges["exposure_km"])]
    edges["street"] = edges["name"].fillna("")
    fields = {
        "street": "street",
        "highway": "road class",
        "band": "exposure band (fixed)",
        "class": "class on this map",
        "exposure_km": "exposure per km",
        "speed_kph": "speed km/h",
        "crossings": "crossings",
    }
    for c in prof.categories:
        fields[f"exp_{c.name}"] = f"near {c.label.lower()}"
    ll = net.edges.to_crs("EPSG:4326").total_bounds
    m = new_map(tuple(ll), tiles=tiles, context=net)
    add_lines(
        m,
        edges,
        name="streets by exposure",
        colour_col="_band_colour",
        fields=fields,
        casing="#5b5347",
        weight=3.5,
    )
    add_sources(m, net.sources, labels={c.name: c.label for c in prof.categories})
    layer_control(m)
    legend = cls.legend_items()
    items: list[tuple[str | None, str]] = [
        (None, "street exposure per km"),
        *legend[1:],
        (None, legend[0][1]),
    ]
    items += category_items(prof, net.sources)
    add_panel(
        m,
        legend_html(
            title,
            items,
            extra=f"<div>profile {escape(prof.name)} {escape(prof.fingerprint)}</div>",
            background=background_of(m),
        ),
    )
    from routerisk.io.atomic import provenance

    add_provenance(m, provenance(profile=prof.fingerprint, network=net))
    return m
