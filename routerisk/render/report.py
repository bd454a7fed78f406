"""Self-contained HTML report pieces: tables, charts as embedded PNG, maps and the caution.

A page built here loads nothing from outside itself: charts are matplotlib (Agg canvas, no
pyplot, no global backend change) PNG images embedded as ``data:`` URIs, maps are routerisk's
offline folium pages (:mod:`routerisk.render.mapview`) embedded with ``<iframe srcdoc>``, and the
page carries a Content-Security-Policy that forbids every network request. Output is deterministic:
no current time, stable PNG bytes (no software stamp), stable map element ids. Every text
value passed to a helper is HTML-escaped here; only arguments documented as HTML are trusted.
"""

from __future__ import annotations

import base64
import html
import io
import logging
import math
import re
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from routerisk import CAUTION, __version__
from routerisk.io.atomic import write_text_atomic
from routerisk.render import words

if TYPE_CHECKING:  # pragma: no cover - typing only
    import folium
    import pandas as pd
    from matplotlib.figure import Figure

log = logging.getLogger(__name__)

DAY_LABELS = ("Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun")
#: Labels of the 168 hours of a week, Monday 00:00 first (``"Mon 07:00"``).
HOUR_LABELS = tuple(f"{d} {h:02d}:00" for d in DAY_LABELS for h in range(24))
#: Series colours of the charts (routerisk's own palette).
SERIES_COLOURS = ("#1d3557", "#d2632b", "#2a9d8f", "#8e2a58", "#c9a227", "#577590", "#6d597a")
#: Content-Security-Policy of every page: inline code and data: images only, no requests.
CSP = (
    "default-src 'none'; img-src data:; style-src 'unsafe-inline'; "
    "script-src 'unsafe-inline'; font-src data:; frame-src 'self' about: data:"
)
#: Matplotlib settings used for every chart (fixed, so the bytes do not depend on rc files).
_RC = {
    "svg.hashsalt": "routerisk",
    "font.family": "DejaVu Sans",
    "font.size": 9.0,
    "axes.titlesize": 10.0,
    "figure.dpi": 100.0,
    "savefig.dpi": 100.0,
    "path.simplify": True,
}

PAGE_CSS = """
body{font:14px/1.45 system-ui,-apple-system,"Segoe UI",sans-serif;color:#1c1c1c;margin:0;
background:#faf9f6}
header,main,footer{max-width:1100px;margin:0 auto;padding:0 18px}
header{padding-top:18px}h1{font-size:22px;margin:0 0 8px}h2{font-size:18px;margin:28px 0 8px;
border-bottom:2px solid #d9d4c7;padding-bottom:3px}h3{font-size:15px;margin:18px 0 6px}
.rr-caution{background:#fff6df;border-left:4px solid #c9a227;padding:8px 10px;color:#4a3300;
margin:10px 0}
.rr-note{color:#555;font-size:12.5px;margin:4px 0 10px}
table.rr{border-collapse:collapse;margin:6px 0 12px;font-size:13px}
table.rr th,table.rr td{border:1px solid #d9d4c7;padding:3px 7px;vertical-align:top}
table.rr th{background:#efebe1;text-align:left}table.rr td.num{text-align:right;
font-variant-numeric:tabular-nums}table.rr caption{text-align:left;font-weight:600;
padding:2px 0}
figure.rr{margin:8px 0 14px}figure.rr img{max-width:100%;height:auto;border:1px solid #e3dfd4;
background:#fff}figure.rr figcaption{font-size:12px;color:#555}
.rr-scroll{overflow-x:auto;max-width:100%}
iframe.rr-map{width:100%;border:1px solid #d9d4c7;background:#eeeae2}
nav.rr-toc{font-size:13px;margin:8px 0}nav.rr-toc a{margin-right:12px}
footer{font-size:12px;color:#555;padding-bottom:30px;margin-top:30px}
.rr-words dt{font-weight:bold;margin-top:6px}.rr-words dd{margin:0 0 0 18px;max-width:60em}
"""


