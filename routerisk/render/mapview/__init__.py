"""Self-contained HTML maps (folium) that render with no internet.

Leaflet's own files (BSD-2, bundled in ``routerisk/static/leaflet``) are inlined into the
page, and folium's default links to online scripts and styles are removed, so a page opens
offline with no network request. Online background tiles are an option, not the default.
Every text value that comes from map data is HTML-escaped before it reaches the page.

The package's modules, lowest first: :mod:`.escaping` (HTML escaping), :mod:`.symbols`
(point symbols, route colours, legend swatches), :mod:`.classes` (classes and the colour ramp),
:mod:`.tiles` (optional background tiles), :mod:`.background` (the light street background),
:mod:`.legend` (legends, panels, provenance), :mod:`.layers` (lines, sources, marker clusters)
and :mod:`.page` (the offline page with Leaflet inlined, stable ids, saving, the network map).
"""

from __future__ import annotations

from routerisk.render.mapview.background import (
    BACKGROUND,
    CONTEXT_STYLE,
    LABELS_FROM_ZOOM,
    STREET_COLOUR,
    add_context,
    background_items,
    background_of,
)
from routerisk.render.mapview.classes import (
    BAND_COLOURS,
    BAND_MODES,
    BAND_RAMP,
    Classes,
    band_colour,
    classes_for,
    ramp,
)
from routerisk.render.mapview.escaping import (
    escape,
)
from routerisk.render.mapview.layers import (
    CLUSTER_UNTIL_ZOOM,
    add_lines,
    add_sources,
    layer_control,
)
from routerisk.render.mapview.legend import (
    add_panel,
    add_provenance,
    category_items,
    collapsible,
    legend_html,
)
from routerisk.render.mapview.page import (
    network_map,
    new_map,
    render,
    save,
)
from routerisk.render.mapview.symbols import (
    _SHAPES,
    CATEGORY_COLOURS,
    CATEGORY_SHAPES,
    ROUTE_COLOURS,
    ROUTE_DASHES,
    RULE_BREAK_COLOUR,
    RULE_ZONE_COLOUR,
    SYMBOL_INK,
    area_swatch,
    category_shape,
    line_swatch,
    rule_break_svg,
    symbol_svg,
)
from routerisk.render.mapview.tiles import (
    MAX_EMBEDDED_TILES,
    TileSource,
    _tile_range,
    tile_source,
)

__all__ = [
    "BACKGROUND",
    "BAND_COLOURS",
    "BAND_MODES",
    "BAND_RAMP",
    "CATEGORY_COLOURS",
    "CATEGORY_SHAPES",
    "CLUSTER_UNTIL_ZOOM",
    "CONTEXT_STYLE",
    "Classes",
    "LABELS_FROM_ZOOM",
    "MAX_EMBEDDED_TILES",
    "ROUTE_COLOURS",
    "ROUTE_DASHES",
    "RULE_BREAK_COLOUR",
    "RULE_ZONE_COLOUR",
    "STREET_COLOUR",
    "SYMBOL_INK",
    "TileSource",
    "_SHAPES",
    "_tile_range",
    "add_context",
    "add_lines",
    "add_panel",
    "add_provenance",
    "add_sources",
    "area_swatch",
    "background_items",
    "background_of",
    "band_colour",
    "category_items",
    "category_shape",
    "classes_for",
    "collapsible",
    "escape",
    "layer_control",
    "legend_html",
    "line_swatch",
    "network_map",
    "new_map",
    "ramp",
    "render",
    "rule_break_svg",
    "save",
    "symbol_svg",
    "tile_source",
]
