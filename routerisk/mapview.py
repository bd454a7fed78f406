"""Self-contained HTML maps (folium) that render with no internet.

Leaflet's own files (BSD-2, bundled in ``routerisk/static/leaflet``) are inlined into the
page, and folium's default links to online scripts and styles are removed, so a page opens
offline with no network request. Online background tiles are an option, not the default.
Every text value that comes from map data is HTML-escaped before it reaches the page.
"""

from __future__ import annotations

import base64
import html
import re
from functools import cache
from importlib import resources
from pathlib import Path
from typing import Any

import folium
import geopandas as gpd
import numpy as np
from branca.element import Element, MacroElement
from jinja2 import Template

from . import CAUTION, __version__
from ._io import write_text_atomic

#: Colours of the exposure bands, lowest first (routerisk's own palette).
BAND_COLOURS = ("#3f7f6e", "#c9a227", "#d2632b", "#8e2a58", "#3b1f4a")
CATEGORY_COLOURS = {
    "school": "#b5179e", "campus": "#7209b7", "retail": "#f3722c", "commercial": "#577590",
    "transit": "#277da1", "park": "#43aa8b", "hospital": "#f94144",
}
ROUTE_COLOURS = ("#1d3557", "#2a9d8f", "#e76f51", "#6d597a", "#264653", "#bc6c25")
BACKGROUND = "#eeeae2"


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


#: Characters that html.escape leaves alone but that mean something inside a JavaScript
#: template literal, where folium puts tooltip text (`` `<div> {{ text }} </div>` ``): a
#: backtick ends the literal, ``${`` starts code and a backslash starts an escape. As HTML
#: character references they show as themselves in the page and mean nothing to the script.
_JS_LITERAL = str.maketrans({"`": "&#96;", "$": "&#36;", "\\": "&#92;"})


def escape(value: Any) -> str:
    """Return ``value`` as HTML-escaped text (None and NaN become an empty string).

    Besides ``& < > " '``, the backtick, ``$`` and the backslash become character
    references, so the text is inert inside the JavaScript template literals folium builds
    tooltips with, and shows as itself in the page.
    """
    if value is None or (isinstance(value, float) and np.isnan(value)):
        return ""
    return html.escape(str(value), quote=True).translate(_JS_LITERAL)


def new_map(bounds: tuple[float, float, float, float], *, tiles: str | None = None,
            attribution: str | None = None) -> folium.Map:
    """Return an offline folium map fitted to (west, south, east, north) in degrees.

    Parameters
    ----------
    bounds
        Area to show, in WGS 84 degrees.
    tiles
        Optional tile URL template (needs the internet when the page is opened).
    attribution
        Attribution text for ``tiles``.
    """
    w, s, e, n = bounds
    m = folium.Map(location=[(s + n) / 2, (w + e) / 2], zoom_start=14, tiles=None,
                   control_scale=True, prefer_canvas=True)
    m.default_js = []
    m.default_css = []
    js, css = _leaflet_assets()
    root = m.get_root()
    root.header.add_child(Element(f"<style>{css}</style>"), name="leaflet_css_inline")
    root.header.add_child(Element(f"<script>{js}</script>"), name="leaflet_js_inline")
    root.header.add_child(Element(
        f"<style>.leaflet-container{{background:{BACKGROUND};}}"
        ".rr-panel{font:13px/1.35 system-ui,sans-serif;background:#fff;padding:8px 10px;"
        "border-radius:4px;box-shadow:0 1px 4px rgba(0,0,0,.35);max-width:320px}"
        ".rr-panel h4{margin:0 0 4px;font-size:14px}.rr-swatch{display:inline-block;"
        "width:14px;height:10px;margin-right:6px;vertical-align:middle}"
        ".rr-caution{font-size:11px;color:#5a3b00;background:#fff6df;border-left:3px solid "
        "#c9a227;padding:4px 6px;margin-top:6px}</style>"), name="routerisk_css")
    if tiles:
        folium.TileLayer(tiles=tiles, attr=attribution or "map tiles", name="background tiles",
                         overlay=False).add_to(m)
    m.fit_bounds([[s, w], [n, e]])
    return m


