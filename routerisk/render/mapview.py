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
from dataclasses import dataclass
from functools import cache
from importlib import resources
from pathlib import Path
from typing import Any

import folium
import geopandas as gpd
import numpy as np
import shapely
from branca.element import Element, MacroElement
from folium.plugins import MarkerCluster
from jinja2 import Template

from routerisk import CAUTION, __version__
from routerisk.io.atomic import write_text_atomic

#: The sequential ramp of exposure classes, lowest first (routerisk's own: straw, amber,
#: brick, plum, aubergine; lightness falls steadily, so the order reads without hue). A map
#: with n classes takes n colours spread evenly along it. docs/colour_check.md records how
#: the colours stay apart for deuteranopia and protanopia (scripts/colour_check.py).
BAND_RAMP = ("#ead06c", "#df9139", "#c4553a", "#8d2b52", "#471c45")
BAND_COLOURS = BAND_RAMP
#: Planned routes and alternatives: each has its own dash pattern and a colour from a
#: qualitative set kept away from the ramp (ink, cyan, violet, olive, navy, grey), picked so
#: that every pair stays apart for deuteranopia and protanopia too (docs/colour_check.md).
ROUTE_COLOURS = ("#111111", "#00a3c4", "#7a4fc4", "#6b7a1a", "#274060", "#808080")
ROUTE_DASHES = (None, "10 6", "2 6", "14 5 3 5", "6 3", "1 4 8 4")
#: Exposure categories are told apart by the point symbol; every symbol is drawn in ink.
CATEGORY_SHAPES = {
    "school": "triangle",
    "campus": "square",
    "retail": "circle",
    "commercial": "diamond",
    "transit": "plus",
    "park": "hexagon",
    "hospital": "cross",
}
SYMBOL_INK = "#23303c"
CATEGORY_COLOURS = {c: SYMBOL_INK for c in CATEGORY_SHAPES}
#: Rule zones (wide translucent band under the streets) and rule-break markers.
RULE_ZONE_COLOUR = "#2f7fd0"
RULE_BREAK_COLOUR = "#111111"
#: Light background drawn from the extract (docs: routerisk.network.context).
BACKGROUND = "#e6e3db"
CONTEXT_STYLE = {
    "park": {"color": "#b9d3a4", "fillColor": "#c9dfb6", "weight": 0.5, "fillOpacity": 1.0},
    "water": {"color": "#8fb8d6", "fillColor": "#a9cbe3", "weight": 1.5, "fillOpacity": 1.0},
    "building": {"color": "#cbc3b5", "fillColor": "#d7d0c4", "weight": 0.5, "fillOpacity": 1.0},
}
STREET_COLOUR = "#ffffff"
_MAJOR = {
    "motorway",
    "trunk",
    "primary",
    "secondary",
    "motorway_link",
    "trunk_link",
    "primary_link",
    "secondary_link",
}
_MINOR_PATHS = {
    "footway",
    "path",
    "cycleway",
    "steps",
    "pedestrian",
    "bridleway",
    "track",
    "corridor",
    "service",
}


def ramp(n: int) -> list[str]:
    """Return ``n`` colours spread evenly along :data:`BAND_RAMP` (interpolated in RGB)."""
    if n <= 0:
        return []
    anchors = np.array([[int(c[i : i + 2], 16) for i in (1, 3, 5)] for c in BAND_RAMP], float)
    pos = np.linspace(0, len(anchors) - 1, n) if n > 1 else np.array([0.0])
    out = []
    for p in pos:
        i = min(int(p), len(anchors) - 2)
        t = p - i
        rgb = anchors[i] * (1 - t) + anchors[i + 1] * t
        out.append("#" + "".join(f"{int(round(v)):02x}" for v in rgb))
    return out


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


