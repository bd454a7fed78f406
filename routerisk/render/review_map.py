"""The offline folium map of an area review: streets by class, hot spots, sources, background."""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

import geopandas as gpd
import pandas as pd
import shapely

from routerisk.analysis.review.basis import _street_key
from routerisk.analysis.review.result import Review

if TYPE_CHECKING:  # pragma: no cover - typing only
    import folium


#: Map colour of the hot-spot halo (distinct from every band and category colour).
HOTSPOT_COLOUR = "#111111"


def review_map(review: Review, *, tiles: Any = None, bands: str = "fixed") -> folium.Map:
    """Return the offline map of the areas: streets by class, hot spots, sources, background.

    ``bands`` is ``fixed`` (the profile's bands) or ``quantiles`` (length-weighted quantiles
    of the streets in the areas); the legend prints the thresholds.
    """
    import folium

    from routerisk.render import mapview

    prof = review.profile
    shapes = gpd.GeoDataFrame(
        {"name": [a.name for a in review.area_shapes]},
        geometry=[a.geometry for a in review.area_shapes],
        crs=next(iter(review.clipped.values())).crs,
    )
    w, s, e, n = shapes.to_crs("EPSG:4326").total_bounds
    pad_x, pad_y = (e - w) * 0.05 + 1e-4, (n - s) * 0.05 + 1e-4
    m = mapview.new_map(
        (w - pad_x, s - pad_y, e + pad_x, n + pad_y), tiles=tiles, context=review.context
    )
    outline = shapes.to_crs("EPSG:4326")
    outline["name"] = outline["name"].map(mapview.escape)
    layer = folium.FeatureGroup(name="proposed test areas", show=True)
    folium.GeoJson(
        outline.to_json(drop_id=True),
        style_function=lambda f: {
            "color": "#1d3557",
            "weight": 2,
            "fill": True,
            "fillOpacity": 0.04,
            "dashArray": "6 4",
        },
        tooltip=folium.GeoJsonTooltip(fields=["name"], aliases=["area"]),
    ).add_to(layer)
    layer.add_to(m)

    frames = []
    hot_frames = []
    for a in review.areas:
        clip = review.clipped[a["name"]].reset_index()
        key = _street_key(
            clip["u"].to_numpy(), clip["v"].to_numpy(), clip["length"].to_numpy(dtype=float)
        )
        clip = clip.loc[~pd.Series(key).duplicated().to_numpy()].copy()
        clip["area"] = a["name"]
        clip["street"] = clip["name"].fillna("").astype(str)
        clip["in_area_km"] = clip["clip_m"] / 1000.0
        frames.append(clip)
        spots = {(h["u"], h["v"], h["key"]): h for h in a["hotspots"]}
        if spots:
            sel = [(r.u, r.v, r.key) in spots for r in clip.itertuples()]
            hs = clip.loc[sel].copy()
            hs["reasons"] = [
                ", ".join(
                    f"{x['label']} {x['share']:.0%}" + (f" ({x['near']})" if x["near"] else "")
                    for x in spots[(r.u, r.v, r.key)]["reasons"]
                )
                for r in hs.itertuples()
            ]
            hs["_colour"] = HOTSPOT_COLOUR
            hot_frames.append(hs)
    streets = gpd.GeoDataFrame(
        pd.concat(frames, ignore_index=True), geometry="geometry", crs=shapes.crs
    )
    cls = mapview.classes_for(prof, streets["exposure_km"], mode=bands, weights=streets["clip_m"])
    streets["_colour"] = cls.colour_of(streets["exposure_km"])
    fields = {
        "area": "area",
        "street": "street",
        "highway": "road class",
        "band": "exposure band",
        "exposure_km": "exposure per km",
        "in_area_km": "km in area",
        "speed_kph": "speed km/h",
        "crossings": "crossings",
    }
    if hot_frames:  # the halo goes first, so the street's band colour stays on top
        hot = gpd.GeoDataFrame(
            pd.concat(hot_frames, ignore_index=True), geometry="geometry", crs=shapes.crs
        )
        mapview.add_lines(
            m,
            hot,
            name="hot spots",
            colour_col="_colour",
            weight=11,
            opacity=0.45,
            fields={
                "area": "area",
                "street": "street",
                "_exposure": "exposure",
                "reasons": "reasons",
            },
        )
    mapview.add_lines(
        m,
        streets,
        name="streets in the areas by exposure",
        colour_col="_colour",
        fields=fields,
        casing="#5b5347",
        weight=3.5,
    )
    src = _sources_near(review, shapes)
    drawn = src if src is not None and len(src) else None
    if drawn is not None:
        mapview.add_sources(m, drawn, labels={c.name: c.label for c in prof.categories})
    mapview.layer_control(m)
    legend = cls.legend_items()
    items: list[tuple[str | None, str]] = [
        (None, "street exposure per km"),
        *legend[1:],
        (None, legend[0][1]),
    ]
    items.append(
        (mapview.line_swatch(HOTSPOT_COLOUR, width=11, opacity=0.45), "hot spot (dark halo)")
    )
    items.append(
        (
            mapview.area_swatch("#ffffff", stroke="#1d3557", dash="6 4", opacity=0.1),
            "proposed test area",
        )
    )
    items += mapview.category_items(prof, drawn) if drawn is not None else []
    mapview.add_panel(
        m,
        mapview.legend_html(
            "Area review",
            items,
            extra=f"<div>profile {mapview.escape(prof.name)} "
            f"{mapview.escape(prof.fingerprint)}</div>",
            background=mapview.background_of(m),
        ),
    )
    return m


def _sources_near(review: Review, shapes: gpd.GeoDataFrame) -> gpd.GeoDataFrame | None:
    """Return the sources inside an area or within their category's radius of one."""
    src = review.sources
    if src is None or len(src) == 0:
        return None
    zone = shapes.geometry.union_all()
    radius = (
        src["category"]
        .map({c.name: c.radius_m for c in review.profile.categories})
        .fillna(0.0)
        .to_numpy()
    )
    keep = shapely.dwithin(src.geometry.to_numpy(), zone, radius)
    return src.loc[keep]
