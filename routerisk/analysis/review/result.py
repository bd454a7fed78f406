"""The review of several areas: :func:`review_areas`, its :class:`Review`, the comparison table."""

from __future__ import annotations

import logging
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import geopandas as gpd
import pandas as pd

from routerisk import CAUTION, __version__
from routerisk.analysis.review.areas_summary import _Context, _review_area
from routerisk.analysis.review.basis import (
    HOUR_BASIS,
    INFLUENCE_BASIS,
    LENGTH_BASIS,
    SPEED_BANDS_MPH,
    _r,
)
from routerisk.analysis.review.whatif import WhatIf, _compare, apply_what_if, minute_label
from routerisk.errors import InputFileError
from routerisk.io.areas import Area
from routerisk.io.atomic import provenance
from routerisk.profile import Profile

if TYPE_CHECKING:  # pragma: no cover - typing only
    from routerisk.network.folder import Network

log = logging.getLogger(__name__)


@dataclass
class Review:
    """The result of :func:`review_areas`: figures per area, what-ifs and what they used."""

    areas: list[dict[str, Any]]
    profile: Profile
    meta: dict[str, Any]
    what_ifs: list[dict[str, Any]] = field(default_factory=list)
    at: int | None = None
    area_shapes: list[Area] = field(default_factory=list, repr=False)
    clipped: dict[str, gpd.GeoDataFrame] = field(default_factory=dict, repr=False)
    sources: gpd.GeoDataFrame | None = field(default=None, repr=False)
    provenance: dict[str, Any] = field(default_factory=dict)
    #: the map's light background around the areas (streets, water, parks, buildings)
    context: gpd.GeoDataFrame | None = field(default=None, repr=False)

    def to_json(self) -> dict[str, Any]:
        """Return the JSON document of ``routerisk review --json``."""
        return {
            "areas": self.areas,
            "inputs": self.provenance.get("inputs", {}),
            "profile": self.profile.fingerprint,
            "profile_name": self.profile.name,
            "network": {
                k: self.meta.get(k)
                for k in (
                    "source_name",
                    "source_sha256",
                    "source_timestamp",
                    "data_licence",
                    "timezone",
                    "crs",
                )
            },
            "what_if": self.what_ifs,
            "at": None if self.at is None else {"minute": self.at, "label": minute_label(self.at)},
            "notes": {"length": LENGTH_BASIS, "hours": HOUR_BASIS, "influence": INFLUENCE_BASIS},
            "caution": CAUTION,
            "routerisk_version": __version__,
        }


def review_areas(
    net: Network,
    areas: Sequence[Area],
    *,
    at: int | None = None,
    what_ifs: Sequence[WhatIf] = (),
    top: int = 10,
    high_bands: Sequence[str] | None = None,
    clipper: Callable[..., gpd.GeoDataFrame] | None = None,
    tagger: Callable[..., gpd.GeoDataFrame] | None = None,
) -> Review:
    """Review every area on ``net``; with what-ifs, again on re-tagged copies.

    Parameters
    ----------
    net
        The tagged network (its profile is the one reported).
    areas
        Areas from :func:`read_areas`.
    at
        A minute of the week at which to report the connectivity too.
    what_ifs
        Scenarios from :func:`parse_what_if`.
    top
        Number of hot spots per area.
    high_bands
        Bands that count as high for clusters (default: the upper half of the bands).
    clipper, tagger
        Drop-ins for :func:`clip_edges` and :func:`routerisk.network.tagging.tag_edges` (the
        what-ifs re-tag), e.g. :func:`routerisk.parallel.clipper` and
        :func:`routerisk.parallel.tagger` to run tile by tile on a Dask cluster; the
        figures are the same.
    """
    if not areas:
        raise InputFileError("no area to review")
    ctx = _Context.of(net, clipper)
    results = []
    clipped = {}
    for area in areas:
        figures, clip = _review_area(ctx, area, at=at, top=top, high_bands=high_bands)
        results.append(figures)
        clipped[area.name] = clip
    scenarios = []
    for wi in what_ifs:
        prof2 = apply_what_if(net.profile, wi)
        net2 = net.retag(prof2, tagger=tagger)
        ctx2 = _Context.of(net2, clipper)
        rows = []
        for area, base in zip(areas, results, strict=True):
            fig2, _ = _review_area(ctx2, area, at=at, top=top, high_bands=high_bands)
            rows.append(_compare(base, fig2))
        scenarios.append(
            {
                "label": wi.label,
                "changes": [
                    {"kind": c.kind, "target": c.target, "value": c.value} for c in wi.changes
                ],
                "profile": prof2.fingerprint,
                "areas": rows,
            }
        )
    log.info("review_areas reviewed %d areas with %d what-ifs", len(areas), len(what_ifs))
    files = sorted({a.source for a in areas if a.source and Path(a.source).is_file()})
    prov = provenance(
        profile=net.profile.fingerprint,
        network=net,
        inputs={("areas" if i == 0 else f"areas_{i + 1}"): f for i, f in enumerate(files)},
    )
    from routerisk.network import context as _context

    shapes = gpd.GeoSeries([a.geometry for a in areas], crs=net.crs).to_crs("EPSG:4326")
    w, s, e, n = shapes.total_bounds
    context = _context.for_view(net, (w, s, e, n))
    return Review(
        results,
        net.profile,
        dict(net.meta),
        scenarios,
        at,
        list(areas),
        clipped,
        net.sources,
        prov,
        context,
    )


def comparison_table(review: Review) -> pd.DataFrame:
    """Return one row per area with the figures to compare side by side."""
    prof = review.profile
    rows = []
    for a in review.areas:
        row: dict[str, Any] = {
            "area": a["name"],
            "area_km2": a["area_km2"],
            "network_km": a["network_km"],
            "centreline_km": a["centreline_km"],
        }
        for b in prof.bands:
            row[f"km_{b.name}"] = a["km_by_band"][b.name]
        row["share_high_bands"] = _r(a["km_in_high_bands"] / a["network_km"])
        for c in prof.categories:
            row[f"share_in_{c.name}"] = a["share_in_influence"][c.name]
        for c in prof.categories:
            row[f"sources_{c.name}"] = a["sources"][c.name]
        row["crossings_per_km"] = a["crossings_per_km"]
        for _, label, ident in SPEED_BANDS_MPH:
            row[f"km_{ident}"] = a["km_by_speed"][label]
        row["exposure_per_km"] = a["exposure_per_km"]
        row["closed_peak_km"] = a["closed_peak"]["km"]
        row["closed_peak_hour"] = a["closed_peak"]["label"]
        row["closed_km_hours_week"] = a["closed_km_hours"]
        row["parts_at_peak"] = len(a["allowed_parts"])
        row["largest_part_share_at_peak"] = a["connectivity"]["peak"]["largest_share"]
        row["hotspot_top"] = a["hotspots"][0]["street"] if a["hotspots"] else ""
        # what the figures were made from, on every row (CSV has no place for metadata)
        row["profile"] = prof.fingerprint
        row["routerisk_version"] = __version__
        row["network_source_sha256"] = review.meta.get("source_sha256", "")
        row["area_file_sha256"] = (
            review.provenance.get("inputs", {}).get("areas", {}).get("sha256", "")
        )
        rows.append(row)
    return pd.DataFrame(rows)
