"""Area review for local agencies: what a proposed test area's streets run past, and when.

For each area (a polygon of a GeoJSON or GeoPackage file) the review clips the tagged network
to the polygon in the network's projected CRS and reports:

* the length of its network, by exposure band, inside each category's influence, by speed
  band, and the crossings per km; the exposure sources inside the area or within a category's
  radius of it;
* the hot spots (street segments with the most exposure, and why) and the clusters of adjacent
  high-band streets;
* under the profile's hard rules, the km closed in each hour of a typical week and whether the
  streets left open still form one strongly connected network (at the hour with the most
  closed km, at a chosen time, and with nothing closed);
* optional what-ifs: the same figures with a rule switched off (or put in force at all hours)
  or a category weight changed.

Lengths
-------
``network_km`` counts **directed edges**: each direction of a two-way street counts once, so a
100 m two-way street adds 0.2 km (the length a vehicle may drive). ``centreline_km`` counts
each street once. The clipped length of an edge is its ``length`` times the share of its
geometry inside the polygon (projected CRS), so an edge wholly inside counts exactly its
network length.

Hours
-----
Hour ``h`` (0 = Monday 00:00-01:00, 167 = Sunday 23:00-24:00) is in the network's local time
zone. An edge is closed in an hour when any hard rule covering it is in force at any minute of
that hour.
"""

from __future__ import annotations

import dataclasses
import logging
import math
import re
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import geopandas as gpd
import networkx as nx
import numpy as np
import pandas as pd
import pyogrio
import shapely
from shapely import STRtree
from shapely.geometry.base import BaseGeometry

from routerisk import CAUTION, __version__
from routerisk._cli_text import WHAT_IF_HELP  # also shown by review --help
from routerisk.analysis.scoring import rules_in_force
from routerisk.errors import InputFileError, OptionError
from routerisk.io.atomic import (
    atomic_directory,
    check_target,
    dumps_json,
    provenance,
    write_text_atomic,
)
from routerisk.network.tagging import CROSSING_SNAP_M
from routerisk.profile import DAYS, MAX_FACTOR, MINUTES_PER_WEEK, Profile
from routerisk.render import report

if TYPE_CHECKING:  # pragma: no cover - typing only
    import folium

    from routerisk.network.folder import Network

log = logging.getLogger(__name__)

KPH_PER_MPH = 1.609344
#: Speed bands (upper bound in mph, inclusive; label). Speeds are the edges' ``speed_kph``.
SPEED_BANDS_MPH = (
    (25.0, "<= 25 mph", "le25mph"),
    (35.0, "26-35 mph", "26to35mph"),
    (45.0, "36-45 mph", "36to45mph"),
    (math.inf, "> 45 mph", "gt45mph"),
)
HOURS_PER_WEEK = 168
#: Clipped pieces shorter than this (m) are boundary touches, not streets in the area.
MIN_CLIP_M = 1e-3
#: Map colour of the hot-spot halo (distinct from every band and category colour).
HOTSPOT_COLOUR = "#111111"
LENGTH_BASIS = (
    "network_km and every km figure count directed edges: each direction of a two-way street "
    "counts once (what a vehicle may drive); centreline_km counts each street once."
)
HOUR_BASIS = (
    "closed_km_by_hour has 168 values, hour 0 = Monday 00:00-01:00 local time of the network; "
    "an edge is closed in an hour if any hard rule covering it is in force at any minute of "
    "that hour. exposure_by_hour applies each category's time profile, and the baseline's "
    "and the crossings' time profiles when the profile gives them (hour means of the "
    "minute multipliers)."
)
INFLUENCE_BASIS = (
    "km_in_influence = clipped length x the edge's share of length inside the category's "
    "influence (infl_<category>, measured on the whole edge)."
)


# ---------------------------------------------------------------------------------- areas


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


# -------------------------------------------------------------------------------- what-ifs


@dataclass(frozen=True)
class Change:
    """One change of a what-if: ``rule`` (value ``off`` / ``on``) or ``weight`` (a number)."""

    kind: str
    target: str
    value: str | float
    spec: str


@dataclass(frozen=True)
class WhatIf:
    """A scenario: changes applied together to a copy of the profile."""

    label: str
    changes: tuple[Change, ...]


def parse_what_if(specs: Sequence[str], profile: Profile, *, option: str = "--what-if") -> WhatIf:
    """Parse the SPECs of one scenario against ``profile``.

    Raises
    ------
    OptionError
        A SPEC is malformed or names an unknown rule or category.
    """
    changes = []
    if not specs:
        raise OptionError("needs at least one SPEC", field=option)
    rule_names = [r.name for r in profile.rules]
    for spec in specs:
        kind, sep, rest = spec.partition(":")
        target, eq, value = rest.rpartition("=")
        kind, target, value = kind.strip().lower(), target.strip(), value.strip()
        if not sep or not eq or not target:
            raise OptionError(f"bad SPEC {spec!r}; {WHAT_IF_HELP}", field=option)
        if kind == "rule":
            if target not in rule_names:
                known = ", ".join(repr(n) for n in rule_names) or "none"
                raise OptionError(
                    f"unknown rule {target!r} in {spec!r}; the profile's rules: {known}",
                    field=option,
                )
            if value.lower() not in ("off", "on"):
                raise OptionError(
                    f"a rule is set 'off' or 'on', got {value!r} in {spec!r}", field=option
                )
            changes.append(Change("rule", target, value.lower(), spec))
        elif kind == "weight":
            if target not in profile.category_names:
                raise OptionError(
                    f"unknown category {target!r} in {spec!r}; categories: "
                    f"{', '.join(profile.category_names)}",
                    field=option,
                )
            try:
                w = float(value)
            except ValueError:
                raise OptionError(
                    f"weight must be a number, got {value!r} in {spec!r}", field=option
                ) from None
            if not math.isfinite(w) or w < 0 or w > MAX_FACTOR:
                raise OptionError(
                    f"weight must be a finite number >= 0 and <= {MAX_FACTOR:g}, got {value!r}",
                    field=option,
                )
            changes.append(Change("weight", target, w, spec))
        else:
            raise OptionError(f"unknown kind {kind!r} in {spec!r}; {WHAT_IF_HELP}", field=option)
    return WhatIf(" ".join(specs), tuple(changes))