# --------------------------------------------------------------------------- text and numbers


#: columns shown as p-values ('< 0.001', not '0.000')
_P_KEYS = frozenset({"p_value", "q_value", "p", "q", "p_poisson", "p_negbin"})


def escape(value: Any) -> str:
    """Return ``value`` as HTML-escaped text (None and NaN become an empty string)."""
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return ""
    return html.escape(str(value), quote=True)


def fmt(value: Any, *, digits: int = 3) -> str:
    """Return a number rounded for display (integers as such), anything else as text."""
    if isinstance(value, bool | np.bool_) or value is None:
        return "" if value is None else ("yes" if value else "no")
    if isinstance(value, int | np.integer):
        return f"{int(value):,}"
    if isinstance(value, float | np.floating):
        v = float(value)
        if not math.isfinite(v):
            return ""
        return f"{v:,.{digits}f}"
    if isinstance(value, list | tuple):
        return ", ".join(str(v) for v in value)
    return str(value)


def plain(text: Any) -> str:
    """Return chart text with ``$`` escaped, so matplotlib never reads it as mathtext."""
    return str(text).replace("$", r"\$")


def anchor(text: str) -> str:
    """Return an HTML id made from ``text`` (letters, digits and dashes only)."""
    slug = re.sub(r"[^a-z0-9]+", "-", str(text).lower()).strip("-")
    return slug or "section"


# --------------------------------------------------------------------------------- blocks


def caution_html() -> str:
    """Return the caution box every report carries (:data:`routerisk.CAUTION`)."""
    return f'<p class="rr-caution">{escape(CAUTION)}</p>'


def note_html(text: str) -> str:
    """Return a small explanatory paragraph (escaped)."""
    return f'<p class="rr-note">{escape(text)}</p>'


def paragraph(text: str) -> str:
    """Return a paragraph of escaped text."""
    return f"<p>{escape(text)}</p>"


def section(title: str, *parts: str, level: int = 2, anchor_id: str | None = None) -> str:
    """Return a heading (escaped ``title``) followed by ``parts`` (already HTML)."""
    level = min(max(int(level), 2), 4)
    ident = anchor_id or anchor(title)
    return (
        f'<section id="{escape(ident)}"><h{level}>{escape(title)}</h{level}>'
        + "".join(parts)
        + "</section>"
    )


