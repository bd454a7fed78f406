"""The light street background drawn from the extract (parks, water, buildings, streets)."""

from __future__ import annotations

from typing import Any

import folium
import geopandas as gpd
import numpy as np
from branca.element import MacroElement
from jinja2 import Template

from routerisk.render.mapview.escaping import escape
from routerisk.render.mapview.symbols import area_swatch, line_swatch

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
