"""Map layers: lines with escaped popups, and exposure sources grouped by marker clusters."""

from __future__ import annotations

from functools import cache
from importlib import resources
from typing import Any

import folium
import geopandas as gpd
import shapely
from branca.element import Element
from folium.plugins import MarkerCluster

from routerisk.render.mapview.escaping import escape
from routerisk.render.mapview.symbols import SYMBOL_INK, category_shape, symbol_svg


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