class _Panel(MacroElement):
    """A fixed HTML panel on the map (legend, caution, side list)."""

    _template = Template("""
{% macro script(this, kwargs) %}
var {{ this.get_name() }} = L.control({position: {{ this.position|tojson }}});
{{ this.get_name() }}.onAdd = function () {
    var div = L.DomUtil.create('div', 'rr-panel');
    div.id = {{ this.dom_id|tojson }};
    div.innerHTML = {{ this.html|tojson }};
    L.DomEvent.disableClickPropagation(div);
    L.DomEvent.disableScrollPropagation(div);
    return div;
};
{{ this.get_name() }}.addTo({{ this._parent.get_name() }});
{% endmacro %}
""")

    def __init__(self, html_text: str, *, position: str = "bottomright",
                 dom_id: str = "rr-legend") -> None:
        super().__init__()
        self._name = "RoutePanel"
        self.html = html_text
        self.position = position
        self.dom_id = dom_id


def add_panel(m: folium.Map, html_text: str, *, position: str = "bottomright",
              dom_id: str = "rr-legend") -> None:
    """Add a fixed panel whose ``html_text`` the caller has built from escaped parts."""
    m.add_child(_Panel(html_text, position=position, dom_id=dom_id))


def add_provenance(m: folium.Map, prov: dict[str, Any]) -> None:
    """Record the provenance (tool version, profile, input checksums) in the page header."""
    from ._io import dumps_json

    text = dumps_json(prov).replace("\n", " ")
    m.get_root().header.add_child(Element(
        f'<meta name="routerisk-provenance" content="{escape(text)}">'),
        name="routerisk_provenance")


def legend_html(title: str, items: list[tuple[str, str]], *, extra: str = "") -> str:
    """Return legend HTML: a title, colour swatches with labels, and the caution."""
    rows = "".join(
        f'<div><span class="rr-swatch" style="background:{escape(c)}"></span>{escape(t)}</div>'
        for c, t in items)
    return (f"<h4>{escape(title)}</h4>{rows}{extra}"
            f'<div class="rr-caution">{escape(CAUTION)}</div>'
            f'<div style="font-size:10px;color:#777;margin-top:4px">routerisk {__version__}; '
            "map data: OpenStreetMap contributors, ODbL</div>")


def band_colour(profile, band: str) -> str:
    """Return the colour of a band name."""
    names = [b.name for b in profile.bands]
    i = names.index(band) if band in names else 0
    return BAND_COLOURS[min(i, len(BAND_COLOURS) - 1)]


def _popup_fields(gdf: gpd.GeoDataFrame, fields: dict[str, str]) -> gpd.GeoDataFrame:
    out = gdf[[*fields, "geometry"]].copy()
    for col in fields:
        if out[col].dtype.kind == "f":
            out[col] = out[col].map(lambda v: f"{v:.3f}")
        out[col] = out[col].map(escape)
    return out


def add_lines(m: folium.Map | folium.FeatureGroup, gdf: gpd.GeoDataFrame, *, name: str,
              colour_col: str, fields: dict[str, str], weight: float = 3.0,
              show: bool = True, opacity: float = 0.9) -> folium.FeatureGroup:
    """Add a switchable layer of lines coloured by ``colour_col`` with escaped popups."""
    layer = folium.FeatureGroup(name=escape(name), show=show)
    data = _popup_fields(gdf, fields)
    data["_colour"] = gdf[colour_col].to_numpy()
    data = data.to_crs("EPSG:4326")
    folium.GeoJson(
        data.to_json(drop_id=True),
        style_function=lambda f: {"color": f["properties"]["_colour"], "weight": weight,
                                  "opacity": opacity},
        popup=folium.GeoJsonPopup(fields=list(fields),
                                  aliases=[escape(a) for a in fields.values()],
                                  labels=True) if fields else None,
        name=escape(name),
    ).add_to(layer)
    layer.add_to(m)
    return layer


