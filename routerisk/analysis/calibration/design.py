"""The count model's design: sites placed on edges, period multipliers, the design matrix."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from routerisk.io.counts import CountsError
from routerisk.profile import MINUTES_PER_WEEK, Profile

#: Sites farther than this from every edge (metres) are left out and named.
SNAP_LIMIT_M = 30.0


@dataclass
class Placement:
    """Where each site sits on the network."""

    sites: pd.DataFrame  # site, lat, lon, edge row, distance_m, placed (bool)
    left_out: list[tuple[str, float]]  # (site, distance m) farther than the limit


def place_sites(
    net: Any, counts: pd.DataFrame, *, limit_m: float = SNAP_LIMIT_M, path: str | Path | None = None
) -> Placement:
    """Place each site on the nearest edge; sites farther than ``limit_m`` are left out.

    A site outside the network's extent (farther than ``limit_m`` from its bounding box) is
    an error: it is on another map, not beside a street.
    """
    import pyproj
    import shapely

    sites = counts.drop_duplicates("site")[["site", "lat", "lon", "where"]].reset_index(drop=True)
    tr = pyproj.Transformer.from_crs("EPSG:4326", net.edges.crs, always_xy=True)
    x, y = tr.transform(sites["lon"].to_numpy(), sites["lat"].to_numpy())
    pts = shapely.points(x, y)
    geoms = net.edges.geometry.to_numpy()
    x0, y0, x1, y1 = shapely.total_bounds(geoms)
    outside = (x < x0 - limit_m) | (x > x1 + limit_m) | (y < y0 - limit_m) | (y > y1 + limit_m)
    if outside.any():
        i = int(np.flatnonzero(outside)[0])
        raise CountsError(
            f"site {sites.at[i, 'site']!r} is off the network (outside the "
            "area the network covers)",
            path=path,
            field=f"{sites.at[i, 'where']}: lat/lon",
        )
    tree = shapely.STRtree(geoms)
    (pi, ei), dist = tree.query_nearest(pts, return_distance=True, all_matches=True)
    # ties (both directions of a two-way street): the lowest edge row, for determinism
    order = np.lexsort((ei, pi))
    pi, ei, dist = pi[order], ei[order], dist[order]
    first = np.r_[True, pi[1:] != pi[:-1]]
    edge = np.full(len(sites), -1)
    d = np.full(len(sites), np.inf)
    edge[pi[first]] = ei[first]
    d[pi[first]] = dist[first]
    sites["edge"] = edge
    sites["distance_m"] = d
    sites["placed"] = d <= limit_m
    left = [
        (str(s), float(dd))
        for s, dd, ok in zip(sites["site"], d, sites["placed"], strict=True)
        if not ok
    ]
    return Placement(sites, left)


# ----------------------------------------------------------------------------- design


def period_multipliers(
    profile: Profile, start_minute: np.ndarray, minutes: np.ndarray
) -> np.ndarray:
    """Return (periods, categories) mean time multipliers over each period's minutes.

    Uses the profile's own :meth:`~routerisk.profile.Profile.multipliers` table of the week,
    summed over each period by cumulative sums (periods of up to 7 days).
    """
    return _period_means(profile.multipliers(np.arange(MINUTES_PER_WEEK)), start_minute, minutes)


def baseline_multipliers(
    profile: Profile, start_minute: np.ndarray, minutes: np.ndarray
) -> np.ndarray:
    """Return each period's mean multiplier of the street baseline's time profile (1: none)."""
    table = profile.by_minute_of(profile.baseline_time_profile)[:, None]
    return _period_means(table, start_minute, minutes)[:, 0]


def _period_means(table: np.ndarray, start_minute: np.ndarray, minutes: np.ndarray) -> np.ndarray:
    """Return the mean of a (week minutes, k) table over each period (cumulative sums)."""
    cs = np.vstack([np.zeros((1, table.shape[1])), np.cumsum(np.vstack([table, table]), 0)])
    s = np.asarray(start_minute, dtype=np.int64) % MINUTES_PER_WEEK
    n = np.maximum(np.asarray(minutes, dtype=np.int64), 1)
    return (cs[s + n] - cs[s]) / n[:, None]


@dataclass
class Design:
    """The linear design of the count model: ``E[count] = Z @ theta``."""

    Z: np.ndarray  # (periods, 1 + fitted categories)
    y: np.ndarray
    full: np.ndarray  # (periods, 1 + all categories): baseline and every category column
    categories: list[str]  # fitted categories, in profile order
    not_fitted: list[str]  # categories with no placed site within their radius
    sites_near: dict[str, int]  # category -> number of placed sites within its influence
    periods: pd.DataFrame  # the counting periods used, with their site's edge
    #: with --fit-baseline: the road class held at its baseline, and the classes fitted
    fixed_class: str | None = None
    classes: list[str] = field(default_factory=list)

    @property
    def terms(self) -> list[str]:
        """Return the names of the columns of ``Z`` (the first one is the scale)."""
        first = f"baseline:{self.fixed_class}" if self.fixed_class else "baseline"
        return [first, *(f"baseline:{c}" for c in self.classes), *self.categories]

    def column(self, name: str) -> int:
        """Return the column of ``Z`` of a category or ``baseline:<class>``."""
        return self.terms.index(name)


def build_design(
    net: Any, counts: pd.DataFrame, placement: Placement, *, fit_baseline: bool = False
) -> Design:
    """Return the design matrix of the periods at placed sites (see the module docstring).

    With ``fit_baseline`` the baseline column is split by road class (classes with a
    baseline above zero at some site): the class with the most sites stays fixed (it sets
    the units) and every other class gets a fitted multiplier on its baseline.
    """
    from routerisk.analysis.scoring import minute_of_week

    prof = net.profile
    placed = placement.sites[placement.sites["placed"]]
    per = counts.merge(placed[["site", "edge", "distance_m"]], on="site", how="inner")
    per = per.reset_index(drop=True)
    edges = net.edges
    rows = per["edge"].to_numpy()
    starts = pd.DatetimeIndex(
        [t.astimezone(net.timezone).replace(tzinfo=None) for t in per["start"]]
    )
    mins = np.rint(per["hours"].to_numpy() * 60).astype(np.int64)
    mult = period_multipliers(prof, minute_of_week(starts), mins)
    hours = per["hours"].to_numpy(dtype=float)
    # the baseline as scoring applies it: times its time profile over the period's minutes
    base = (
        edges["baseline"].to_numpy(dtype=float)[rows]
        * hours
        * baseline_multipliers(prof, minute_of_week(starts), mins)
    )
    cats = list(prof.category_names)
    exp = np.column_stack([edges[f"exp_{c}"].to_numpy(dtype=float)[rows] for c in cats])
    full = np.column_stack([base, hours[:, None] * mult * exp])
    site_exp = pd.DataFrame(exp > 0, columns=cats).assign(site=per["site"]).groupby("site").any()
    near = {c: int(site_exp[c].sum()) for c in cats}
    fitted = [c for c in cats if near[c] > 0]
    keep = [0] + [1 + cats.index(c) for c in fitted]
    z = full[:, keep]
    fixed, classes = None, []
    if fit_baseline:
        road = edges["highway"].astype(str).to_numpy()[rows]
        live = base > 0
        by_sites = per[live].assign(road=road[live]).groupby("road")["site"].nunique()
        if len(by_sites) == 0:
            raise CountsError(
                "no count site is on a street with a baseline above zero", field="--fit-baseline"
            )
        ranked = sorted(by_sites.items(), key=lambda kv: (-kv[1], kv[0]))
        fixed = str(ranked[0][0])
        classes = sorted(str(k) for k, _ in ranked[1:])
        cols = [np.where(road == fixed, base, 0.0)]
        cols += [np.where(road == c, base, 0.0) for c in classes]
        z = np.column_stack([*cols, z[:, 1:]])
    return Design(
        z,
        per["count"].to_numpy(dtype=float),
        full,
        fitted,
        [c for c in cats if c not in fitted],
        near,
        per,
        fixed,
        classes,
    )


def check_design(design: Design, *, path: str | Path | None = None) -> None:
    """Refuse a design that cannot be fitted: too few sites, or terms never apart."""
    n_sites = int(design.periods["site"].nunique())
    k = design.Z.shape[1]
    if n_sites < k:
        extra = f" and {len(design.classes)} road-class baselines" if design.classes else ""
        raise CountsError(
            f"{n_sites} sites were placed on the network but fitting the scale, "
            f"{len(design.categories)} weights ({', '.join(design.categories) or 'none'})"
            f"{extra} needs at least {k} "
            "sites (more, spread over the categories and hours, for useful intervals)",
            path=path,
            field="site",
        )
    names = design.terms
    norm = np.linalg.norm(design.Z, axis=0)
    if (norm == 0).any():
        raise CountsError(
            f"the {names[int(np.flatnonzero(norm == 0)[0])]} term is zero at every count",
            path=path,
            field="categories",
        )
    zn = design.Z / norm
    if np.linalg.matrix_rank(zn, tol=1e-9 * max(zn.shape)) < k:
        cos = zn.T @ zn
        np.fill_diagonal(cos, 0)
        i, j = np.unravel_index(int(np.argmax(cos)), cos.shape)
        if cos[i, j] > 1 - 1e-9:
            what = f"{names[min(i, j)]!r} and {names[max(i, j)]!r} are never apart"
        else:
            _, _, vt = np.linalg.svd(zn)
            nz = [names[t] for t in np.flatnonzero(np.abs(vt[-1]) > 1e-6)]
            what = f"{', '.join(map(repr, nz))} are never apart (one is a mix of the others)"
        raise CountsError(
            f"the design is singular: {what} at the count sites and hours; "
            "add sites where they differ, or fix one weight",
            path=path,
            field="categories",
        )