def table_html(
    rows: Sequence[Mapping[str, Any]],
    columns: Sequence[tuple[str, str]] | None = None,
    *,
    caption: str | None = None,
    digits: int | Mapping[str, int] = 3,
) -> str:
    """Return an HTML table of ``rows`` with escaped cells.

    Parameters
    ----------
    rows
        One mapping per row.
    columns
        ``(key, heading)`` pairs in display order; default: the keys of the first row.
    caption
        Optional caption text.
    digits
        Decimals of float cells, one number or one per key.
    """
    if columns is None:
        columns = [(k, k) for k in (rows[0].keys() if rows else [])]
    head = "".join(f"<th>{escape(label)}</th>" for _, label in columns)
    body = []
    for row in rows:
        cells = []
        for key, _ in columns:
            value = row.get(key)
            d = digits.get(key, 3) if isinstance(digits, Mapping) else digits
            numeric = isinstance(value, int | float | np.integer | np.floating) and not (
                isinstance(value, bool)
            )
            cls = ' class="num"' if numeric else ""
            if numeric and key in _P_KEYS:
                text = words.p_text(float(value))
            elif words.is_iso_time(value):
                text = words.when(value)  # local time as people read it
            else:
                text = fmt(value, digits=d)
            cells.append(f"<td{cls}>{escape(text)}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    cap = f"<caption>{escape(caption)}</caption>" if caption else ""
    return (
        f'<div class="rr-scroll"><table class="rr">{cap}<thead><tr>{head}</tr></thead>'
        "<tbody>" + "".join(body) + "</tbody></table></div>"
    )


def frame_html(
    df: pd.DataFrame,
    *,
    caption: str | None = None,
    index: bool = True,
    digits: int | Mapping[str, int] = 3,
) -> str:
    """Return a pandas DataFrame as an escaped HTML table."""
    data = df.reset_index() if index else df
    rows = [
        dict(zip(map(str, data.columns), r, strict=True))
        for r in data.itertuples(index=False, name=None)
    ]
    return table_html(
        rows,
        [(str(c), words.heading(str(c))) for c in data.columns],
        caption=caption,
        digits=digits,
    )


def pairs_html(
    pairs: Iterable[tuple[str, Any]], *, caption: str | None = None, digits: int = 3
) -> str:
    """Return a two-column table of ``(label, value)`` pairs, escaped."""
    rows = [{"k": k, "v": v} for k, v in pairs]
    return table_html(rows, [("k", "item"), ("v", "value")], caption=caption, digits=digits)


# --------------------------------------------------------------------------------- charts


def new_figure(width: float = 8.0, height: float = 3.0) -> Figure:
    """Return a matplotlib Figure on its own Agg canvas (pyplot is never used)."""
    import matplotlib as mpl
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    with mpl.rc_context(_RC):
        fig = Figure(figsize=(width, height), dpi=100)
        FigureCanvasAgg(fig)
    return fig


def png_bytes(fig: Figure) -> bytes:
    """Return the figure as PNG bytes that are identical from run to run.

    The software stamp is left out of the PNG metadata and the resolution is fixed.
    """
    import matplotlib as mpl

    buf = io.BytesIO()
    with mpl.rc_context(_RC):
        fig.savefig(buf, format="png", dpi=100, metadata={"Software": None})
    return buf.getvalue()


def image_html(png: bytes, *, alt: str, caption: str | None = None) -> str:
    """Return a ``<figure>`` with the PNG embedded as a data: URI."""
    data = base64.b64encode(png).decode("ascii")
    cap = f"<figcaption>{escape(caption)}</figcaption>" if caption else ""
    return (
        f'<figure class="rr"><img alt="{escape(alt)}" '
        f'src="data:image/png;base64,{data}">{cap}</figure>'
    )


def figure_html(fig: Figure, *, alt: str, caption: str | None = None) -> str:
    """Return a ``<figure>`` holding the chart as an embedded PNG."""
    return image_html(png_bytes(fig), alt=alt, caption=caption)


def bar_chart(
    labels: Sequence[str],
    values: Sequence[float],
    *,
    title: str,
    xlabel: str,
    colours: Sequence[str] | None = None,
    width: float = 7.0,
) -> Figure:
    """Return a horizontal bar chart (one bar per label, first label on top)."""
    import matplotlib as mpl

    n = max(len(labels), 1)
    with mpl.rc_context(_RC):
        fig = new_figure(width, 0.9 + 0.32 * n)
        ax = fig.add_subplot(1, 1, 1)
        y = np.arange(len(labels))[::-1]
        cols = list(colours) if colours else [SERIES_COLOURS[0]] * len(labels)
        ax.barh(y, [float(v) for v in values], color=cols, height=0.65)
        ax.set_yticks(y, [plain(s) for s in labels])
        for yy, v in zip(y, values, strict=True):
            ax.annotate(
                f"{float(v):.2f}",
                (float(v), yy),
                xytext=(3, 0),
                textcoords="offset points",
                va="center",
                fontsize=8,
            )
        ax.set_xlabel(plain(xlabel))
        ax.set_title(plain(title))
        ax.margins(x=0.12)
        ax.grid(True, axis="x", alpha=0.25)
        longest = max((len(str(s)) for s in labels), default=4)
        height = 0.9 + 0.32 * n
        fig.subplots_adjust(
            left=min(0.5, 0.03 + 0.075 * longest / width),
            right=0.97,
            top=1 - 0.35 / height,
            bottom=0.45 / height,
        )
    return fig


def grouped_bar_chart(
    groups: Sequence[str],
    series: Mapping[str, Sequence[float]],
    *,
    title: str,
    ylabel: str,
    colours: Sequence[str] | None = None,
    width: float = 8.0,
) -> Figure:
    """Return vertical bars: one group per entry of ``groups``, one bar per series."""
    import matplotlib as mpl

    names = list(series)
    k = max(len(names), 1)
    with mpl.rc_context(_RC):
        fig = new_figure(width, 3.2)
        ax = fig.add_subplot(1, 1, 1)
        x = np.arange(len(groups))
        w = 0.8 / k
        cols = list(colours) if colours else list(SERIES_COLOURS)
        for i, name in enumerate(names):
            ax.bar(
                x - 0.4 + w * (i + 0.5),
                [float(v) for v in series[name]],
                width=w,
                label=plain(name),
                color=cols[i % len(cols)],
            )
        ax.set_xticks(x, [plain(g) for g in groups])
        ax.set_ylabel(plain(ylabel))
        ax.set_title(plain(title))
        ax.grid(True, axis="y", alpha=0.25)
        if names:
            ax.legend(fontsize=8, ncols=min(len(names), 4), loc="upper right")
        fig.subplots_adjust(left=0.08, right=0.98, top=0.9, bottom=0.12)
    return fig


def week_chart(
    series: Mapping[str, Sequence[float]],
    *,
    title: str,
    ylabel: str,
    colours: Sequence[str] | None = None,
    width: float = 9.0,
) -> Figure:
    """Return a step chart of 168 hourly values per series (Monday 00:00 first).

    The first series is drawn bold and on top; the others thin and dashed.
    """
    import matplotlib as mpl

    with mpl.rc_context(_RC):
        fig = new_figure(width, 2.9)
        ax = fig.add_subplot(1, 1, 1)
        cols = list(colours) if colours else list(SERIES_COLOURS)
        hours = np.arange(169)
        for i, (name, values) in enumerate(series.items()):
            v = np.asarray(values, dtype=float)
            if v.shape != (168,):
                raise ValueError(f"series {name!r} must have 168 hourly values")
            ax.stairs(
                v,
                hours,
                label=plain(name),
                color=cols[i % len(cols)],
                lw=2.4 if i == 0 else 1.2,
                ls="-" if i == 0 else "--",
                zorder=3 if i == 0 else 2,
                baseline=None,
            )
        for d in range(1, 7):
            ax.axvline(24 * d, color="#999999", lw=0.6, ls=":")
        ax.set_xticks([24 * d + 12 for d in range(7)], list(DAY_LABELS))
        ax.set_xticks([24 * d for d in range(8)], minor=True)
        ax.tick_params(axis="x", which="major", length=0)
        ax.set_xlim(0, 168)
        ax.set_ylim(bottom=0)
        ax.set_ylabel(plain(ylabel))
        ax.set_title(plain(title))
        ax.grid(True, axis="y", alpha=0.25)
        if len(series) > 1:
            ax.legend(fontsize=7, loc="upper right")
        fig.subplots_adjust(left=0.07, right=0.99, top=0.9, bottom=0.1)
    return fig


# ------------------------------------------------------------------------------------ maps


def map_html(m: folium.Map, *, title: str, height: int = 560) -> str:
    """Return an offline folium map embedded in the page with ``<iframe srcdoc>``.

    The map page is rendered by :func:`routerisk.render.mapview.render` (inlined Leaflet, stable
    ids) and escaped once more as the attribute value, as folium itself does in notebooks.
    """
    from routerisk.render import mapview

    doc = _stable_ids(mapview.render(m))
    return (
        f'<iframe class="rr-map" title="{escape(title)}" height="{int(height)}" '
        f'srcdoc="{html.escape(doc, quote=True)}"></iframe>'
    )


_HEX_ID = re.compile(r"(?<=_)([0-9a-f]{32})(?=_)")


def _stable_ids(text: str) -> str:
    """Renumber the random 32-hex ids that remain inside names such as ``x_<hex>_styler``."""
    seen: dict[str, str] = {}

    def repl(mt: re.Match[str]) -> str:
        return seen.setdefault(mt.group(1), f"h{len(seen):04d}")

    return _HEX_ID.sub(repl, text)


# ------------------------------------------------------------------------------------ page


def page(
    title: str,
    body: Sequence[str],
    *,
    facts: Sequence[tuple[str, Any]] = (),
    toc: Sequence[tuple[str, str]] = (),
    provenance: Mapping[str, Any] | None = None,
) -> str:
    """Return a complete, self-contained HTML page.

    Parameters
    ----------
    title
        Page title (escaped).
    body
        Blocks of HTML built with the helpers of this module.
    facts
        ``(label, value)`` pairs shown under the title (escaped): profile, data date, licence.
    toc
        ``(anchor id, label)`` pairs for a table of contents.
    provenance
        What the page was made from (:func:`routerisk.io.atomic.provenance`): recorded in a
        ``<meta name="routerisk-provenance">`` element and shown as a fact line.
    """
    prov_meta = ""
    if provenance is not None:
        from routerisk.io.atomic import dumps_json, provenance_line

        facts = [*facts, ("made from", provenance_line(dict(provenance)))]
        prov_meta = (
            '<meta name="routerisk-provenance" content="'
            f'{escape(dumps_json(dict(provenance)).replace(chr(10), " "))}">'
        )
    fact_html = pairs_html(facts) if facts else ""
    nav = ""
    if toc:
        nav = (
            '<nav class="rr-toc">'
            + "".join(f'<a href="#{escape(a)}">{escape(label)}</a>' for a, label in toc)
            + "</nav>"
        )
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en"><head><meta charset="utf-8">'
        f'<meta http-equiv="Content-Security-Policy" content="{escape(CSP)}">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"{prov_meta}"
        f"<title>{escape(title)}</title><style>{PAGE_CSS}</style></head><body>"
        f"<header><h1>{escape(title)}</h1>{caution_html()}{fact_html}{nav}</header>"
        "<main>" + "".join(body) + words.glossary_html(words.terms_in("".join(body))) + "</main>"
        f"<footer>{caution_html()}<p>Made with routerisk {escape(__version__)}. Map data: "
        "OpenStreetMap contributors, ODbL 1.0.</p></footer>"
        "</body></html>\n"
    )