def add_sources(m: folium.Map, sources: gpd.GeoDataFrame, *, labels: dict[str, str]) -> None:
    """Add one switchable layer per source category (polygons and points)."""
    if len(sources) == 0:
        return
    src = sources.to_crs("EPSG:4326")
    for cat in sorted(src["category"].unique()):
        part = src[src["category"] == cat]
        colour = CATEGORY_COLOURS.get(cat, "#555555")
        layer = folium.FeatureGroup(name=escape(f"sources: {labels.get(cat, cat)}"), show=True)
        polys = part[part.geom_type.isin(["Polygon", "MultiPolygon"])]
        if len(polys):
            data = polys[["name", "geometry"]].copy()
            data["name"] = data["name"].map(escape)
            data["kind"] = escape(labels.get(cat, cat))
            folium.GeoJson(
                data.to_json(drop_id=True),
                style_function=lambda f, c=colour: {"color": c, "weight": 1, "fillColor": c,
                                                    "fillOpacity": 0.25},
                tooltip=folium.GeoJsonTooltip(fields=["kind", "name"], aliases=["", ""],
                                              labels=False),
            ).add_to(layer)
        pts = part[~part.geom_type.isin(["Polygon", "MultiPolygon"])]
        for geom, nm in zip(pts.geometry, pts["name"], strict=True):
            c = geom.representative_point()
            folium.CircleMarker(
                [c.y, c.x], radius=4, color=colour, fill=True, fill_opacity=0.8, weight=1,
                tooltip=escape(f"{labels.get(cat, cat)}: {nm}" if nm else labels.get(cat, cat)),
            ).add_to(layer)
        layer.add_to(m)


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


def network_map(net, *, tiles: str | None = None, title: str = "Pedestrian exposure of the "
                "road network") -> folium.Map:
    """Return the map of a tagged network: edges by exposure band, sources, legend, caution."""
    prof = net.profile
    edges = net.edges.reset_index()
    # One line per street segment: keep one direction of two-way pairs for drawing.
    edges = edges.sort_values(["exposure_km"], ascending=False, kind="stable")
    key = edges.apply(lambda r: (min(r["u"], r["v"]), max(r["u"], r["v"])), axis=1)
    edges = edges.loc[~key.duplicated()]
    edges["_band_colour"] = edges["band"].map(lambda b: band_colour(prof, b))
    edges["street"] = edges["name"].fillna("")
    fields = {"street": "street", "highway": "road class", "band": "exposure band",
              "exposure_km": "exposure per km", "speed_kph": "speed km/h",
              "crossings": "crossings"}
    for c in prof.categories:
        fields[f"exp_{c.name}"] = f"near {c.label.lower()}"
    ll = net.edges.to_crs("EPSG:4326").total_bounds
    m = new_map(tuple(ll), tiles=tiles)
    add_lines(m, edges, name="streets by exposure band", colour_col="_band_colour",
              fields=fields)
    add_sources(m, net.sources, labels={c.name: c.label for c in prof.categories})
    folium.LayerControl(collapsed=False).add_to(m)
    items = [(band_colour(prof, b.name), f"{b.name} (from {b.lower:g} per km)")
             for b in prof.bands]
    items += [(CATEGORY_COLOURS.get(c.name, "#555"), c.label) for c in prof.categories]
    add_panel(m, legend_html(title, items, extra=f"<div>profile {escape(prof.name)} "
                                                 f"{escape(prof.fingerprint)}</div>"))
    from ._io import provenance

    add_provenance(m, provenance(profile=prof.fingerprint, network=net))
    return m