@dataclass(frozen=True)
class Classes:
    """Classes of a value drawn with the ramp: names, lower bounds, how they were set."""

    names: tuple[str, ...]
    lowers: tuple[float, ...]
    mode: str  # "fixed" (the profile's bands) or "quantiles" (of the values shown)
    unit: str = "per km"

    @property
    def colours(self) -> list[str]:
        """Return one ramp colour per class."""
        return ramp(len(self.names))

    def index(self, values: Any) -> np.ndarray:
        """Return the class number of each value (0 = lowest)."""
        v = np.asarray(values, dtype=float)
        return np.searchsorted(np.asarray(self.lowers[1:], float), v, side="right")

    def colour_of(self, values: Any) -> list[str]:
        """Return the ramp colour of each value."""
        cols = self.colours
        return [cols[i] for i in self.index(values)]

    def legend_items(self) -> list[tuple[str | None, str]]:
        """Return legend rows: every class with its thresholds."""
        rows: list[tuple[str | None, str]] = []
        how = (
            "the profile's fixed bands"
            if self.mode == "fixed"
            else "quantiles of street length on this map"
        )
        rows.append((None, f"classes: {how}"))
        for i, (name, colour) in enumerate(zip(self.names, self.colours, strict=True)):
            lo = self.lowers[i]
            hi = self.lowers[i + 1] if i + 1 < len(self.lowers) else None
            span = f"{lo:.3g} to {hi:.3g}" if hi is not None else f"{lo:.3g} and above"
            rows.append((line_swatch(colour, width=5), f"{name}: {span} {self.unit}"))
        return rows


BAND_MODES = ("fixed", "quantiles")


def classes_for(
    profile: Any, values: Any, *, mode: str = "fixed", weights: Any = None, unit: str = "per km"
) -> Classes:
    """Return the classes for ``values``: the profile's bands, or area-relative quantiles.

    ``fixed`` uses the lower bounds of the profile's bands (the same on every map, so areas
    compare). ``quantiles`` cuts ``values`` into as many classes as the profile has bands,
    each holding about the same share of ``weights`` (street length; equal weights when
    None); ties merge classes, so a map may show fewer.
    """
    if mode not in BAND_MODES:
        from routerisk.errors import OptionError

        raise OptionError(f"must be one of {', '.join(BAND_MODES)}, got {mode!r}", field="--bands")
    if mode == "fixed":
        return Classes(
            tuple(b.name for b in profile.bands),
            tuple(float(b.lower) for b in profile.bands),
            "fixed",
            unit,
        )
    v = np.asarray(values, dtype=float)
    n = len(profile.bands)
    if len(v) == 0:
        return Classes(("all",), (0.0,), "quantiles", unit)
    w = np.ones_like(v) if weights is None else np.asarray(weights, dtype=float)
    order = np.argsort(v, kind="stable")
    cum = np.cumsum(w[order])
    cum = cum / cum[-1]
    cuts = []
    for k in range(1, n):
        cuts.append(float(v[order][min(np.searchsorted(cum, k / n, side="left"), len(v) - 1)]))
    lowers = [float(min(0.0, v.min()))]
    for c in cuts:
        if c > lowers[-1] + 1e-12:
            lowers.append(round(c, 6))
    m = len(lowers)
    names = (
        tuple(
            f"class {i + 1} of {m}"
            + (" (lowest)" if i == 0 else " (highest)" if i == m - 1 else "")
            for i in range(m)
        )
        if m > 1
        else ("all",)
    )
    return Classes(names, tuple(lowers), "quantiles", unit)


# ------------------------------------------------------------------------- tile sources

_TILE_FILE = re.compile(r"^(\d+)/(\d+)/(\d+)\.(png|jpg|jpeg|webp)$")
MAX_EMBEDDED_TILES = 1500


@dataclass(frozen=True)
class TileSource:
    """A background tile source: an online URL template, a folder of tiles or MBTiles."""

    kind: str  # "url" | "folder" | "mbtiles"
    url: str  # Leaflet URL template (file URL for a folder); the path for MBTiles
    attribution: str = "map tiles"
    min_zoom: int = 0
    max_zoom: int = 19


