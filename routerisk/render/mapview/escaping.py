"""HTML escaping of every text value from map data that reaches a page."""

from __future__ import annotations

import html
from typing import Any

import numpy as np

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
