"""Point symbols, route colours and dashes, and the legend swatches (inline SVG)."""

from __future__ import annotations

from routerisk.render.mapview.escaping import escape

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