def tile_source(spec: str | Path | TileSource | None) -> TileSource | None:
    """Return the tile source named by ``spec`` (``--tiles``), checked; None stays None.

    ``spec`` is a URL template with ``{z}``, ``{x}`` and ``{y}`` (needs the internet when
    the page is opened), a folder holding ``z/x/y.png`` (or .jpg, .webp) tiles (the page
    links them as file URLs, so keep the folder beside it), or an ``.mbtiles`` file (the
    tiles inside the map's view are embedded in the page).
    """
    from routerisk.errors import InputFileError, OptionError

    if spec is None or isinstance(spec, TileSource):
        return spec
    text = str(spec)
    if re.match(r"^https?://", text):
        if not all(k in text for k in ("{z}", "{x}", "{y}")):
            raise OptionError("a tile URL must contain {z}, {x} and {y}", field="--tiles")
        return TileSource("url", text)
    p = Path(text).expanduser()
    if not p.exists():
        raise InputFileError(
            "tile source not found (give an .mbtiles file, a folder of "
            "z/x/y tiles or a URL template)",
            path=p,
            field="--tiles",
        )
    if p.is_dir():
        found = sorted(q.relative_to(p).as_posix() for q in p.glob("*/*/*.*"))
        tiles = [t for t in found if _TILE_FILE.match(t)]
        if not tiles:
            raise InputFileError(
                "no z/x/y tiles (e.g. 14/8190/5460.png) in this folder", path=p, field="--tiles"
            )
        zooms = sorted({int(t.split("/")[0]) for t in tiles})
        ext = _TILE_FILE.match(tiles[0]).group(4)  # type: ignore[union-attr]
        return TileSource(
            "folder",
            p.resolve().as_uri() + "/{z}/{x}/{y}." + ext,
            "local tiles",
            zooms[0],
            zooms[-1],
        )
    return _mbtiles_source(p)


def _mbtiles_source(p: Path) -> TileSource:
    import sqlite3

    from routerisk.errors import InputFileError

    try:
        with sqlite3.connect(f"file:{p}?mode=ro", uri=True) as db:
            meta = dict(db.execute("SELECT name, value FROM metadata").fetchall())
            zmin, zmax = db.execute("SELECT MIN(zoom_level), MAX(zoom_level) FROM tiles").fetchone()
    except sqlite3.DatabaseError as exc:
        raise InputFileError(f"not an MBTiles file ({exc})", path=p, field="--tiles") from exc
    if zmin is None:
        raise InputFileError("the MBTiles file holds no tiles", path=p, field="--tiles")
    attribution = str(meta.get("attribution") or "local tiles")
    return TileSource("mbtiles", str(p), attribution, int(zmin), int(zmax))


def _tile_range(bounds: tuple[float, float, float, float], z: int) -> tuple[int, int, int, int]:
    """Return x0, x1, y0, y1 (XYZ scheme) of the tiles covering ``bounds`` at zoom ``z``."""
    import math

    w, s, e, n = bounds
    k = 2**z

    def tx(lon: float) -> int:
        return min(k - 1, max(0, int((lon + 180.0) / 360.0 * k)))

    def ty(lat: float) -> int:
        r = math.radians(max(-85.05, min(85.05, lat)))
        return min(k - 1, max(0, int((1 - math.asinh(math.tan(r)) / math.pi) / 2 * k)))

    return tx(w), tx(e), ty(n), ty(s)


def _embedded_tiles(src: TileSource, bounds: tuple[float, float, float, float]) -> dict[str, str]:
    """Return ``z/x/y`` -> data URI of the MBTiles tiles covering ``bounds``.

    Zoom levels are added from the coarsest up while the total stays within
    :data:`MAX_EMBEDDED_TILES`. MBTiles rows count y from the south (TMS).
    """
    import sqlite3

    from routerisk.errors import InputFileError

    out: dict[str, str] = {}
    with sqlite3.connect(f"file:{src.url}?mode=ro", uri=True) as db:
        for z in range(src.min_zoom, src.max_zoom + 1):
            x0, x1, y0, y1 = _tile_range(bounds, z)
            if (x1 - x0 + 1) * (y1 - y0 + 1) + len(out) > MAX_EMBEDDED_TILES:
                break
            rows = db.execute(
                "SELECT tile_column, tile_row, tile_data FROM tiles WHERE zoom_level = ? AND "
                "tile_column BETWEEN ? AND ? AND tile_row BETWEEN ? AND ? "
                "ORDER BY tile_column, tile_row",
                (z, x0, x1, 2**z - 1 - y1, 2**z - 1 - y0),
            ).fetchall()
            for x, row, data in rows:
                kind = (
                    "jpeg"
                    if bytes(data[:3]) == b"\xff\xd8\xff"
                    else ("webp" if bytes(data[8:12]) == b"WEBP" else "png")
                )
                out[f"{z}/{x}/{2**z - 1 - row}"] = (
                    f"data:image/{kind};base64,{base64.b64encode(bytes(data)).decode()}"
                )
    if not out:
        raise InputFileError(
            "the MBTiles file holds no tile inside the map's view", path=src.url, field="--tiles"
        )
    return out


