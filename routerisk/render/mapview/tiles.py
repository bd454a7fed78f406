"""Optional background tiles: an online URL template, a folder of tiles or MBTiles."""

from __future__ import annotations

import base64
import re
from dataclasses import dataclass
from pathlib import Path

import folium
from branca.element import MacroElement
from jinja2 import Template

from routerisk.render.mapview.escaping import escape

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
