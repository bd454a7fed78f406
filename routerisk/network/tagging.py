"""Tag every edge with its exposure per category, crossings, baseline and severity.

With a ``likelihood`` block in the profile, edges also get a ``likelihood`` column: the
power-model crash likelihood factor of their speed (see :class:`routerisk.profile.Likelihood`).

Exposure of an edge for a category is the length average of the decayed nearness to the
category's nearest source (or the sum over sources when the category ``stack``s), sampled at
the midpoints of equal pieces of at most ``sample_spacing_m`` along the edge geometry, so a
long edge that touches a school for 50 m is not scored as if it ran past it all the way.
All spatial work is vectorised with shapely 2 STRtree ``dwithin`` queries. The sample points
are indexed once and queried with the (few) sources, each source prepared by GEOS, which
finds the same (point, source) pairs as querying every point against a tree of sources, many
times faster; only categories that ``stack`` query by point, so their sums add up in the
same order as always.
"""

from __future__ import annotations

import logging

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from shapely import STRtree

from routerisk.network.severity import severity_factor
from routerisk.profile import Profile

log = logging.getLogger(__name__)

#: A crossing node counts for an edge when it lies within this distance of its geometry (m).
CROSSING_SNAP_M = 1.0
#: Sample points handled at once while tagging (bounds the memory of large networks).
CHUNK_POINTS = 1_000_000
#: Lines with more vertices than this are sampled with numpy instead of GEOS (faster there;
#: the same points; measured on the shared bench machine: break-even near 20 vertices).
MANY_VERTICES = 24


def _sample_counts(geoms: np.ndarray, spacing: float) -> np.ndarray:
    """Return the number of samples of each line (see :func:`sample_points`)."""
    return np.maximum(1, np.ceil(shapely.length(geoms) / spacing - 1e-9)).astype(np.int64)


def _chunks(geoms: np.ndarray, spacing: float, size: int) -> list[tuple[int, int]]:
    """Return (start, stop) ranges of lines holding about ``size`` samples each."""
    if len(geoms) == 0:
        return []
    ends = np.cumsum(_sample_counts(geoms, spacing))
    cuts = np.searchsorted(ends, np.arange(size, int(ends[-1]), size), side="right")
    bounds = np.unique(np.concatenate([[0], cuts, [len(geoms)]]))
    return [(int(a), int(b)) for a, b in zip(bounds[:-1], bounds[1:], strict=True)]


def sample_points(geoms: np.ndarray, spacing: float) -> tuple[np.ndarray, np.ndarray]:
    """Return sample points along each line and the index of the line each belongs to.

    A line of length L gets n = max(1, ceil(L / spacing)) samples at the midpoints of n
    equal pieces, so the mean over its samples is the midpoint-rule length average.
    """
    n = _sample_counts(geoms, spacing)
    owner = np.repeat(np.arange(len(geoms)), n)
    starts = np.cumsum(n) - n
    j = np.arange(owner.size) - np.repeat(starts, n)
    frac = (j + 0.5) / np.repeat(n, n)
    # GEOS walks a line from its start for every point; numpy walks it once. Both give the
    # same points to the last bit; numpy pays off on lines with many vertices.
    many_lines = np.flatnonzero(shapely.get_num_coordinates(geoms) > MANY_VERTICES)
    if len(many_lines) == 0:
        return shapely.line_interpolate_point(geoms[owner], frac, normalized=True), owner
    many = np.isin(owner, many_lines)
    pts = np.empty(owner.size, dtype=object)
    pts[~many] = shapely.line_interpolate_point(geoms[owner[~many]], frac[~many], normalized=True)
    pts[many] = interpolate_normalized(
        geoms[many_lines], np.searchsorted(many_lines, owner[many]), frac[many]
    )
    return pts, owner