class _EmbeddedTiles(MacroElement):
    """A Leaflet tile layer whose tiles are data URIs held in the page."""

    _template = Template("""
{% macro script(this, kwargs) %}
var {{ this.get_name() }}_data = {{ this.tiles|tojson }};
var {{ this.get_name() }} = new (L.TileLayer.extend({
    getTileUrl: function (c) {
        return {{ this.get_name() }}_data[c.z + '/' + c.x + '/' + c.y] ||
            'data:image/gif;base64,R0lGODlhAQABAAAAACH5BAEKAAEALAAAAAABAAEAAAICTAEAOw==';
    }
}))('', {attribution: {{ this.attribution|tojson }}, minZoom: 0, maxZoom: 20,
         maxNativeZoom: {{ this.max_native }}});
{{ this.get_name() }}.addTo({{ this._parent.get_name() }});
{% endmacro %}
""")

    def __init__(self, tiles: dict[str, str], attribution: str) -> None:
        super().__init__()
        self._name = "EmbeddedTiles"
        self.tiles = dict(sorted(tiles.items()))
        self.attribution = attribution
        self.max_native = max(int(k.split("/")[0]) for k in tiles)


def _add_tiles(m: folium.Map, src: TileSource, bounds: tuple[float, float, float, float]) -> None:
    if src.kind == "mbtiles":
        m.add_child(_EmbeddedTiles(_embedded_tiles(src, bounds), escape(src.attribution)))
        return
    folium.TileLayer(
        tiles=src.url,
        attr=escape(src.attribution),
        name="background tiles",
        overlay=False,
        min_zoom=0,
        max_zoom=20,
        max_native_zoom=src.max_zoom,
    ).add_to(m)


# ------------------------------------------------------------------------------- the map

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


def add_context(m: folium.Map, context: Any, bounds: tuple[float, float, float, float]) -> None:
    """Draw the light background (parks, water, buildings, streets with names) of the view."""
    from routerisk.network import context as _context

    ctx = context if isinstance(context, gpd.GeoDataFrame) else _context.for_view(context, bounds)
    if isinstance(context, gpd.GeoDataFrame):
        ctx = ctx.to_crs("EPSG:4326")
    if len(ctx) == 0:
        return
    m._rr_background = set(ctx["kind"])  # type: ignore[attr-defined]
    layer = folium.FeatureGroup(name="background: streets, water, parks, buildings", show=True)
    for kind in ("park", "water", "building"):
        part = ctx[ctx["kind"] == kind]
        if len(part) == 0:
            continue
        style = dict(CONTEXT_STYLE[kind])
        lines = part.geom_type.isin(["LineString", "MultiLineString"])
        data = part[["geometry"]].copy()
        data["_w"] = np.where(lines, 3.0 if kind == "water" else 1.0, style["weight"])
        folium.GeoJson(
            data.to_json(drop_id=True),
            name=kind,
            interactive=False,
            style_function=lambda f, st=style: {**st, "weight": f["properties"]["_w"]},
        ).add_to(layer)
    streets = ctx[ctx["kind"] == "street"].copy()
    if len(streets):
        hw = streets["highway"].astype(str)
        streets["_w"] = np.where(hw.isin(_MAJOR), 5.0, np.where(hw.isin(_MINOR_PATHS), 1.2, 3.0))
        streets["name"] = streets["name"].fillna("").astype(str).map(escape)
        named = streets["name"] != ""
        for part, tip in ((streets[~named], False), (streets[named], True)):
            if len(part) == 0:
                continue
            gj = folium.GeoJson(
                part[["name", "_w", "geometry"]].to_json(drop_id=True),
                name="streets",
                style_function=lambda f: {
                    "color": STREET_COLOUR,
                    "weight": f["properties"]["_w"],
                    "opacity": 1.0,
                },
                tooltip=folium.GeoJsonTooltip(fields=["name"], labels=False, sticky=True)
                if tip
                else None,
                interactive=tip,
            ).add_to(layer)
            if tip:
                layer.add_to(m)
                m.add_child(_StreetLabels(gj, layer))
    layer.add_to(m)