def apply_what_if(profile: Profile, what_if: WhatIf) -> Profile:
    """Return a copy of the frozen ``profile`` with the scenario's changes applied."""
    rules = list(profile.rules)
    cats = list(profile.categories)
    for ch in what_if.changes:
        if ch.kind == "rule":
            if ch.value == "off":
                rules = [r for r in rules if r.name != ch.target]
            else:
                rules = [
                    dataclasses.replace(r, windows=()) if r.name == ch.target else r for r in rules
                ]
        else:
            cats = [
                dataclasses.replace(c, weight=float(ch.value)) if c.name == ch.target else c
                for c in cats
            ]
    return dataclasses.replace(profile, rules=tuple(rules), categories=tuple(cats))


_AT = re.compile(r"^\s*([a-z]{3})[a-z]*[\s@T_-]*(\d{1,2}):(\d{2})\s*$", re.IGNORECASE)


def parse_time(text: str, *, option: str = "--at") -> int:
    """Return the minute of the week of ``'wed 08:15'`` (Monday 00:00 = 0, local time)."""
    mt = _AT.match(text)
    if not mt or mt.group(1).lower() not in DAYS:
        raise OptionError(
            f"must be a day and a time such as 'wed 08:15', got {text!r}", field=option
        )
    hh, mm = int(mt.group(2)), int(mt.group(3))
    if hh > 23 or mm > 59:
        raise OptionError(f"time out of range in {text!r}", field=option)
    return DAYS.index(mt.group(1).lower()) * 1440 + hh * 60 + mm


def minute_label(minute: int) -> str:
    """Return ``'Wed 08:15'`` for a minute of the week."""
    m = int(minute) % MINUTES_PER_WEEK
    return f"{report.DAY_LABELS[m // 1440]} {(m % 1440) // 60:02d}:{m % 60:02d}"


# ------------------------------------------------------------------------------- clipping


def _lines_only(geom: BaseGeometry) -> BaseGeometry:
    """Return the linear parts of an intersection (points where it touches are dropped)."""
    if geom.geom_type in ("LineString", "MultiLineString"):
        return geom
    parts = [g for g in shapely.get_parts(geom) if g.geom_type in ("LineString", "MultiLineString")]
    if len(parts) == 1:
        return parts[0]
    return shapely.multilinestrings([ln for g in parts for ln in shapely.get_parts(g)])


def clip_edges(
    edges: gpd.GeoDataFrame, geometry: BaseGeometry, *, tree: STRtree | None = None
) -> gpd.GeoDataFrame:
    """Return the edges that run inside ``geometry``, with their geometry clipped to it.

    Adds ``clip_m`` (edge ``length`` x share of its geometry inside the polygon) and
    ``clip_share``. Edges that only touch the boundary are left out.

    Parameters
    ----------
    edges
        Tagged edges in the projected CRS (index ``u, v, key``).
    geometry
        The area polygon in the same CRS.
    tree
        An STRtree of ``edges.geometry`` to reuse across areas.
    """
    geoms = edges.geometry.to_numpy()
    tree = tree if tree is not None else STRtree(geoms)
    idx = np.sort(tree.query(geometry, predicate="intersects"))
    sub = edges.iloc[idx]
    shapely.prepare(geometry)
    clipped = shapely.intersection(sub.geometry.to_numpy(), geometry)
    full = shapely.length(sub.geometry.to_numpy())
    part = shapely.length(clipped)
    share = np.divide(part, full, out=np.zeros_like(part), where=full > 0)
    clip_m = share * sub["length"].to_numpy(dtype=float)
    keep = part > MIN_CLIP_M
    out = sub.loc[keep].copy()
    out["clip_share"] = share[keep]
    out["clip_m"] = clip_m[keep]
    out = out.set_geometry(
        gpd.GeoSeries([_lines_only(g) for g in clipped[keep]], index=out.index, crs=edges.crs)
    )
    return out


def _street_key(u: np.ndarray, v: np.ndarray, length: np.ndarray) -> list[tuple[Any, ...]]:
    """Return a key shared by the two directions of a two-way street segment."""
    lo = np.minimum(u, v)
    hi = np.maximum(u, v)
    return list(zip(lo.tolist(), hi.tolist(), np.round(length, 1).tolist(), strict=True))


def _r(x: float, digits: int = 4) -> float:
    v = round(float(x), digits)
    return 0.0 if v == 0 else v


# --------------------------------------------------------------------------- one area


@dataclass
class _Context:
    """What every area of one review shares: the network, its profile, indexes."""

    net: Network
    tree: STRtree
    hourly_mult: np.ndarray  # (168, n_categories) mean multiplier in each hour
    force_hour: np.ndarray  # (n_rules, 168) rule in force at some minute of the hour
    source_trees: dict[str, tuple[STRtree, np.ndarray, np.ndarray]]
    clip: Callable[..., gpd.GeoDataFrame]  # clip_edges, or a drop-in that clips by tiles

    @classmethod
    def of(cls, net: Network, clip: Callable[..., gpd.GeoDataFrame] | None = None) -> _Context:
        prof = net.profile
        mult = prof.multipliers(np.arange(MINUTES_PER_WEEK))
        hourly = mult.reshape(HOURS_PER_WEEK, 60, -1).mean(axis=1)
        force = np.array(
            [r.by_minute.reshape(HOURS_PER_WEEK, 60).any(axis=1) for r in prof.rules], dtype=bool
        ).reshape(len(prof.rules), HOURS_PER_WEEK)
        trees = {}
        for c in prof.categories:
            part = net.sources[net.sources["category"] == c.name]
            if len(part):
                g = part.geometry.to_numpy()
                trees[c.name] = (STRtree(g), g, part["name"].fillna("").astype(str).to_numpy())
        return cls(
            net, STRtree(net.edges.geometry.to_numpy()), hourly, force, trees, clip or clip_edges
        )