_REF = re.compile(
    r"""(?is)(?:\b(src|href|action|poster|data)\s*=\s*["']?\s*|url\(\s*["']?|"""
    r"""@import\s+["'])((?:https?:)?//[^"'\s)>]*)"""
)
_ANCHOR_HREF = re.compile(r"""(?is)<a\s[^>]*\bhref\s*=\s*["']?\s*$""")
_SRCDOC = re.compile(r'(?s)\bsrcdoc="([^"]*)"')


def external_references(text: str) -> list[str]:
    """Return every reference in a page that a browser would load from elsewhere.

    Looks for ``src=``, ``href=`` (links of ``<a>`` elements excepted: they load nothing
    until clicked), ``url(...)`` and ``@import`` pointing at ``http(s)://`` or ``//``, and
    looks inside ``srcdoc`` documents too.
    """
    found = []
    for mt in _REF.finditer(text):
        if mt.group(1) and mt.group(1).lower() == "href":
            before = text[
                max(0, mt.start() - 400) : mt.start() + len(mt.group(0)) - len(mt.group(2))
            ]
            if _ANCHOR_HREF.search(before):
                continue
        found.append(mt.group(2))
    for mt in _SRCDOC.finditer(text):
        found.extend(external_references(html.unescape(mt.group(1))))
    return found


def write_report(path: str | Path, text: str, *, force: bool = True) -> Path:
    """Write a page atomically (refusing an existing file unless ``force``)."""
    out = write_text_atomic(path, text, force=force)
    log.info("write_report wrote %s (%d characters)", out, len(text))
    return out