#: From this zoom on, street names are written along the streets (below it: on hover).
LABELS_FROM_ZOOM = 17


class _StreetLabels(MacroElement):
    """Write each named background street's name on it from :data:`LABELS_FROM_ZOOM` on.

    The names are the escaped text of the GeoJSON properties, shown as tooltip content.
    """

    _template = Template("""
{% macro script(this, kwargs) %}
(function () {
    var map = {{ this._parent.get_name() }}, streets = {{ this.streets.get_name() }},
        group = {{ this.group.get_name() }};
    function update() {
        var on = map.getZoom() >= {{ this.zoom }} && map.hasLayer(group);
        streets.eachLayer(function (l) {
            var name = l.feature && l.feature.properties.name;
            if (!name) { return; }
            if (on && !l._rrLabel) {
                l._rrLabel = L.tooltip({permanent: true, direction: 'center',
                                        className: 'rr-street-label', interactive: false})
                    .setContent(name).setLatLng(l.getCenter());
                map.addLayer(l._rrLabel);
            } else if (!on && l._rrLabel) {
                map.removeLayer(l._rrLabel);
                l._rrLabel = null;
            }
        });
    }
    map.on('zoomend overlayadd overlayremove', update);
    update();
})();
{% endmacro %}
""")

    def __init__(self, streets: folium.GeoJson, group: folium.FeatureGroup) -> None:
        super().__init__()
        self._name = "StreetLabels"
        self.streets = streets
        self.group = group
        self.zoom = LABELS_FROM_ZOOM


# ----------------------------------------------------------------------------- legends


def line_swatch(
    colour: str,
    *,
    dash: str | None = None,
    width: float = 4.0,
    opacity: float = 1.0,
    casing: str | None = None,
) -> str:
    """Return an inline SVG of a line as it is drawn on the map."""
    c = escape(colour)
    d = f' stroke-dasharray="{escape(dash)}"' if dash else ""
    under = (
        (
            f'<line x1="1" y1="7" x2="33" y2="7" stroke="{escape(casing)}" '
            f'stroke-width="{width + 2:g}"/>'
        )
        if casing
        else ""
    )
    return (
        f'<svg width="34" height="14" aria-hidden="true">{under}<line x1="1" y1="7" '
        f'x2="33" y2="7" stroke="{c}" stroke-width="{width:g}" '
        f'stroke-opacity="{opacity:g}"{d}/></svg>'
    )


def area_swatch(
    fill: str, *, stroke: str | None = None, dash: str | None = None, opacity: float = 1.0
) -> str:
    """Return an inline SVG of a filled area."""
    d = f' stroke-dasharray="{escape(dash)}"' if dash else ""
    st = f' stroke="{escape(stroke)}" stroke-width="1.5"' if stroke else ""
    return (
        f'<svg width="34" height="14" aria-hidden="true"><rect x="2" y="1" width="30" '
        f'height="12" fill="{escape(fill)}" fill-opacity="{opacity:g}"{st}{d}/></svg>'
    )