def _closed_matrix(
    clip: pd.DataFrame, profile: Profile, force_hour: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Return cover (n, rules) and closed-by-hour (n, 168) bool arrays."""
    n = len(clip)
    cover = np.zeros((n, len(profile.rules)), dtype=bool)
    for i in range(len(profile.rules)):
        col = f"rule_{i}"
        if col in clip:
            cover[:, i] = clip[col].to_numpy(dtype=bool)
    closed = (cover.astype(np.int64) @ force_hour.astype(np.int64)) > 0
    return cover, closed


def _names_by_km(names: Iterable[str], km: Iterable[float], limit: int = 6) -> list[str]:
    tally: dict[str, float] = {}
    for nm, k in zip(names, km, strict=True):
        nm = str(nm or "").strip()
        if nm:
            tally[nm] = tally.get(nm, 0.0) + float(k)
    return [n for n, _ in sorted(tally.items(), key=lambda t: (-t[1], t[0]))][:limit]


def connectivity(clip: pd.DataFrame, closed: np.ndarray) -> dict[str, Any]:
    """Return the strongly connected parts of the area's graph without the closed edges.

    Parameters
    ----------
    clip
        Clipped edges of the area (index ``u, v, key``; ``clip_m``, ``name``).
    closed
        One bool per row: the edge is closed.

    Returns
    -------
    dict
        ``parts`` (largest first: ``km`` directed, ``centreline_km``, ``nodes``, ``edges``,
        ``streets``), ``open_km``, ``closed_km``, ``km_between_parts`` (open edges from one
        part to another, drivable one way only), ``nodes_without_open_edge`` and
        ``largest_share`` (largest part km / open km).
    """
    u = clip.index.get_level_values(0).to_numpy()
    v = clip.index.get_level_values(1).to_numpy()
    km = clip["clip_m"].to_numpy(dtype=float) / 1000.0
    names = clip["name"].fillna("").astype(str).to_numpy()
    skey = _street_key(u, v, clip["length"].to_numpy(dtype=float))
    open_ = ~np.asarray(closed, dtype=bool)
    G = nx.DiGraph()
    G.add_edges_from(zip(u[open_].tolist(), v[open_].tolist(), strict=True))
    comp: dict[Any, int] = {}
    sccs = sorted((sorted(s) for s in nx.strongly_connected_components(G)), key=lambda s: s[0])
    for ci, nodes in enumerate(sccs):
        for nd in nodes:
            comp[nd] = ci
    part_rows: dict[int, list[int]] = {}
    between = 0.0
    for j in np.flatnonzero(open_):
        cu, cv = comp[u[j]], comp[v[j]]
        if cu == cv:
            part_rows.setdefault(cu, []).append(int(j))
        else:
            between += km[j]
    parts = []
    for ci, rows in part_rows.items():
        rows_a = np.array(rows)
        parts.append(
            {
                "km": _r(km[rows_a].sum()),
                "centreline_km": _r(sum(km[j] for j in {skey[r]: r for r in rows}.values())),
                "nodes": len(sccs[ci]),
                "edges": len(rows),
                "streets": _names_by_km(names[rows_a], km[rows_a]),
            }
        )
    parts.sort(key=lambda p: (-p["km"], -p["nodes"], p["streets"][:1]))
    open_km = float(km[open_].sum())
    all_nodes = set(u.tolist()) | set(v.tolist())
    touched = set(u[open_].tolist()) | set(v[open_].tolist())
    return {
        "parts": parts,
        "parts_count": len(parts),
        "open_km": _r(open_km),
        "closed_km": _r(km[~open_].sum()),
        "km_between_parts": _r(between),
        "nodes_without_open_edge": len(all_nodes - touched),
        "largest_share": _r(parts[0]["km"] / open_km) if parts and open_km > 0 else None,
    }


def _high_bands(profile: Profile, high_bands: Sequence[str] | None) -> list[str]:
    names = [b.name for b in profile.bands]
    if high_bands is None:
        return names[max(1, len(names) // 2) :]
    unknown = [b for b in high_bands if b not in names]
    if unknown:
        raise OptionError(
            f"unknown band {unknown[0]!r}; the profile's bands: {', '.join(names)}",
            field="--high-from",
        )
    return list(high_bands)


def high_bands_from(profile: Profile, band: str) -> list[str]:
    """Return ``band`` and every band above it."""
    names = [b.name for b in profile.bands]
    if band not in names:
        raise OptionError(
            f"unknown band {band!r}; the profile's bands: {', '.join(names)}", field="--high-from"
        )
    return names[names.index(band) :]


def _clusters(
    ctx: _Context,
    clip: gpd.GeoDataFrame,
    area: Area,
    high: Sequence[str],
    skey: list[tuple[Any, ...]],
    exposure: np.ndarray,
) -> list[dict[str, Any]]:
    """Group adjacent high-band edges (sharing a node inside the area) into clusters."""
    hi = np.flatnonzero(clip["band"].isin(list(high)).to_numpy())
    if len(hi) == 0:
        return []
    u = clip.index.get_level_values(0).to_numpy()
    v = clip.index.get_level_values(1).to_numpy()
    ends = np.unique(np.concatenate([u[hi], v[hi]]))
    nodes = ctx.net.nodes
    xy = nodes.loc[ends, ["x", "y"]].to_numpy(dtype=float)
    inside = dict(
        zip(ends.tolist(), shapely.covers(area.geometry, shapely.points(xy)), strict=True)
    )
    G = nx.Graph()
    for j in hi.tolist():
        a = u[j] if inside[u[j]] else ("outside", j, 0)
        b = v[j] if inside[v[j]] else ("outside", j, 1)
        G.add_edge(a, b)
    label = {}
    for ci, comp in enumerate(nx.connected_components(G)):
        for nd in comp:
            label[nd] = ci
    groups: dict[int, list[int]] = {}
    for j in hi.tolist():
        a = u[j] if inside[u[j]] else ("outside", j, 0)
        groups.setdefault(label[a], []).append(j)
    km = clip["clip_m"].to_numpy(dtype=float) / 1000.0
    names = clip["name"].fillna("").astype(str).to_numpy()
    bands = clip["band"].astype(str).to_numpy()
    order = {b.name: i for i, b in enumerate(ctx.net.profile.bands)}
    out = []
    for rows in groups.values():
        ra = np.array(rows)
        streets = {skey[j]: j for j in rows}
        out.append(
            {
                "km": _r(km[ra].sum()),
                "centreline_km": _r(sum(km[j] for j in streets.values())),
                "segments": len(streets),
                "exposure": _r(exposure[ra].sum()),
                "top_band": max(set(bands[ra].tolist()), key=lambda b: order.get(b, -1)),
                "streets": _names_by_km(names[ra], km[ra]),
                "edges": [
                    [_jsonable(u[j]), _jsonable(v[j])]
                    for j in sorted(rows, key=lambda r: (str(u[r]), str(v[r])))
                ],
            }
        )
    out.sort(key=lambda c: (-c["km"], -c["exposure"], c["streets"][:1]))
    for i, c in enumerate(out, start=1):
        c["cluster"] = i
    return out


def _jsonable(x: Any) -> Any:
    if isinstance(x, np.integer):
        return int(x)
    if isinstance(x, np.floating):
        return float(x)
    return x


def _hotspots(
    ctx: _Context,
    clip: gpd.GeoDataFrame,
    skey: list[tuple[Any, ...]],
    exposure: np.ndarray,
    top: int,
) -> list[dict[str, Any]]:
    """Return the top street segments by exposure (exposure per km x clipped km)."""
    prof = ctx.net.profile
    u = clip.index.get_level_values(0).to_numpy()
    v = clip.index.get_level_values(1).to_numpy()
    k = clip.index.get_level_values(2).to_numpy()
    first: dict[tuple[Any, ...], int] = {}
    count: dict[tuple[Any, ...], int] = {}
    for j, key in enumerate(skey):
        count[key] = count.get(key, 0) + 1
        if key not in first or exposure[j] > exposure[first[key]]:
            first[key] = j
    names = clip["name"].fillna("").astype(str).to_numpy()
    ranked = sorted(
        first.items(), key=lambda t: (-exposure[t[1]], names[t[1]], str(u[t[1]]), str(v[t[1]]))
    )
    per_km = clip["exposure_km"].to_numpy(dtype=float)
    out = []
    for key, j in ranked[: max(0, int(top))]:
        reasons = []
        row = clip.iloc[j]
        parts = [(c, c.weight * float(row[f"exp_{c.name}"])) for c in prof.categories]
        for c, val in sorted(parts, key=lambda t: -t[1]):
            if val <= 0 or len(reasons) == 3:
                continue
            near = ""
            if c.name in ctx.source_trees:
                tree, _, src_names = ctx.source_trees[c.name]
                near = str(src_names[int(tree.nearest(row.geometry))])
            reasons.append(
                {
                    "category": c.name,
                    "label": c.label,
                    "share": _r(val / per_km[j]) if per_km[j] > 0 else 0.0,
                    "near": near,
                }
            )
        out.append(
            {
                "u": _jsonable(u[j]),
                "v": _jsonable(v[j]),
                "key": _jsonable(k[j]),
                "street": names[j],
                "highway": str(row["highway"]),
                "band": str(row["band"]),
                "km": _r(row["clip_m"] / 1000.0),
                "exposure_km": _r(per_km[j]),
                "exposure": _r(exposure[j]),
                "directions": count[key],
                "edge_crossings": int(row["crossings"]),
                "reasons": reasons,
            }
        )
    return out


def _review_area(
    ctx: _Context,
    area: Area,
    *,
    at: int | None = None,
    top: int = 10,
    high_bands: Sequence[str] | None = None,
) -> tuple[dict[str, Any], gpd.GeoDataFrame]:
    """Return the figures of one area and its clipped edges.

    Raises
    ------
    InputFileError
        No street of the network runs inside the area.
    """
    net = ctx.net
    prof = net.profile
    clip = ctx.clip(net.edges, area.geometry, tree=ctx.tree)
    if len(clip) == 0:
        raise InputFileError(
            f"area {area.name!r} lies entirely off the road network",
            path=area.source,
            field=area.field,
        )
    u = clip.index.get_level_values(0).to_numpy()
    v = clip.index.get_level_values(1).to_numpy()
    km = clip["clip_m"].to_numpy(dtype=float) / 1000.0
    skey = _street_key(u, v, clip["length"].to_numpy(dtype=float))
    one_per_street = np.zeros(len(clip), dtype=bool)
    one_per_street[list({key: j for j, key in enumerate(skey)}.values())] = True
    network_km = float(km.sum())
    centreline_km = float(km[one_per_street].sum())

    bands = clip["band"].astype(str).to_numpy()
    km_by_band = {b.name: _r(km[bands == b.name].sum()) for b in prof.bands}
    cl_by_band = {b.name: _r(km[(bands == b.name) & one_per_street].sum()) for b in prof.bands}

    infl = {}
    infl_share = {}
    for c in prof.categories:
        val = float((km * clip[f"infl_{c.name}"].to_numpy(dtype=float)).sum())
        infl[c.name] = _r(val)
        infl_share[c.name] = _r(val / network_km)

    srcs = net.sources
    sources_near = {}
    sources_inside = {}
    for c in prof.categories:
        g = srcs.geometry[srcs["category"] == c.name].to_numpy()
        sources_near[c.name] = (
            int(shapely.dwithin(g, area.geometry, c.radius_m).sum()) if len(g) else 0
        )
        sources_inside[c.name] = int(shapely.intersects(g, area.geometry).sum()) if len(g) else 0

    n_cross = 0
    if len(net.crossings):
        pts = net.crossings.geometry.to_numpy()
        inside = pts[shapely.intersects(pts, area.geometry)]
        if len(inside):
            line_tree = STRtree(clip.geometry.to_numpy())
            pi, _ = line_tree.query(inside, predicate="dwithin", distance=CROSSING_SNAP_M)
            n_cross = len(np.unique(pi))

    mph = np.round(clip["speed_kph"].to_numpy(dtype=float) / KPH_PER_MPH, 6)
    speed_km = {}
    lower = -math.inf
    for upper, label, _ in SPEED_BANDS_MPH:
        sel = (mph > lower) & (mph <= upper)
        speed_km[label] = _r(km[sel].sum())
        lower = upper

    weights = np.array([c.weight for c in prof.categories])
    exp_mat = clip[[f"exp_{c.name}" for c in prof.categories]].to_numpy(dtype=float)
    per_km = clip["exposure_km"].to_numpy(dtype=float)
    exposure = per_km * km
    fixed = float((km * (per_km - exp_mat @ weights)).sum())  # baseline and crossings
    by_cat = (km[:, None] * exp_mat * weights[None, :]).sum(axis=0)
    exposure_by_hour = fixed + ctx.hourly_mult @ by_cat
    if prof.baseline_time_profile or prof.crossing_time_profile:
        # baseline and crossings follow their own time profiles: the hour's mean multiplier
        base_km = float((km * clip["baseline"].to_numpy(dtype=float)).sum())
        base_h, cross_h = (
            np.asarray(a).reshape(HOURS_PER_WEEK, 60).mean(axis=1)
            for a in prof.street_multipliers(np.arange(MINUTES_PER_WEEK))
        )
        exposure_by_hour = base_km * base_h + (fixed - base_km) * cross_h + ctx.hourly_mult @ by_cat

    cover, closed = _closed_matrix(clip, prof, ctx.force_hour)
    closed_by_hour = km @ closed
    by_rule = {}
    rules_out = []
    for i, rule in enumerate(prof.rules):
        per_hour = km @ (cover[:, [i]] & ctx.force_hour[i][None, :])
        by_rule[rule.name] = [_r(x) for x in per_hour]
        rules_out.append(
            {
                "rule": rule.name,
                "covers_km": _r(km[cover[:, i]].sum()),
                "hours_in_force": int(ctx.force_hour[i].sum()),
                "closed_km_hours": _r(per_hour.sum(), 3),
            }
        )
    peak = int(np.argmax(closed_by_hour)) if len(closed_by_hour) else 0
    conn = {
        "peak": {
            "hour": peak,
            "label": report.HOUR_LABELS[peak],
            **connectivity(clip, closed[:, peak]),
        },
        "none_closed": connectivity(clip, np.zeros(len(clip), dtype=bool)),
    }
    if at is not None:
        now = rules_in_force(clip, prof, at).any(axis=1)
        conn["at"] = {"minute": int(at), "label": minute_label(at), **connectivity(clip, now)}

    high = _high_bands(prof, high_bands)
    out = {
        "name": area.name,
        "feature": area.index,
        "area_km2": _r(area.geometry.area / 1e6),
        "network_km": _r(network_km),
        "centreline_km": _r(centreline_km),
        "edges": int(len(clip)),
        "km_by_band": km_by_band,
        "centreline_km_by_band": cl_by_band,
        "km_in_influence": infl,
        "share_in_influence": infl_share,
        "sources": sources_near,
        "sources_inside": sources_inside,
        "crossings": n_cross,
        "crossings_per_km": _r(n_cross / centreline_km) if centreline_km > 0 else 0.0,
        "km_by_speed": speed_km,
        "exposure": _r(exposure.sum()),
        "exposure_per_km": _r(exposure.sum() / network_km),
        "exposure_by_hour": [_r(x) for x in exposure_by_hour],
        "high_bands": list(high),
        "km_in_high_bands": _r(km[np.isin(bands, list(high))].sum()),
        "hotspots": _hotspots(ctx, clip, skey, exposure, top),
        "clusters": _clusters(ctx, clip, area, high, skey, exposure),
        "closed_km_by_hour": [_r(x) for x in closed_by_hour],
        "closed_km_by_rule": by_rule,
        "closed_km_hours": _r(closed_by_hour.sum(), 3),
        "closed_peak": {
            "hour": peak,
            "label": report.HOUR_LABELS[peak],
            "km": _r(closed_by_hour[peak]),
        },
        "rules": rules_out,
        "allowed_parts": conn["peak"]["parts"],
        "connectivity": conn,
    }
    clip = clip.assign(_exposure=exposure)
    return out, clip


# ------------------------------------------------------------------------------ the review


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


def _compare(base: dict[str, Any], new: dict[str, Any]) -> dict[str, Any]:
    def delta(key: str) -> float:
        return _r(new[key] - base[key])

    bands = sorted(set(base["km_by_band"]) | set(new["km_by_band"]))
    return {
        "name": new["name"],
        "closed_km_hours": new["closed_km_hours"],
        "closed_km_hours_change": _r(new["closed_km_hours"] - base["closed_km_hours"], 3),
        "closed_peak_km": new["closed_peak"]["km"],
        "closed_peak_km_change": _r(new["closed_peak"]["km"] - base["closed_peak"]["km"]),
        "closed_km_by_hour": new["closed_km_by_hour"],
        "closed_km_by_hour_change": [
            _r(a - b)
            for a, b in zip(new["closed_km_by_hour"], base["closed_km_by_hour"], strict=True)
        ],
        "closed_km_by_rule": new["closed_km_by_rule"],
        "exposure": new["exposure"],
        "exposure_change": delta("exposure"),
        "km_by_band": new["km_by_band"],
        "km_by_band_change": {
            b: _r(new["km_by_band"].get(b, 0.0) - base["km_by_band"].get(b, 0.0)) for b in bands
        },
        "km_in_high_bands": new["km_in_high_bands"],
        "km_in_high_bands_change": delta("km_in_high_bands"),
        "allowed_parts_count": len(new["allowed_parts"]),
        "allowed_parts_count_change": len(new["allowed_parts"]) - len(base["allowed_parts"]),
    }


# ------------------------------------------------------------------------- table and files


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


def review_csv(review: Review) -> str:
    """Return the comparison table as CSV text (directed km; see the JSON notes)."""
    return comparison_table(review).to_csv(index=False, lineterminator="\n")


def write_review(
    review: Review,
    *,
    out: str | Path | None = None,
    report_path: str | Path | None = None,
    force: bool = False,
    tiles: Any = None,
    bands: str = "fixed",
) -> list[Path]:
    """Write ``areas.csv``, ``areas.json`` and ``report.html`` to ``out``, and/or a report.

    The folder is assembled under a temporary name and moved into place when complete.
    """
    written: list[Path] = []
    if out is None and report_path is None:
        return written
    if out is not None:
        check_target(out, force=force)
    if report_path is not None:
        check_target(report_path, force=force)
    page = review_html(review, tiles=tiles, bands=bands)
    if out is not None:
        with atomic_directory(out, force=force) as tmp:
            write_text_atomic(tmp / "areas.csv", review_csv(review))
            write_text_atomic(tmp / "areas.json", dumps_json(review.to_json()) + "\n")
            report.write_report(tmp / "report.html", page)
        written += [Path(out) / n for n in ("areas.csv", "areas.json", "report.html")]
    if report_path is not None:
        written.append(report.write_report(report_path, page, force=force))
    return written


# ------------------------------------------------------------------------------ map and HTML


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


def _fmt_share(x: float | None) -> str:
    return "" if x is None else f"{100.0 * x:.1f} %"


def _area_section(review: Review, a: dict[str, Any], idx: int) -> str:
    prof = review.profile
    labels = {c.name: c.label for c in prof.categories}
    r = report
    parts = []
    parts.append(
        r.pairs_html(
            [
                ("area (km²)", a["area_km2"]),
                (
                    "network km (directed edges: both directions of two-way streets)",
                    a["network_km"],
                ),
                ("centreline km (each street once)", a["centreline_km"]),
                ("street edges in the area", a["edges"]),
                ("exposure (exposure per km x km, time multipliers 1)", a["exposure"]),
                ("exposure per km", a["exposure_per_km"]),
                ("crossings in the area", a["crossings"]),
                ("crossings per centreline km", a["crossings_per_km"]),
            ],
            caption="In figures",
        )
    )
    band_rows = [
        {
            "band": b.name,
            "from": b.lower,
            "km": a["km_by_band"][b.name],
            "centreline_km": a["centreline_km_by_band"][b.name],
            "share": _fmt_share(a["km_by_band"][b.name] / a["network_km"]),
        }
        for b in prof.bands
    ]
    parts.append(
        r.table_html(
            band_rows,
            [
                ("band", "exposure band"),
                ("from", "from (per km)"),
                ("km", "km (directed)"),
                ("centreline_km", "centreline km"),
                ("share", "share"),
            ],
            caption="Length by exposure band",
        )
    )
    from routerisk.render import mapview

    fig = r.bar_chart(
        [b.name for b in prof.bands],
        [a["km_by_band"][b.name] for b in prof.bands],
        title=f"{a['name']}: km by exposure band (directed)",
        xlabel="km",
        colours=[mapview.band_colour(prof, b.name) for b in prof.bands],
    )
    parts.append(r.figure_html(fig, alt=f"km by exposure band in {a['name']}"))
    infl_rows = [
        {
            "category": labels[c],
            "km": a["km_in_influence"][c],
            "share": _fmt_share(a["share_in_influence"][c]),
            "inside": a["sources_inside"][c],
            "near": a["sources"][c],
            "radius": prof.category(c).radius_m,
        }
        for c in prof.category_names
    ]
    parts.append(
        r.table_html(
            infl_rows,
            [
                ("category", "category"),
                ("km", "km in its influence"),
                ("share", "share of network"),
                ("inside", "sources inside"),
                ("near", "sources inside or within radius"),
                ("radius", "radius (m)"),
            ],
            caption="Near vulnerable pedestrians",
            digits={"radius": 0},
        )
    )
    parts.append(r.note_html(INFLUENCE_BASIS))
    parts.append(
        r.table_html(
            [{"speed": k, "km": v} for k, v in a["km_by_speed"].items()],
            [("speed", "speed band"), ("km", "km (directed)")],
            caption="Length by speed",
        )
    )
    hs_rows = [
        {
            "rank": i,
            "street": h["street"] or "(unnamed)",
            "highway": h["highway"],
            "band": h["band"],
            "km": h["km"],
            "exposure_km": h["exposure_km"],
            "exposure": h["exposure"],
            "directions": h["directions"],
            "reasons": "; ".join(
                f"{x['label']} {x['share']:.0%}" + (f" ({x['near']})" if x["near"] else "")
                for x in h["reasons"]
            )
            or "baseline only",
        }
        for i, h in enumerate(a["hotspots"], start=1)
    ]
    parts.append(
        r.table_html(
            hs_rows,
            [
                ("rank", "#"),
                ("street", "street"),
                ("highway", "road class"),
                ("band", "band"),
                ("km", "km in area"),
                ("exposure_km", "exposure per km"),
                ("exposure", "exposure (per direction)"),
                ("directions", "directions"),
                ("reasons", "reasons (share of exposure per km)"),
            ],
            caption="Hot spots",
        )
    )
    cl_rows = [
        {
            "cluster": c["cluster"],
            "km": c["km"],
            "centreline_km": c["centreline_km"],
            "segments": c["segments"],
            "top_band": c["top_band"],
            "exposure": c["exposure"],
            "streets": ", ".join(c["streets"]),
        }
        for c in a["clusters"]
    ]
    parts.append(
        r.table_html(
            cl_rows,
            [
                ("cluster", "#"),
                ("km", "km (directed)"),
                ("centreline_km", "centreline km"),
                ("segments", "segments"),
                ("top_band", "top band"),
                ("exposure", "exposure"),
                ("streets", "streets"),
            ],
            caption=f"Clusters of adjacent streets in the bands {', '.join(a['high_bands'])}",
        )
        if cl_rows
        else r.note_html(f"No street of the area is in the bands {', '.join(a['high_bands'])}.")
    )
    # Hard rules
    series = {"closed by any rule": a["closed_km_by_hour"]}
    if len(prof.rules) > 1:
        series.update({f"rule: {k}": v for k, v in a["closed_km_by_rule"].items()})
    rule_parts = []
    if prof.rules:
        fig = r.week_chart(
            series,
            title=f"{a['name']}: km closed by the hard rules, by hour",
            ylabel="km closed (directed)",
        )
        rule_parts.append(
            r.figure_html(fig, alt=f"km closed by hour in {a['name']}", caption=HOUR_BASIS)
        )
        rule_parts.append(
            r.table_html(
                a["rules"],
                [
                    ("rule", "rule"),
                    ("covers_km", "km it covers"),
                    ("hours_in_force", "hours a week in force"),
                    ("closed_km_hours", "km-hours closed a week"),
                ],
                caption="Hard rules",
            )
        )
        pk = a["closed_peak"]
        rule_parts.append(
            r.paragraph(
                f"Most closed: {pk['km']:.3f} km at {pk['label']} "
                f"({_fmt_share(pk['km'] / a['network_km'])} of the area's network); "
                f"{a['closed_km_hours']:.3f} km-hours a week in all."
            )
        )
    else:
        rule_parts.append(r.note_html("The profile has no hard rules."))
    conn = a["connectivity"]
    blocks = [("peak", f"at the most closed hour, {conn['peak']['label']}")]
    if "at" in conn:
        blocks.append(("at", f"at the chosen time, {conn['at']['label']}"))
    blocks.append(("none_closed", "with nothing closed"))
    for key, title in blocks:
        c = conn[key]
        rows = [
            {
                "part": i,
                "km": p["km"],
                "centreline_km": p["centreline_km"],
                "nodes": p["nodes"],
                "streets": ", ".join(p["streets"]),
            }
            for i, p in enumerate(c["parts"], start=1)
        ]
        rule_parts.append(
            r.table_html(
                rows,
                [
                    ("part", "part"),
                    ("km", "km (directed)"),
                    ("centreline_km", "centreline km"),
                    ("nodes", "nodes"),
                    ("streets", "main streets"),
                ],
                caption=f"Strongly connected parts of the open network {title}",
            )
        )
        rule_parts.append(
            r.note_html(
                f"{c['parts_count']} part(s); open {c['open_km']:.3f} km, closed "
                f"{c['closed_km']:.3f} km; {c['km_between_parts']:.3f} km of open one-way links "
                f"between parts; {c['nodes_without_open_edge']} node(s) with no open edge; "
                f"largest part {_fmt_share(c['largest_share'])} of the open km."
            )
        )
    fig = r.week_chart(
        {"exposure": a["exposure_by_hour"]},
        title=f"{a['name']}: exposure through the week (time profiles)",
        ylabel="exposure",
    )
    return r.section(
        f"Area: {a['name']}",
        *parts,
        r.section("Under the hard rules", *rule_parts, level=3, anchor_id=f"area-{idx}-rules"),
        r.section(
            "Exposure by hour",
            r.figure_html(
                fig,
                alt=f"exposure by hour in {a['name']}",
                caption="Mean time multiplier of each hour applied to the area's streets.",
            ),
            level=3,
            anchor_id=f"area-{idx}-hours",
        ),
        anchor_id=f"area-{idx}",
    )


def _what_if_section(review: Review) -> str:
    r = report
    blocks = []
    for s in review.what_ifs:
        rows = [
            {
                "area": x["name"],
                "closed_kmh": x["closed_km_hours"],
                "closed_kmh_change": x["closed_km_hours_change"],
                "peak": x["closed_peak_km"],
                "peak_change": x["closed_peak_km_change"],
                "exposure": x["exposure"],
                "exposure_change": x["exposure_change"],
                "high": x["km_in_high_bands"],
                "high_change": x["km_in_high_bands_change"],
                "parts": x["allowed_parts_count"],
                "parts_change": x["allowed_parts_count_change"],
            }
            for x in s["areas"]
        ]
        blocks.append(
            r.table_html(
                rows,
                [
                    ("area", "area"),
                    ("closed_kmh", "closed km-hours a week"),
                    ("closed_kmh_change", "change"),
                    ("peak", "most closed km"),
                    ("peak_change", "change"),
                    ("exposure", "exposure"),
                    ("exposure_change", "change"),
                    ("high", "km in high bands"),
                    ("high_change", "change"),
                    ("parts", "parts at peak"),
                    ("parts_change", "change"),
                ],
                caption=f"What if {s['label']} (profile {s['profile']})",
            )
        )
    return r.section("What if", r.note_html(WHAT_IF_HELP), *blocks, anchor_id="what-if")


def _profile_section(review: Review) -> str:
    r = report
    prof = review.profile
    cats = [
        {
            "id": c.name,
            "label": c.label,
            "weight": c.weight,
            "radius": c.radius_m,
            "decay": c.decay,
            "time": c.time_profile or "constant 1",
        }
        for c in prof.categories
    ]
    rules = []
    for rule in prof.rules:
        what = []
        if rule.category:
            what.append(f"within {rule.within_m:g} m of {rule.category}")
        if rule.polygons_file:
            what.append(f"inside the polygons of {Path(rule.polygons_file).name}")
        if rule.road_classes:
            what.append("road classes " + ", ".join(rule.road_classes))
        when = (
            "; ".join(
                f"{','.join(w.days)} {w.start // 60:02d}:{w.start % 60:02d}-"
                f"{w.end // 60:02d}:{w.end % 60:02d}"
                for w in rule.windows
            )
            or "at all times"
        )
        rules.append({"name": rule.name, "what": " or ".join(what), "when": when})
    bands = [{"band": b.name, "from": b.lower} for b in prof.bands]
    return r.section(
        "Profile used",
        r.paragraph(f"{prof.name} (fingerprint {prof.fingerprint}). {prof.description}"),
        r.table_html(
            cats,
            [
                ("id", "category"),
                ("label", "label"),
                ("weight", "weight"),
                ("radius", "radius (m)"),
                ("decay", "decay"),
                ("time", "time profile"),
            ],
            caption="Categories",
            digits={"radius": 0},
        ),
        r.table_html(
            rules,
            [("name", "rule"), ("what", "streets it covers"), ("when", "in force")],
            caption="Hard rules",
        )
        if rules
        else r.note_html("No hard rules."),
        r.table_html(
            bands, [("band", "band"), ("from", "from (exposure per km)")], caption="Exposure bands"
        ),
        r.note_html(
            f"Crossing weight {prof.crossing_weight:g}; severity outcome "
            f"{prof.severity_outcome}. The weights are the profile's, not data."
        ),
        r.note_html(_model_text(prof)),
        anchor_id="profile",
    )


def _model_text(prof: Profile) -> str:
    """Return the profile section's note on the time of the baseline, decay steps and scope."""
    from routerisk.analysis.scoring import model_note

    base = prof.baseline_time_profile or "none (the same at all hours)"
    parts = [
        f"Baseline time profile: {base}; crossing time profile: "
        f"{prof.crossing_time_profile or 'none'}."
    ]
    steps = [c.name for c in prof.categories if c.decay == "gaussian"]
    if steps:
        parts.append(
            f"Gaussian decay ({', '.join(steps)}) is cut at the radius: nearness drops "
            "from exp(-2) = 0.135 to 0 there, a step (gaussian_smooth has none)."
        )
    parts.append(f"Risk {model_note(prof)}.")
    return " ".join(parts)


def review_html(review: Review, *, tiles: Any = None, bands: str = "fixed") -> str:
    """Return the self-contained HTML report of a review."""
    r = report
    prof = review.profile
    meta = review.meta
    ts = meta.get("source_timestamp") or "not stated in the source file"
    facts = [
        ("profile", f"{prof.name} (fingerprint {prof.fingerprint})"),
        (
            "network data",
            f"{meta.get('source_name', '')} (sha256 {str(meta.get('source_sha256', ''))[:16]})",
        ),
        ("data date", ts),
        (
            "data licence",
            meta.get("data_licence")
            or "OpenStreetMap data: ODbL 1.0 (c) OpenStreetMap contributors",
        ),
        ("local time zone", _zone_text(meta.get("timezone", "UTC"))),
        ("lengths", LENGTH_BASIS),
    ]
    if review.at is not None:
        facts.append(("chosen time", minute_label(review.at)))
    table = comparison_table(review)
    # one row per figure, one column per area: fits the page however many figures there are
    from routerisk.render import words

    wide = (
        table.drop(
            columns=["profile", "routerisk_version", "network_source_sha256", "area_file_sha256"],
            errors="ignore",
        )
        .set_index("area")
        .T
    )
    wide.insert(0, "figure", [words.heading(str(c)) for c in wide.index])
    body = [
        r.section(
            "Areas side by side",
            r.frame_html(wide, index=False, digits=3),
            r.figure_html(
                r.grouped_bar_chart(
                    [b.name for b in prof.bands],
                    {
                        a["name"]: [a["km_by_band"][b.name] for b in prof.bands]
                        for a in review.areas
                    },
                    title="km by exposure band (directed)",
                    ylabel="km",
                ),
                alt="km by exposure band per area",
            ),
            anchor_id="compare",
        )
    ]
    body.append(
        r.section(
            "Map",
            r.map_html(review_map(review, tiles=tiles, bands=bands), title="map of the areas"),
            r.note_html(
                "Streets are drawn once per segment; hot spots have a "
                "dark halo. The map works offline."
            ),
            anchor_id="map",
        )
    )
    toc = [("compare", "side by side"), ("map", "map")]
    for i, a in enumerate(review.areas):
        body.append(_area_section(review, a, i))
        toc.append((f"area-{i}", a["name"]))
    if review.what_ifs:
        body.append(_what_if_section(review))
        toc.append(("what-if", "what if"))
    body.append(_profile_section(review))
    toc.append(("profile", "profile"))
    body.append(
        r.section(
            "Method",
            r.note_html(LENGTH_BASIS),
            r.note_html(HOUR_BASIS),
            r.note_html(INFLUENCE_BASIS),
            r.note_html(
                "Exposure per km = baseline + sum over categories of weight x nearness + "
                "crossing weight x crossings per km (time multipliers 1); exposure = exposure "
                "per km x km in the area. Hot spots rank street segments by that exposure (one "
                "direction); reasons are the categories with the largest part of the exposure "
                "per km, with the nearest source. Clusters join high-band segments that share a "
                "node inside the area. Connectivity: with the rule-closed streets taken out, the "
                "streets split into separate open parts, each a set of streets that can all be "
                "driven to from each other (strongly connected parts of the directed graph); "
                "edges that cross the boundary count as in the area."
            ),
            anchor_id="method",
        )
    )
    names = ", ".join(a["name"] for a in review.areas)
    return r.page(
        f"Area review: {names}", body, facts=facts, toc=toc, provenance=review.provenance or None
    )


def _zone_text(name: str) -> str:
    from routerisk.network.folder import zone_label

    label = zone_label(name)
    return name if label == name else f"{label} ({name})"
