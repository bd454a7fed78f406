"""Read the proposed test areas of ``routerisk review``: polygons of a GeoJSON or GeoPackage file.

Every problem of the file raises :class:`~routerisk.errors.InputFileError` naming the file and
the feature (``features[i].geometry``, from 0): missing, empty or unreadable file, no feature,
an empty, non-polygonal or invalid geometry, coordinates that cannot be projected, or two areas
with the same name.
"""

from __future__ import annotations

import logging
import math
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import shapely
from shapely.geometry.base import BaseGeometry

from routerisk.errors import InputFileError

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class Area:
    """One proposed test area, projected to the network's CRS."""

    name: str
    index: int
    geometry: BaseGeometry
    source: str
    field: str


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip()
    return text.splitlines()[0] if text else type(exc).__name__


def read_areas(path: str | Path, *, crs: Any) -> list[Area]:
    """Read the polygons of an area file and project them to ``crs``.

    Parameters
    ----------
    path
        GeoJSON or GeoPackage (first layer) of Polygon or MultiPolygon features. A feature's
        ``name`` property names the area (default ``area-<n>``, n from 1). The file's CRS is
        used (GeoJSON without one is WGS 84).
    crs
        The network's projected CRS.

    Returns
    -------
    list of Area
        In file order.

    Raises
    ------
    InputFileError
        The file is missing, unreadable or empty, or a feature (``features[i]``, from 0) has
        an empty, non-polygonal or invalid geometry, or two areas share a name.
    """
    p = Path(path)
    if not p.is_file():
        raise InputFileError("area file not found", path=p)
    if p.stat().st_size == 0:
        raise InputFileError("the area file is empty (0 bytes)", path=p)
    try:
        layers = pyogrio.list_layers(p)
        layer = str(layers[0][0]) if len(layers) else None
        if len(layers) > 1:
            log.warning("%s has %d layers; reading the first, %r", p, len(layers), layer)
        gdf = pyogrio.read_dataframe(p, layer=layer)
    except Exception as exc:  # noqa: BLE001 - GDAL raises several kinds
        raise InputFileError(f"cannot read the area file ({_first_line(exc)})", path=p) from exc
    if not isinstance(gdf, gpd.GeoDataFrame) or gdf.geometry.name not in gdf:
        raise InputFileError("the file has no geometry", path=p, field="geometry")
    if len(gdf) == 0:
        raise InputFileError("the file holds no area (no features)", path=p, field="features")
    if gdf.crs is None:
        log.info("%s states no CRS; reading it as WGS 84 (EPSG:4326)", p)
        gdf = gdf.set_crs("EPSG:4326")
    names = gdf["name"] if "name" in gdf.columns else pd.Series([None] * len(gdf))
    for i, geom in enumerate(gdf.geometry):
        where = f"features[{i}].geometry"
        if geom is None or geom.is_empty:
            raise InputFileError("empty geometry; an area needs a polygon", path=p, field=where)
        if geom.geom_type not in ("Polygon", "MultiPolygon"):
            raise InputFileError(
                f"must be a Polygon or MultiPolygon, got {geom.geom_type}", path=p, field=where
            )
        if not shapely.is_valid(geom):
            reason = re.sub(r"\[", " at [", shapely.is_valid_reason(geom), count=1)
            raise InputFileError(f"invalid polygon: {reason}", path=p, field=where)
    projected = gdf.geometry.to_crs(crs)
    out: list[Area] = []
    seen: dict[str, int] = {}
    for i, (geom, raw_name) in enumerate(zip(projected, names, strict=True)):
        where = f"features[{i}].geometry"
        bounds = np.asarray(geom.bounds, dtype=float)
        if not np.isfinite(bounds).all():
            raise InputFileError(
                "coordinates cannot be projected to the network's CRS (out of range?)",
                path=p,
                field=where,
            )
        if not shapely.is_valid(geom):  # projection rarely bends a ring onto itself
            geom = shapely.make_valid(geom)
            geom = shapely.union_all(
                [g for g in shapely.get_parts(geom) if g.geom_type in ("Polygon", "MultiPolygon")]
            )
        name = (
            ""
            if raw_name is None or (isinstance(raw_name, float) and math.isnan(raw_name))
            else str(raw_name).strip()
        )
        name = name or f"area-{i + 1}"
        if name in seen:
            raise InputFileError(
                f"area name {name!r} is used twice (also features[{seen[name]}])",
                path=p,
                field=f"features[{i}].properties.name",
            )
        seen[name] = i
        out.append(Area(name, i, geom, str(p), where))
    log.info("read_areas read %d areas from %s", len(out), p)
    return out