_SHAPES = {
    "triangle": '<polygon points="7,1 13,12.5 1,12.5"/>',
    "square": '<rect x="2" y="2" width="10" height="10"/>',
    "circle": '<circle cx="7" cy="7" r="5.2"/>',
    "diamond": '<polygon points="7,0.8 13.2,7 7,13.2 0.8,7"/>',
    "plus": '<polygon points="5,1 9,1 9,5 13,5 13,9 9,9 9,13 5,13 5,9 1,9 1,5 5,5"/>',
    "hexagon": '<polygon points="7,1 12.2,4 12.2,10 7,13 1.8,10 1.8,4"/>',
    "cross": '<polygon points="2,4 4,2 7,5 10,2 12,4 9,7 12,10 10,12 7,9 4,12 2,10 5,7"/>',
    "star": '<polygon points="7,0.8 8.8,5 13.2,5.2 9.8,8.2 11,12.8 7,10.3 3,12.8 4.2,8.2 '
    '0.8,5.2 5.2,5"/>',
    "ring": '<circle cx="7" cy="7" r="5" fill="#ffffff" stroke-width="2.6"/>',
}


def symbol_svg(shape: str, *, ink: str = SYMBOL_INK, size: int = 14) -> str:
    """Return the inline SVG of a point symbol (white outline, so it reads on any colour)."""
    body = _SHAPES.get(shape, _SHAPES["star"])
    return (
        f'<svg width="{size}" height="{size}" viewBox="0 0 14 14" aria-hidden="true">'
        f'<g fill="{escape(ink)}" stroke="#ffffff" stroke-width="1.1">{body}</g></svg>'
    )


def category_shape(name: str) -> str:
    """Return the symbol of a category (a star for categories without their own)."""
    return CATEGORY_SHAPES.get(name, "star")


def rule_break_svg(size: int = 18) -> str:
    """Return the rule-break marker: a white disc, black ring and an exclamation mark."""
    return (
        f'<svg width="{size}" height="{size}" viewBox="0 0 18 18" aria-hidden="true">'
        '<circle cx="9" cy="9" r="7.5" fill="#ffffff" stroke="#111" stroke-width="2.2"/>'
        '<rect x="8" y="4" width="2" height="6.5" fill="#111"/>'
        '<rect x="8" y="12" width="2" height="2" fill="#111"/></svg>'
    )


def background_items(kinds: Any = None) -> list[tuple[str | None, str]]:
    """Return the legend rows of the light background layer (only ``kinds`` when given)."""
    rows = {
        "street": (
            line_swatch(STREET_COLOUR, width=4, casing="#bdb7ab"),
            "street (name on hover; written from zoom 17)",
        ),
        "water": (area_swatch(CONTEXT_STYLE["water"]["fillColor"]), "water"),
        "park": (area_swatch(CONTEXT_STYLE["park"]["fillColor"]), "park, green space"),
        "building": (area_swatch(CONTEXT_STYLE["building"]["fillColor"]), "building"),
    }
    keep = [rows[k] for k in ("street", "water", "park", "building") if kinds is None or k in kinds]
    return [(None, "background (same OSM extract)"), *keep] if keep else []


def background_of(m: folium.Map) -> set[str]:
    """Return the kinds of background :func:`add_context` drew on ``m``."""
    return set(getattr(m, "_rr_background", set()))


def category_items(
    profile: Any, sources: gpd.GeoDataFrame | None = None
) -> list[tuple[str | None, str]]:
    """Return the legend rows of the exposure sources drawn (one symbol per category).

    With ``sources`` only the categories present in it are listed, and the grounds row only
    when some source is an area.
    """
    present = None if sources is None else set(sources["category"])
    cats = [c for c in profile.categories if present is None or c.name in present]
    if not cats:
        return []
    rows: list[tuple[str | None, str]] = [(None, "exposure sources (grouped when many)")]
    rows += [(symbol_svg(category_shape(c.name)), c.label) for c in cats]
    if sources is None or sources.geom_type.isin(["Polygon", "MultiPolygon"]).any():
        rows.append(
            (
                area_swatch("#ffffff", stroke=SYMBOL_INK, dash="3 2", opacity=0.3),
                "source grounds (outline)",
            )
        )
    return rows


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

    def __init__(
        self, html_text: str, *, position: str = "bottomright", dom_id: str = "rr-legend"
    ) -> None:
        super().__init__()
        self._name = "RoutePanel"
        self.html = html_text
        self.position = position
        self.dom_id = dom_id


