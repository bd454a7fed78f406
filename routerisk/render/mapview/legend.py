"""Legends and fixed panels on the map, and the provenance in the page header."""

from __future__ import annotations

from typing import Any

import folium
import geopandas as gpd
from branca.element import Element, MacroElement
from jinja2 import Template

from routerisk import CAUTION, __version__
from routerisk.render.mapview.background import background_items
from routerisk.render.mapview.escaping import escape
from routerisk.render.mapview.symbols import (
    SYMBOL_INK,
    area_swatch,
    category_shape,
    line_swatch,
    symbol_svg,
)


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
