"""Exposure sources (schools, shops, transit stops ...) from the same OSM file as the roads.

A source is any node, way or multipolygon relation whose tags match a category's selectors in
the profile, so a user adds a category by editing the profile, not the code.
"""

from __future__ import annotations

import logging

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from shapely import LineString, MultiPolygon, Point, Polygon
from shapely.ops import linemerge, polygonize, unary_union

from routerisk.network.osm import RawFeature, RawOSM
from routerisk.profile import Profile

log = logging.getLogger(__name__)

COLUMNS = ["category", "osm_type", "osmid", "name", "geometry"]


def feature_filter(profile: Profile):
    """Return a tag predicate that is True for objects some category wants."""
    cats = profile.categories

    def want(tags) -> bool:
        return any(c.matches(tags) for c in cats)

    return want


def _geometry(f: RawFeature):
    if f.kind == "node":
        lon, lat = f.lonlat[0][0]
        return Point(lon, lat)
    if f.kind == "way":
        if len(f.lonlat) == 1:
            c = f.lonlat[0]
            if len(c) >= 4 and np.array_equal(c[0], c[-1]):
                poly = Polygon(c)
                return poly if poly.is_valid else shapely.make_valid(poly)
            return LineString(c)
        return shapely.MultiLineString([LineString(c) for c in f.lonlat])
    outers = [LineString(c) for c, r in zip(f.lonlat, f.roles, strict=True) if r != "inner"]
    inners = [LineString(c) for c, r in zip(f.lonlat, f.roles, strict=True) if r == "inner"]
    outer_polys = list(polygonize(linemerge(outers))) if outers else []
    if not outer_polys:  # members lost at a clip edge: keep what exists as lines
        return unary_union(outers) if outers else None
    shape = unary_union(outer_polys)
    if inners:
        holes = list(polygonize(linemerge(inners)))
        if holes:
            shape = shape.difference(unary_union(holes))
    if isinstance(shape, Polygon | MultiPolygon):
        return shape
    return None


def sources_from_raw(raw: RawOSM, profile: Profile, *, crs) -> gpd.GeoDataFrame:
    """Return the exposure sources of every profile category, projected to ``crs``.

    An object matching several categories is listed once per category.
    """
    rows = []
    for f in raw.features:
        cats = [c.name for c in profile.categories if c.matches(f.tags)]
        if not cats:
            continue
        geom = _geometry(f)
        if geom is None or geom.is_empty:
            log.debug("skipped %s %s: no usable geometry", f.kind, f.osmid)
            continue
        for c in cats:
            rows.append((c, f.kind, f.osmid, f.tags.get("name", ""), geom))
    if not rows:
        gdf = gpd.GeoDataFrame(columns=COLUMNS, geometry="geometry", crs="EPSG:4326")
    else:
        gdf = gpd.GeoDataFrame(
            pd.DataFrame(rows, columns=COLUMNS), geometry="geometry", crs="EPSG:4326"
        )
    gdf = gdf.to_crs(crs)
    gdf["osmid"] = gdf["osmid"].astype("int64")
    return gdf.sort_values(["category", "osm_type", "osmid"], kind="stable").reset_index(drop=True)


def crossings_from_raw(raw: RawOSM, *, crs) -> gpd.GeoDataFrame:
    """Return the on-road crossing nodes (highway=crossing) as points, projected."""
    ids = sorted(raw.crossings)
    pts = [Point(raw.crossings[i][0], raw.crossings[i][1]) for i in ids]
    kinds = [raw.crossings[i][2] for i in ids]
    gdf = gpd.GeoDataFrame(
        {"osmid": np.array(ids, dtype="int64"), "crossing": kinds}, geometry=pts, crs="EPSG:4326"
    )
    return gdf.to_crs(crs)