def add_panel(
    m: folium.Map, html_text: str, *, position: str = "bottomright", dom_id: str = "rr-legend"
) -> None:
    """Add a fixed panel whose ``html_text`` the caller has built from escaped parts."""
    m.add_child(_Panel(html_text, position=position, dom_id=dom_id))


def add_provenance(m: folium.Map, prov: dict[str, Any]) -> None:
    """Record the provenance (tool version, profile, input checksums) in the page header."""
    from routerisk.io.atomic import dumps_json

    text = dumps_json(prov).replace("\n", " ")
    m.get_root().header.add_child(
        Element(f'<meta name="routerisk-provenance" content="{escape(text)}">'),
        name="routerisk_provenance",
    )


def legend_html(
    title: str, items: list[tuple[str | None, str]], *, extra: str = "", background: Any = True
) -> str:
    """Return a collapsible legend: a title, a row per drawn thing, and the caution.

    Each item is ``(swatch, label)``: a colour (drawn as a line), an SVG swatch from
    :func:`line_swatch`, :func:`area_swatch`, :func:`symbol_svg`, or None for a sub-heading.
    ``background`` adds the rows of the light background layer: True for all its kinds, or
    the kinds drawn (:func:`background_of`); False or empty for none.
    """
    rows = []
    bg = [] if background is False else background_items(None if background is True else background)
    for swatch, text in [*items, *bg]:
        if swatch is None:
            rows.append(f"<h5>{escape(text)}</h5>")
            continue
        sw = swatch if swatch.startswith("<") else line_swatch(swatch)
        rows.append(f'<div class="rr-row">{sw}<span>{escape(text)}</span></div>')
    return (
        f"<details open><summary>{escape(title)}</summary>{''.join(rows)}{extra}"
        f'<div class="rr-caution">{escape(CAUTION)}</div>'
        f'<div style="font-size:10px;color:#777;margin-top:4px">routerisk {__version__}; '
        "map data: OpenStreetMap contributors, ODbL</div></details>"
    )


def collapsible(title: str, body: str, *, open_: bool = True) -> str:
    """Return ``body`` (escaped parts) in a panel section that folds up under ``title``."""
    return f"<details{' open' if open_ else ''}><summary>{escape(title)}</summary>{body}</details>"


def band_colour(profile: Any, band: str) -> str:
    """Return the ramp colour of a band name of ``profile`` (fixed classes)."""
    names = [b.name for b in profile.bands]
    i = names.index(band) if band in names else 0
    return ramp(len(names))[i]


def _popup_fields(gdf: gpd.GeoDataFrame, fields: dict[str, str]) -> gpd.GeoDataFrame:
    out = gdf[[*fields, "geometry"]].copy()
    for col in fields:
        if out[col].dtype.kind == "f":
            out[col] = out[col].map(lambda v: f"{v:.3f}")
        out[col] = out[col].map(escape)
    return out


def add_lines(
    m: folium.Map | folium.FeatureGroup,
    gdf: gpd.GeoDataFrame,
    *,
    name: str,
    colour_col: str,
    fields: dict[str, str],
    weight: float = 3.0,
    show: bool = True,
    opacity: float = 0.9,
    dash: str | None = None,
    casing: str | None = None,
) -> folium.FeatureGroup:
    """Add a switchable layer of lines coloured by ``colour_col`` with escaped popups.

    ``dash`` is an SVG dash pattern for every line; ``casing`` draws a thin darker line
    under each (so light ramp colours stay visible on the white streets).
    """
    layer = folium.FeatureGroup(name=escape(name), show=show)
    data = _popup_fields(gdf, fields)
    data["_colour"] = gdf[colour_col].to_numpy()
    data = data.to_crs("EPSG:4326")
    data["geometry"] = shapely.set_precision(data.geometry.to_numpy(), 1e-7)
    if casing:
        folium.GeoJson(
            data[["geometry"]].to_json(drop_id=True),
            interactive=False,
            style_function=lambda f: {"color": casing, "weight": weight + 2.5, "opacity": opacity},
        ).add_to(layer)
    style: dict[str, Any] = {"weight": weight, "opacity": opacity}
    if dash:
        style["dashArray"] = dash
    folium.GeoJson(
        data.to_json(drop_id=True),
        style_function=lambda f: {"color": f["properties"]["_colour"], **style},
        popup=folium.GeoJsonPopup(
            fields=list(fields), aliases=[escape(a) for a in fields.values()], labels=True
        )
        if fields
        else None,
        interactive=bool(fields),
        name=escape(name),
    ).add_to(layer)
    layer.add_to(m)
    return layer