def interpolate_normalized(geoms: np.ndarray, owner: np.ndarray, frac: np.ndarray) -> np.ndarray:
    """Return ``shapely.line_interpolate_point(geoms[owner], frac, normalized=True)``.

    Computed with numpy along the vertex arrays in the very operations GEOS performs
    (``LengthIndexedLine.extractPoint``: segment lengths summed in vertex order, the first
    segment whose running length exceeds ``frac * length``, then ``p0 + (p1 - p0) * t``), so
    the points are the same to the last bit (tests/test_tagging.py compares them), without
    walking each line once per point. Lines that are not simple 2-D LineStrings are left to
    GEOS.
    """
    if len(owner) == 0:
        return shapely.line_interpolate_point(geoms[owner], frac, normalized=True)
    kinds = shapely.get_type_id(geoms)
    if (
        np.any(kinds != shapely.GeometryType.LINESTRING)
        or np.any(shapely.has_z(geoms))
        or np.any(shapely.is_empty(geoms))
    ):
        return shapely.line_interpolate_point(geoms[owner], frac, normalized=True)
    xy, line = shapely.get_coordinates(geoms, return_index=True)
    n_vert = np.bincount(line, minlength=len(geoms))
    if np.any(n_vert < 2):
        return shapely.line_interpolate_point(geoms[owner], frac, normalized=True)
    vstart = np.cumsum(n_vert) - n_vert
    # segment s joins vertices s + line(s) and s + line(s) + 1
    n_seg = n_vert - 1
    sline = np.repeat(np.arange(len(geoms)), n_seg)
    sstart = np.cumsum(n_seg) - n_seg
    pos = np.arange(sline.size) - np.repeat(sstart, n_seg)
    v0 = vstart[sline] + pos
    d = xy[v0 + 1] - xy[v0]
    seglen = np.sqrt(d[:, 0] * d[:, 0] + d[:, 1] * d[:, 1])
    # running length in vertex order, line by line (as GEOS adds: 0.0 + l0 + l1 + ...)
    cum = seglen.copy()
    for k in range(1, int(n_seg.max())):
        at = sstart[n_seg > k] + k
        cum[at] = cum[at - 1] + seglen[at]
    total = cum[sstart + n_seg - 1]
    target = frac * total[owner]
    # first segment of the line whose running length exceeds the target: count the
    # segments of the same line with running length <= target (ties go to the segment)
    keys_line = np.concatenate([sline, owner])
    keys_val = np.concatenate([cum, target])
    kind = np.concatenate([np.zeros(sline.size, np.int8), np.ones(owner.size, np.int8)])
    order = np.lexsort((kind, keys_val, keys_line))
    is_seg = kind[order] == 0
    before = np.cumsum(is_seg) - is_seg  # segments sorted before each entry
    p_order = order[~is_seg] - sline.size
    k = np.empty(owner.size, np.int64)
    k[p_order] = before[~is_seg] - sstart[owner[p_order]]
    past = k >= n_seg[owner]  # beyond the end: the last vertex
    k_safe = np.minimum(k, n_seg[owner] - 1)
    s = sstart[owner] + k_safe
    done_before = np.where(k_safe > 0, cum[np.maximum(s - 1, 0)], 0.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = (target - done_before) / seglen[s]
    p0 = xy[v0[s]]
    p1 = xy[v0[s] + 1]
    out = (p1 - p0) * t[:, None] + p0
    out = np.where((t <= 0.0)[:, None], p0, out)
    out = np.where((t >= 1.0)[:, None], p1, out)
    last = xy[vstart[owner] + n_vert[owner] - 1]
    out = np.where(past[:, None], last, out)
    return shapely.points(out)


def near_pairs(
    points: np.ndarray, sources: np.ndarray, radius: float, *, point_tree: STRtree | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Return (point index, source index) of every pair within ``radius``.

    With ``point_tree`` (an STRtree of ``points``) the sources query the points; the pairs
    are the same as when the points query a tree of the sources.
    """
    if point_tree is None:
        pi, si = STRtree(sources).query(points, predicate="dwithin", distance=radius)
    else:
        si, pi = point_tree.query(sources, predicate="dwithin", distance=radius)
    # by point, then by source: sums over stacked sources add in source order, not in the
    # order a tree happens to visit them (so a tile of the network adds them the same way)
    order = np.lexsort((si, pi))
    return pi[order], si[order]


def category_exposure(
    points: np.ndarray,
    owner: np.ndarray,
    n_edges: int,
    sources: np.ndarray,
    category,
    *,
    point_tree: STRtree | None = None,
) -> tuple[np.ndarray, np.ndarray]:
    """Return (exposure, share of length in influence) per edge for one category.

    ``point_tree`` (an STRtree of ``points``) speeds up categories that do not stack.
    """
    if len(sources) == 0 or n_edges == 0:
        return np.zeros(n_edges), np.zeros(n_edges)
    pi, si = near_pairs(
        points, sources, category.radius_m, point_tree=None if category.stack else point_tree
    )
    near = np.zeros(len(points))
    inside = np.zeros(len(points), dtype=bool)
    if len(pi):
        d = shapely.distance(points[pi], sources[si])
        val = category.nearness(d)
        if category.stack:
            np.add.at(near, pi, val)
        else:
            np.maximum.at(near, pi, val)
        inside[pi] = True
    counts = np.bincount(owner, minlength=n_edges)
    exposure = np.bincount(owner, weights=near, minlength=n_edges) / counts
    share = np.bincount(owner, weights=inside.astype(float), minlength=n_edges) / counts
    return exposure, share


#: Extra reach (m) when picking the edges to sample, so that a sample point that rounding puts
#: a hair nearer to a source than its edge is never missed.
REACH_MARGIN_M = 1.0


def reached_edges(geoms: np.ndarray, by_cat: dict[str, np.ndarray], profile: Profile) -> np.ndarray:
    """Return the positions (ascending) of the edges within reach of some source.

    An edge farther than every category's radius from each of that category's sources has
    no sample point within any radius: its exposure and influence share are exactly 0, as
    sampling would give, so only the edges returned here are sampled. The reach is the
    largest radius of a category that has sources, plus ``REACH_MARGIN_M``.
    """
    radii = [c.radius_m for c in profile.categories if len(by_cat[c.name])]
    if not radii or len(geoms) == 0:
        return np.zeros(0, dtype=np.int64)
    src = np.concatenate([by_cat[c.name] for c in profile.categories if len(by_cat[c.name])])
    _, ei = STRtree(geoms).query(src, predicate="dwithin", distance=max(radii) + REACH_MARGIN_M)
    return np.unique(ei).astype(np.int64)


def baseline(edges: pd.DataFrame, profile: Profile) -> np.ndarray:
    """Return each edge's baseline pedestrian presence (road class x sidewalk multiplier)."""
    by_class = dict(profile.baseline_by_class)
    side = dict(profile.sidewalk)
    codes, uniq = pd.factorize(edges["highway"], use_na_sentinel=False)
    base = np.array([by_class.get(h, profile.baseline_default) for h in uniq], dtype=float)[codes]
    sw = edges["sidewalk"] if "sidewalk" in edges else pd.Series("unknown", index=edges.index)
    codes, uniq = pd.factorize(sw.fillna("unknown"), use_na_sentinel=False)
    mult = np.array([side.get(str(s), side.get("unknown", 1.0)) for s in uniq], dtype=float)[codes]
    return base * mult


def _rule_arrays(
    edges: gpd.GeoDataFrame,
    src_geoms: np.ndarray,
    src_cat: np.ndarray,
    profile: Profile,
    polygons: dict[str, gpd.GeoSeries] | None,
) -> dict[str, np.ndarray]:
    geoms = edges.geometry.to_numpy()
    edge_tree: STRtree | None = None
    out = {}
    for i, rule in enumerate(profile.rules):
        flag = np.zeros(len(edges), dtype=bool)
        if rule.category is not None:
            src = src_geoms[src_cat == rule.category]
            if len(src):
                if edge_tree is None:
                    edge_tree = STRtree(geoms)
                _, ei = edge_tree.query(src, predicate="dwithin", distance=rule.within_m)
                flag[np.unique(ei)] = True
        if rule.polygons_file is not None and polygons and rule.name in polygons:
            polys = polygons[rule.name].to_crs(edges.crs).to_numpy()
            ei, _ = STRtree(polys).query(geoms, predicate="intersects")
            flag[np.unique(ei)] = True
        if rule.road_classes:
            flag |= edges["highway"].isin(rule.road_classes).to_numpy()
        out[f"rule_{i}"] = flag
    return out


def rule_flags(
    edges: gpd.GeoDataFrame,
    sources: gpd.GeoDataFrame,
    profile: Profile,
    polygons: dict[str, gpd.GeoSeries] | None = None,
) -> pd.DataFrame:
    """Return one bool column ``rule_<i>`` per hard rule: True where the rule covers the edge.

    Whether it is in force at a given time is the rule's weekly window, applied when driving.
    """
    return pd.DataFrame(
        _rule_arrays(
            edges, sources.geometry.to_numpy(), sources["category"].to_numpy(), profile, polygons
        ),
        index=edges.index,
    )


def tag_edges(
    edges: gpd.GeoDataFrame,
    sources: gpd.GeoDataFrame,
    crossings: gpd.GeoDataFrame,
    profile: Profile,
    *,
    polygons: dict[str, gpd.GeoSeries] | None = None,
) -> gpd.GeoDataFrame:
    """Return ``edges`` with exposure, influence, crossings, baseline and severity columns.

    Parameters
    ----------
    edges
        Projected edges with ``geometry``, ``length``, ``highway``, ``speed_kph``.
    sources
        Projected sources with ``category`` and ``geometry`` (same CRS).
    crossings
        Projected crossing points (same CRS).
    profile
        The exposure profile.
    polygons
        Rule name -> polygons, for rules that name a polygons file.
    """
    n = len(edges)
    geoms = edges.geometry.to_numpy()
    src_geoms = sources.geometry.to_numpy()
    src_cat = sources["category"].to_numpy()
    new: dict[str, np.ndarray] = {}
    by_cat = {c.name: src_geoms[src_cat == c.name] for c in profile.categories}
    for c in profile.categories:
        new[f"exp_{c.name}"] = np.zeros(n)
        new[f"infl_{c.name}"] = np.zeros(n)
    n_points = 0
    reach = reached_edges(geoms, by_cat, profile)
    near_geoms = geoms[reach]
    # Edges in chunks of about CHUNK_POINTS sample points: an edge's values depend only on
    # its own samples, so the result is the same as in one piece, with bounded memory.
    for lo, hi in _chunks(near_geoms, profile.sample_spacing_m, CHUNK_POINTS):
        pts, owner = sample_points(near_geoms[lo:hi], profile.sample_spacing_m)
        n_points += len(pts)
        point_tree = STRtree(pts) if len(pts) else None
        rows = reach[lo:hi]
        for cat in profile.categories:
            exp, share = category_exposure(
                pts, owner, hi - lo, by_cat[cat.name], cat, point_tree=point_tree
            )
            new[f"exp_{cat.name}"][rows] = exp
            new[f"infl_{cat.name}"][rows] = share
        del pts, owner, point_tree
    n_cross = np.zeros(n, dtype=np.int64)
    if len(crossings):
        cpts = crossings.geometry.to_numpy()
        ci, ei = STRtree(geoms).query(cpts, predicate="dwithin", distance=CROSSING_SNAP_M)
        # A crossing at a node belongs to the edges arriving there, not to those leaving it,
        # so a route driving through the node passes it once.
        along = shapely.line_locate_point(geoms[ei], cpts[ci])
        keep = along > CROSSING_SNAP_M
        n_cross = np.bincount(ei[keep], minlength=n).astype(np.int64)
    new["crossings"] = n_cross
    new["baseline"] = baseline(edges, profile)
    new["severity"] = severity_factor(
        edges["speed_kph"].to_numpy(dtype=float),
        outcome=profile.severity_outcome,
        reference_mph=profile.reference_mph,
    )
    if profile.likelihood is not None or "likelihood" in edges.columns:
        # crash likelihood by speed (power model), only when the profile asks for it, so
        # networks tagged without it keep their columns; scoring multiplies it with severity
        new["likelihood"] = profile.likelihood_factor(edges["speed_kph"].to_numpy(dtype=float))
    # Exposure per km at multiplier 1 (the weights as given), and the band it falls in;
    # summed category by category (not a BLAS product, whose rounding depends on the
    # number of rows), so a tile of the network gets the same values as the whole.
    per_km = new["baseline"].copy()
    for c in profile.categories:
        per_km = per_km + new[f"exp_{c.name}"] * c.weight
    length_km = edges["length"].to_numpy(dtype=float) / 1000.0
    with np.errstate(divide="ignore", invalid="ignore"):
        cross_per_km = np.where(length_km > 0, profile.crossing_weight * n_cross / length_km, 0)
    new["exposure_km"] = per_km + cross_per_km
    new["band"] = profile.band_of(new["exposure_km"])
    new.update(_rule_arrays(edges, src_geoms, src_cat, profile, polygons))
    out = edges.copy()
    again = [c for c in new if c in out.columns]
    for c in again:  # re-tagging tagged edges: replace in place, as before
        out[c] = new.pop(c)
    if new:
        added = pd.DataFrame(new, index=out.index)
        out = gpd.GeoDataFrame(
            pd.concat([pd.DataFrame(out), added], axis=1),
            geometry=edges.geometry.name,
            crs=edges.crs,
        )
    log.info("tag_edges tagged %d edges with %d sample points", len(out), n_points)
    return out