class _Cluster(MarkerCluster):
    """folium's MarkerCluster with its scripts inlined from the bundled copy (no CDN)."""

    default_js: list[tuple[str, str]] = []
    default_css: list[tuple[str, str]] = []


@cache
def _cluster_assets() -> str:
    base = resources.files("routerisk") / "static" / "markercluster"
    js = (base / "leaflet.markercluster.js").read_text(encoding="utf-8")
    css = "".join(
        (base / n).read_text(encoding="utf-8")
        for n in ("MarkerCluster.css", "MarkerCluster.Default.css")
    )
    return f"<style>{css}</style><script>{js}</script>"


#: Point sources are grouped into counted discs below this zoom (one group per category).
CLUSTER_UNTIL_ZOOM = 17


def add_sources(m: folium.Map, sources: gpd.GeoDataFrame, *, labels: dict[str, str]) -> None:
    """Add one switchable layer per source category: grounds as outlines, points as symbols.

    Points (and the symbol at the middle of each ground) of one category are grouped into a
    counted disc where they crowd at low zoom (Leaflet.markercluster, bundled), so the many
    shops of a city centre do not bury the routes.
    """
    if len(sources) == 0:
        return
    m.get_root().header.add_child(Element(_cluster_assets()), name="markercluster_inline")
    src = sources.to_crs("EPSG:4326")
    for cat in sorted(src["category"].unique()):
        part = src[src["category"] == cat]
        shape = category_shape(cat)
        label = labels.get(cat, cat)
        layer = folium.FeatureGroup(name=escape(f"sources: {label}"), show=True)
        polys = part[part.geom_type.isin(["Polygon", "MultiPolygon"])]
        if len(polys):
            data = polys[["name", "geometry"]].copy()
            data["name"] = data["name"].map(escape)
            data["kind"] = escape(label)
            folium.GeoJson(
                data.to_json(drop_id=True),
                style_function=lambda f: {
                    "color": SYMBOL_INK,
                    "weight": 1.2,
                    "dashArray": "3 2",
                    "fillColor": "#ffffff",
                    "fillOpacity": 0.3,
                },
                tooltip=folium.GeoJsonTooltip(
                    fields=["kind", "name"], aliases=["", ""], labels=False
                ),
            ).add_to(layer)
        icon_js = symbol_svg(shape, size=12).replace("'", "\\'")
        cluster = _Cluster(
            options={
                "maxClusterRadius": 40,
                "disableClusteringAtZoom": CLUSTER_UNTIL_ZOOM,
                "showCoverageOnHover": False,
                "spiderfyOnMaxZoom": False,
            },
            icon_create_function=(
                "function (c) { return L.divIcon({className: 'rr-symbol', iconSize: [30, 30],"
                " html: '<div class=\"rr-cluster\">' + c.getChildCount() + '"
                f"{icon_js}</div>'}}); }}"
            ),
        )
        svg = symbol_svg(shape)
        for geom, nm in zip(part.geometry, part["name"], strict=True):
            c = geom.representative_point()
            text = f"{label}: {nm}" if nm else label
            folium.Marker(
                [round(c.y, 7), round(c.x, 7)],
                tooltip=escape(text),
                icon=folium.DivIcon(
                    html=svg, icon_size=(14, 14), icon_anchor=(7, 7), class_name="rr-symbol"
                ),
            ).add_to(cluster)
        cluster.add_to(layer)
        layer.add_to(m)


def layer_control(m: folium.Map, *, collapsed: bool = False) -> None:
    """Add the layer list (top right; panels stay in the other corners)."""
    folium.LayerControl(collapsed=collapsed, position="topright").add_to(m)


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
