"""Fit a profile's scale and category weights to short-duration pedestrian counts.

The model is the profile's own additive form (the same edge columns and time profiles that
:mod:`routerisk.analysis.scoring` uses). For a counting period at a site placed on edge ``e``::

    E[count] = scale * sum over the period's minutes of
               (baseline_e * mult_b(minute) + sum_c weight_c * mult_c(minute) * exp_c,e) / 60

``baseline_e`` is the edge's road-class baseline times its sidewalk multiplier (``mult_b`` the
baseline's time profile, when the profile gives one) and
``exp_c,e`` its length-averaged decayed nearness (both from :mod:`routerisk.network.tagging`);
``mult_c`` is the category's time profile (:meth:`routerisk.profile.Profile.multipliers`).
Radii, decays, time profiles and the baseline stay as the profile gives them (the baseline
fixes the units of the weights). With ``theta = (scale, scale * weight_1, ...)`` the mean is
linear in ``theta``: a Poisson or negative binomial (NB2) model with identity link, fitted by
maximum likelihood under ``theta >= 0``. Standard errors come from the observed information
at the optimum; the weights' covariance from the delta method.
"""

from __future__ import annotations

import csv
import datetime as _dt
import json
import logging
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from routerisk.errors import InputFileError, OptionError, RouteriskError
from routerisk.profile import MINUTES_PER_WEEK, Profile

log = logging.getLogger(__name__)

#: Sites farther than this from every edge (metres) are left out and named.
SNAP_LIMIT_M = 30.0
#: Longest counting period accepted.
MAX_PERIOD = _dt.timedelta(days=7)
#: The negative binomial model is chosen when the test of alpha = 0 gives p below this.
DISPERSION_P = 0.05
COLUMNS = ("site", "lat", "lon", "start", "end", "count")


class CountsError(InputFileError):
    """A count file is malformed, or cannot support the fit asked for."""


# ----------------------------------------------------------------------------- reading


def _time(text: str, tz: Any, *, path: Path, where: str) -> _dt.datetime:
    try:
        t = _dt.datetime.fromisoformat(str(text).strip())
    except ValueError as exc:
        raise CountsError(
            f"not an ISO 8601 date and time: {text!r}", path=path, field=where
        ) from exc
    return t.replace(tzinfo=tz) if t.tzinfo is None else t


def _integer(value: Any, *, path: Path, where: str) -> int:
    try:
        v = float(value)
    except (TypeError, ValueError) as exc:
        raise CountsError(f"must be a whole number, got {value!r}", path=path, field=where) from exc
    if not math.isfinite(v) or v != int(v):
        raise CountsError(
            f"must be a whole number of pedestrians, got {value!r}", path=path, field=where
        )
    if v < 0:
        raise CountsError(f"must not be negative, got {value!r}", path=path, field=where)
    return int(v)


def _records(path: Path) -> list[tuple[str, dict[str, Any]]]:
    """Return (where, properties) pairs from a CSV or GeoJSON count file."""
    if not path.is_file():
        raise CountsError("count file not found", path=path)
    try:
        text = path.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError as exc:
        raise CountsError("is not UTF-8 text", path=path) from exc
    if path.suffix.lower() in (".geojson", ".json"):
        try:
            doc = json.loads(text)
        except json.JSONDecodeError as exc:
            raise CountsError(f"not valid JSON ({exc.msg}, line {exc.lineno})", path=path) from exc
        feats = doc.get("features") if isinstance(doc, dict) else None
        if not isinstance(feats, list):
            raise CountsError(
                "must be a GeoJSON FeatureCollection of points", path=path, field="features"
            )
        out = []
        for i, f in enumerate(feats):
            where = f"features[{i}]"
            if (
                not isinstance(f, dict)
                or not isinstance(f.get("geometry") or {}, dict)
                or not isinstance(f.get("properties") or {}, dict)
            ):
                raise CountsError(
                    "must be a GeoJSON Feature with a Point geometry and properties",
                    path=path,
                    field=where,
                )
            geom = f.get("geometry") or {}
            if (
                geom.get("type") != "Point"
                or not isinstance(geom.get("coordinates"), list)
                or len(geom["coordinates"]) < 2
            ):
                raise CountsError("must be a Point feature", path=path, field=where)
            props = dict((f or {}).get("properties") or {})
            props["lon"], props["lat"] = geom["coordinates"][:2]
            out.append((where, props))
        return out
    # comment lines become empty (skipped), so row numbers stay those of the file
    rows = list(csv.reader("" if line.startswith("#") else line for line in text.splitlines()))
    while rows and not any(cell.strip() for cell in rows[0]):
        rows.pop(0)
    first = (
        text.splitlines().index(
            next(ln for ln in text.splitlines() if ln.strip() and not ln.startswith("#"))
        )
        if rows
        else 0
    )
    if not rows:
        raise CountsError("has no header and no rows", path=path)
    head = [h.strip() for h in rows[0]]
    missing = [c for c in COLUMNS if c not in head]
    if missing:
        raise CountsError(
            f"missing column {missing[0]!r}; needs {', '.join(COLUMNS)}", path=path, field="header"
        )
    out = []
    for n, row in enumerate(rows[1:], start=first + 2):
        if not any(cell.strip() for cell in row):
            continue
        if len(row) != len(head):
            raise CountsError(
                f"has {len(row)} cells, the header has {len(head)}", path=path, field=f"row {n}"
            )
        out.append((f"row {n}", dict(zip(head, (c.strip() for c in row), strict=True))))
    return out


def read_counts(path: str | Path, tz: Any) -> pd.DataFrame:
    """Read a count file (CSV ``site,lat,lon,start,end,count`` or GeoJSON points).

    Times without an offset are local times in ``tz``. Returns one row per counting period
    with ``site, lat, lon, start, end, hours, count, where`` (``where`` names the row).
    """
    p = Path(path)
    recs = _records(p)
    if not recs:
        raise CountsError("has no counting periods (no rows)", path=p)
    out = []
    coords: dict[str, tuple[float, float, str]] = {}
    for where, r in recs:
        for c in COLUMNS:
            if r.get(c) in (None, ""):
                raise CountsError(f"{c} is missing", path=p, field=f"{where}: {c}")
        site = str(r["site"])
        try:
            lat, lon = float(r["lat"]), float(r["lon"])
        except (TypeError, ValueError) as exc:
            raise CountsError(
                "lat and lon must be numbers", path=p, field=f"{where}: lat/lon"
            ) from exc
        if not (-90 <= lat <= 90 and -180 <= lon <= 180):
            raise CountsError(
                f"lat {lat} / lon {lon} is not a place on Earth", path=p, field=f"{where}: lat/lon"
            )
        if site in coords and max(abs(coords[site][0] - lat), abs(coords[site][1] - lon)) > 1e-5:
            raise CountsError(
                f"site {site!r} has other coordinates than in {coords[site][2]}",
                path=p,
                field=f"{where}: lat/lon",
            )
        coords.setdefault(site, (lat, lon, where))
        start = _time(r["start"], tz, path=p, where=f"{where}: start")
        end = _time(r["end"], tz, path=p, where=f"{where}: end")
        if end <= start:
            raise CountsError(
                f"end {r['end']} is not after start {r['start']}", path=p, field=f"{where}: end"
            )
        if end - start > MAX_PERIOD:
            raise CountsError(
                f"a counting period of {end - start} is longer than 7 days",
                path=p,
                field=f"{where}: end",
            )
        count = _integer(r["count"], path=p, where=f"{where}: count")
        out.append(
            {
                "site": site,
                "lat": coords[site][0],
                "lon": coords[site][1],
                "start": start,
                "end": end,
                "hours": (end - start).total_seconds() / 3600,
                "count": count,
                "where": where,
            }
        )
    return pd.DataFrame(out)


# ----------------------------------------------------------------------------- placing


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


# ----------------------------------------------------------------------------- fitting


@dataclass
class Fit:
    """Maximum-likelihood fit of ``E[y] = Z @ theta`` with ``theta >= 0``."""

    family: str  # "poisson" | "negative binomial"
    theta: np.ndarray
    cov: np.ndarray  # observed-information covariance (free parameters; 0 rows at bounds)
    at_bound: np.ndarray  # bool: parameter held at 0
    alpha: float  # NB2 dispersion (0 for Poisson)
    loglik: float
    mu: np.ndarray
    iterations: int

    @property
    def se(self) -> np.ndarray:
        """Return the standard errors (0 for a parameter held at its bound)."""
        return np.sqrt(np.clip(np.diag(self.cov), 0, None))


def loglik(y: np.ndarray, mu: np.ndarray, alpha: float = 0.0) -> float:
    """Return the Poisson (alpha 0) or NB2 log-likelihood of counts ``y`` with means ``mu``."""
    from scipy.special import gammaln

    mu = np.maximum(mu, 1e-300)
    if alpha <= 0:
        return float(np.sum(y * np.log(mu) - mu - gammaln(y + 1)))
    r = 1.0 / alpha
    return float(
        np.sum(
            gammaln(y + r)
            - gammaln(r)
            - gammaln(y + 1)
            + y * np.log(alpha * mu / (1 + alpha * mu))
            - r * np.log1p(alpha * mu)
        )
    )


def _information(
    Z: np.ndarray, y: np.ndarray, mu: np.ndarray, alpha: float, *, observed: bool
) -> np.ndarray:
    if observed:  # minus the Hessian of the log-likelihood in theta
        w = y / mu**2 - alpha * (alpha * y + 1) / (1 + alpha * mu) ** 2
    else:  # expected (Fisher) information
        w = 1.0 / (mu * (1 + alpha * mu))
    return (Z * w[:, None]).T @ Z


def _newton_step(
    Z: np.ndarray,
    y: np.ndarray,
    mu: np.ndarray,
    alpha: float,
    info: np.ndarray,
    grad: np.ndarray,
    free: np.ndarray,
) -> np.ndarray:
    """Return the (Newton or scoring) step on the free parameters, zero elsewhere."""
    step = np.zeros(len(grad))
    if not free.any():
        return step
    sub = info[np.ix_(free, free)]
    try:
        if np.linalg.eigvalsh(sub).min() <= 0:
            raise np.linalg.LinAlgError
        step[free] = np.linalg.solve(sub, grad[free])
    except np.linalg.LinAlgError:
        sub = _information(Z, y, mu, alpha, observed=False)[np.ix_(free, free)]
        step[free] = np.linalg.lstsq(sub, grad[free], rcond=None)[0]
    return step


def fit_fixed(
    Z: np.ndarray,
    y: np.ndarray,
    *,
    alpha: float = 0.0,
    start: np.ndarray | None = None,
    max_iter: int = 200,
) -> Fit:
    """Fit ``theta >= 0`` by Fisher scoring with an active set, at a fixed NB2 ``alpha``.

    ``alpha = 0`` is the Poisson model. Ends with Newton steps on the observed information
    so the optimum is found to machine precision; the covariance is its inverse on the
    parameters away from the bound.
    """
    from scipy.optimize import nnls

    k = Z.shape[1]
    if start is None:
        scale = np.linalg.norm(Z, axis=0)
        theta = nnls(Z / scale, y)[0] / scale
        theta = np.maximum(theta, 1e-3 * max(theta.max(), 1e-12))
        mu0 = Z @ theta
        theta = theta * (y.sum() / mu0.sum() if mu0.sum() > 0 else 1.0)
    else:
        theta = np.maximum(np.asarray(start, dtype=float), 0.0)
    mu = Z @ theta
    ll = loglik(y, mu, alpha)
    it = 0
    for it in range(1, max_iter + 1):
        grad = Z.T @ ((y - mu) / (mu * (1 + alpha * mu)))
        free = (theta > 0) | (grad > 0)
        if not free.any():
            break
        info = _information(Z, y, mu, alpha, observed=it > 8)
        while True:
            step = _newton_step(Z, y, mu, alpha, info, grad, free)
            # a parameter at zero that the step would push below zero stays at zero
            push = free & (theta <= 0) & (step < 0)
            if not push.any():
                break
            free = free & ~push
        if not free.any():
            break
        t = 1.0
        neg = step < 0
        if neg.any():
            t = min(1.0, float(np.min(theta[neg] / -step[neg])))
        capped = t < 1.0  # the step stops where a parameter reaches zero
        improved = False
        for _ in range(60):
            cand = np.maximum(theta + t * step, 0.0)
            if t < 1.0 and neg.any():
                cand[neg & (theta + t * step <= theta * 1e-12)] = 0.0
            mu_c = Z @ cand
            if (mu_c > 0).all() or not (y[mu_c <= 0] > 0).any():
                ll_c = loglik(y, mu_c, alpha)
                if ll_c >= ll - 1e-12 * abs(ll):
                    improved = True
                    break
            t *= 0.5
        if not improved:
            break
        change = np.max(np.abs(cand - theta) / np.maximum(np.abs(cand), 1e-300))
        theta, mu, ll_old, ll = cand, mu_c, ll, ll_c
        if not capped and (
            change < 1e-13 or (it > 10 and abs(ll - ll_old) <= 1e-15 * abs(ll) and change < 1e-10)
        ):
            break
    grad = Z.T @ ((y - mu) / (mu * (1 + alpha * mu)))
    at_bound = (theta <= 0) & (grad <= 0)
    cov = np.zeros((k, k))
    free = ~at_bound
    info = _information(Z, y, mu, alpha, observed=True)[np.ix_(free, free)]
    try:
        cov[np.ix_(free, free)] = np.linalg.inv(info)
    except np.linalg.LinAlgError:
        cov[np.ix_(free, free)] = np.linalg.pinv(info)
    return Fit(
        "poisson" if alpha <= 0 else "negative binomial",
        theta,
        cov,
        at_bound,
        float(alpha),
        ll,
        mu,
        it,
    )


def fit_nb(Z: np.ndarray, y: np.ndarray, *, start: np.ndarray | None = None) -> Fit:
    """Fit the NB2 model, ``alpha`` by maximising the profile likelihood (log scale)."""
    from scipy.optimize import minimize_scalar

    warm = {"theta": start}

    def neg(log_a: float) -> float:
        f = fit_fixed(Z, y, alpha=math.exp(log_a), start=warm["theta"])
        warm["theta"] = f.theta
        return -f.loglik

    res = minimize_scalar(
        neg, bounds=(math.log(1e-8), math.log(1e2)), method="bounded", options={"xatol": 1e-9}
    )
    return fit_fixed(Z, y, alpha=math.exp(float(res.x)), start=warm["theta"])


def deviance(y: np.ndarray, mu: np.ndarray, alpha: float = 0.0) -> float:
    """Return the Poisson (alpha 0) or NB2 deviance."""
    with np.errstate(divide="ignore", invalid="ignore"):
        ylog = np.where(y > 0, y * np.log(y / mu), 0.0)
        if alpha <= 0:
            return float(2 * np.sum(ylog - (y - mu)))
        r = 1.0 / alpha
        return float(2 * np.sum(ylog - (y + r) * np.log((1 + alpha * y) / (1 + alpha * mu))))


def pearson_dispersion(y: np.ndarray, mu: np.ndarray, k: int, alpha: float = 0.0) -> float:
    """Return the Pearson chi-square over residual degrees of freedom."""
    return float(np.sum((y - mu) ** 2 / (mu * (1 + alpha * mu))) / max(len(y) - k, 1))


def dispersion_test(y: np.ndarray, poisson: Fit, nb: Fit) -> dict[str, Any]:
    """Return the likelihood-ratio test of alpha = 0 (Poisson) against NB2.

    alpha = 0 is on the boundary, so the statistic's null law is an equal mixture of a point
    mass at 0 and chi-square(1): p = chi2.sf(LR, 1) / 2 (Self and Liang 1987).
    """
    lr = max(2.0 * (nb.loglik - poisson.loglik), 0.0)
    # chi-square(1) upper tail: erfc(sqrt(x / 2))
    p = 0.5 * math.erfc(math.sqrt(lr / 2.0)) if lr > 0 else 1.0
    return {
        "test": "likelihood ratio, alpha = 0 against alpha > 0 (boundary mixture)",
        "statistic": lr,
        "p_value": p,
        "threshold": DISPERSION_P,
        "chosen": "negative binomial" if p < DISPERSION_P else "poisson",
    }


def weights_from(theta: np.ndarray, cov: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Return (scale and weights, their covariance) from ``theta`` by the delta method.

    ``weight_c = theta_c / theta_0``, ``scale = theta_0``.
    """
    s = theta[0]
    est = np.r_[s, theta[1:] / s]
    jac = np.zeros((len(theta), len(theta)))
    jac[0, 0] = 1.0
    jac[1:, 0] = -theta[1:] / s**2
    jac[1:, 1:] = np.eye(len(theta) - 1) / s
    return est, jac @ cov @ jac.T


# ----------------------------------------------------------------------------- calibrate


@dataclass
class Calibration:
    """The outcome of :func:`calibrate`."""

    profile: Profile  # the profile calibrated
    design: Design
    placement: Placement
    fit: Fit
    poisson: Fit
    test: dict[str, Any]
    estimate: np.ndarray  # scale, weights of design.categories
    est_cov: np.ndarray
    cv: dict[str, float]
    judged_scale: float  # scale fitted with the judged weights (the uncalibrated profile)
    counts_path: str = ""
    notes: list[str] = field(default_factory=list)

    def weights(self) -> list[dict[str, Any]]:
        """Return one record per category: judged, fitted, SE, 95 % interval, sites near."""
        from statistics import NormalDist

        z = NormalDist().inv_cdf(0.975)
        se = np.sqrt(np.clip(np.diag(self.est_cov), 0, None))
        out = []
        for c in self.profile.categories:
            rec: dict[str, Any] = {
                "category": c.name,
                "label": c.label,
                "judged": c.weight,
                "sites_near": self.design.sites_near[c.name],
            }
            if c.name in self.design.categories:
                j = self.design.column(c.name)
                bound = bool(self.fit.at_bound[j])
                rec.update(
                    fitted=True,
                    weight=float(self.estimate[j]),
                    se=float(se[j]),
                    low=max(float(self.estimate[j] - z * se[j]), 0.0),
                    high=float(self.estimate[j] + z * se[j]),
                    at_zero=bound,
                )
                if bound:
                    rec.update(se=None, low=None, high=None)
            else:
                rec.update(
                    fitted=False, weight=c.weight, se=None, low=None, high=None, at_zero=False
                )
            out.append(rec)
        return out

    def baselines(self) -> list[dict[str, Any]]:
        """Return the road-class baselines fitted with ``--fit-baseline`` (else empty)."""
        from statistics import NormalDist

        if not self.design.fixed_class:
            return []
        z = NormalDist().inv_cdf(0.975)
        given = dict(self.profile.baseline_by_class)
        se = np.sqrt(np.clip(np.diag(self.est_cov), 0, None))
        out = [
            {
                "road_class": self.design.fixed_class,
                "judged": given.get(self.design.fixed_class, self.profile.baseline_default),
                "fitted": False,
            }
        ]
        for c in self.design.classes:
            j = self.design.column(f"baseline:{c}")
            b = given.get(c, self.profile.baseline_default)
            m = float(self.estimate[j])
            out.append(
                {
                    "road_class": c,
                    "judged": b,
                    "fitted": True,
                    "baseline": b * m,
                    "low": max(b * (m - z * se[j]), 0.0),
                    "high": b * (m + z * se[j]),
                }
            )
        return out

    def summary(self) -> dict[str, Any]:
        """Return the JSON form printed by ``routerisk calibrate --json``."""
        from routerisk.analysis.scoring import _round as r

        y = self.design.y
        se0 = math.sqrt(max(self.est_cov[0, 0], 0.0))
        return {
            "model": self.fit.family,
            "alpha": r(self.fit.alpha, 8),
            "dispersion_test": {
                k: (r(v, 8) if isinstance(v, float) else v) for k, v in self.test.items()
            },
            "pearson_dispersion_poisson": r(
                pearson_dispersion(y, self.poisson.mu, len(self.poisson.theta)), 6
            ),
            "pearson_dispersion": r(
                pearson_dispersion(y, self.fit.mu, len(self.fit.theta), self.fit.alpha), 6
            ),
            "deviance": r(deviance(y, self.fit.mu, self.fit.alpha), 6),
            "loglik": r(self.fit.loglik, 6),
            "scale": {
                "estimate": r(self.estimate[0], 8),
                "se": r(se0, 8),
                "judged_weights_scale": r(self.judged_scale, 8),
                "unit": "pedestrians per hour per unit of presence",
            },
            "weights": [
                {k: (r(v, 8) if isinstance(v, float) else v) for k, v in w.items()}
                for w in self.weights()
            ],
            "not_fitted": self.design.not_fitted,
            "baselines": [
                {k: (r(v, 8) if isinstance(v, float) else v) for k, v in b.items()}
                for b in self.baselines()
            ],
            "sites": int(self.design.periods["site"].nunique()),
            "periods": len(y),
            "left_out": [{"site": s, "distance_m": r(d, 1)} for s, d in self.placement.left_out],
            "cross_validation": {k: r(v, 6) for k, v in self.cv.items()},
            "uncertainty_method": "observed information at the maximum (delta method for "
            "weight = theta_c / scale)",
            "notes": self.notes,
        }


def _judged_columns(design: Design, profile: Profile) -> np.ndarray:
    """Return each period's presence under the judged weights (baseline + weighted sum)."""
    w = np.array([1.0, *(c.weight for c in profile.categories)])
    return design.full @ w


def cross_validate(design: Design, profile: Profile, fit: Fit) -> dict[str, float]:
    """Return leave-one-site-out errors of the fitted and the judged (scale-only) models.

    Each site in turn is left out; the model is refitted on the others (NB2 at the full
    fit's alpha) and predicts the site's counts. The judged profile's only free number, its
    scale, is fitted on the same other sites. Errors: root mean square error of the counts
    and the mean Poisson deviance per period.
    """
    sites = design.periods["site"].to_numpy()
    judged = _judged_columns(design, profile)
    pred = np.zeros(len(design.y))
    pred_j = np.zeros(len(design.y))
    w_judged = np.array(
        [
            1.0,
            *([1.0] * len(design.classes)),
            *(profile.category(c).weight for c in design.categories),
        ]
    )
    for s in np.unique(sites):
        out = sites == s
        Zt, yt = design.Z[~out], design.y[~out]
        cols = np.linalg.norm(Zt, axis=0) > 0
        if not cols[0] or yt.sum() == 0:  # nothing left to set the scale: judged weights
            theta = fit.theta[0] * w_judged
            pred[out] = design.Z[out] @ theta
            pred_j[out] = judged[out] * (fit.theta[0])
            continue
        f = fit_fixed(Zt[:, cols], yt, alpha=fit.alpha, start=fit.theta[cols])
        theta = np.zeros(design.Z.shape[1])
        theta[cols] = f.theta
        # a category seen only at the left-out site: its judged weight at the fitted scale
        theta[~cols] = f.theta[0] * w_judged[~cols]
        pred[out] = design.Z[out] @ theta
        pred_j[out] = judged[out] * (yt.sum() / judged[~out].sum())
    y = design.y
    return {
        "rmse_fitted": float(np.sqrt(np.mean((y - pred) ** 2))),
        "rmse_judged": float(np.sqrt(np.mean((y - pred_j) ** 2))),
        "deviance_fitted": deviance(y, np.maximum(pred, 1e-12)) / len(y),
        "deviance_judged": deviance(y, np.maximum(pred_j, 1e-12)) / len(y),
    }


def calibrate(
    net: Any,
    counts_path: str | Path,
    *,
    limit_m: float = SNAP_LIMIT_M,
    family: str = "auto",
    fit_baseline: bool = False,
) -> Calibration:
    """Fit the scale and the weights of ``net.profile`` to the counts in ``counts_path``.

    ``family`` is ``auto`` (negative binomial when the dispersion test rejects the
    Poisson model), ``poisson`` or ``negative-binomial``.
    """
    if family not in ("auto", "poisson", "negative-binomial"):
        raise OptionError(f"unknown model {family!r}", field="--model")
    if not (limit_m > 0 and math.isfinite(limit_m)):
        raise OptionError(
            f"must be a positive number of metres, got {limit_m}", field="--snap-limit"
        )
    path = Path(counts_path)
    counts = read_counts(path, net.timezone)
    placement = place_sites(net, counts, limit_m=limit_m, path=path)
    if not placement.sites["placed"].any():
        s, d = placement.left_out[0]
        raise CountsError(
            f"no site is within {limit_m:g} m of a street (site {s!r} is {d:.0f} m away)",
            path=path,
            field="lat/lon",
        )
    design = build_design(net, counts, placement, fit_baseline=fit_baseline)
    check_design(design, path=path)
    if design.y.sum() == 0:
        raise CountsError("every count is zero: nothing to fit", path=path, field="count")
    pois = fit_fixed(design.Z, design.y)
    nb = fit_nb(design.Z, design.y, start=pois.theta)
    test = dispersion_test(design.y, pois, nb)
    chosen = {
        "auto": test["chosen"],
        "poisson": "poisson",
        "negative-binomial": "negative binomial",
    }[family]
    fit = nb if chosen == "negative binomial" else pois
    est, est_cov = weights_from(fit.theta, fit.cov)
    judged = _judged_columns(design, net.profile)
    judged_scale = float(design.y.sum() / judged.sum())
    cv = cross_validate(design, net.profile, fit)
    notes = [
        "radii, decays and time profiles are kept as the profile gives them"
        + (
            "; the street baseline of every road class is fitted as a multiplier, except "
            f"{design.fixed_class}, which is held at its value to fix the units"
            if design.fixed_class
            else "; so is the street baseline (it fixes the units)"
        ),
        "crossings are not part of the count model (crossing_weight is kept)",
    ]
    if design.not_fitted:
        notes.append(
            "no count site lies within the influence of: "
            + ", ".join(design.not_fitted)
            + "; their judged weights are kept (not "
            "fitted)"
        )
    if fit.at_bound[1:].any():
        notes.append(
            "held at zero by the non-negativity bound: "
            + ", ".join(c for c, b in zip(design.terms[1:], fit.at_bound[1:], strict=True) if b)
        )
    log.info(
        "calibrate fitted %d weights on %d periods at %d sites (%s)",
        len(design.categories),
        len(design.y),
        design.periods["site"].nunique(),
        chosen,
    )
    return Calibration(
        net.profile,
        design,
        placement,
        fit,
        pois,
        test,
        est,
        est_cov,
        cv,
        judged_scale,
        str(path),
        notes,
    )


# ----------------------------------------------------------------------------- output


def _profile_source(profile: Profile) -> dict[str, Any]:
    import tomllib

    import yaml

    src = Path(profile.source) if profile.source else None
    if src is None or not src.is_file():
        raise RouteriskError(
            "the profile has no readable source file to write a calibrated copy from",
            path=profile.source or None,
        )
    text = src.read_text(encoding="utf-8")
    return tomllib.loads(text) if src.suffix.lower() == ".toml" else yaml.safe_load(text)


def _num(x: float) -> float:
    return float(f"{float(x):.10g}")


def calibrated_document(
    cal: Calibration, *, out_path: str | Path, counts_sha256: str
) -> dict[str, Any]:
    """Return the calibrated profile as a mapping: fitted weights and an ``uncertainty`` block.

    Categories not fitted (no site near, or held at zero) keep their values; the block's
    covariance covers only the weights with an interval.
    """
    import copy
    import os

    doc = copy.deepcopy(_profile_source(cal.profile))
    recs = {w["category"]: w for w in cal.weights()}
    for name, c in doc["categories"].items():
        rec = recs[str(name)]
        if rec["fitted"]:
            c["weight"] = _num(rec["weight"])
    src_dir = Path(cal.profile.source).resolve().parent
    for rule in doc.get("rules") or []:  # keep polygon files found from the new place
        if isinstance(rule, dict) and rule.get("polygons"):
            p = Path(rule["polygons"])
            p = p if p.is_absolute() else src_dir / p
            rule["polygons"] = os.path.relpath(p, Path(out_path).resolve().parent)
    for b in cal.baselines():
        if b["fitted"]:
            doc.setdefault("baseline", {}).setdefault("by_road_class", {})[b["road_class"]] = _num(
                b["baseline"]
            )
    names = [w["category"] for w in cal.weights() if w["fitted"] and not w["at_zero"]]
    idx = [cal.design.column(n) for n in names]
    cov = cal.est_cov[np.ix_(idx, idx)]
    cov = (cov + cov.T) / 2
    doc["name"] = f"{doc.get('name', 'profile')}-calibrated"
    if names:
        doc["uncertainty"] = {
            "method": (
                f"observed information, {cal.fit.family} maximum likelihood "
                f"(alpha {_num(cal.fit.alpha)}), delta method"
            ),
            "fitted_from": f"counts sha256 {counts_sha256}; "
            f"{cal.design.periods['site'].nunique()} sites, "
            f"{len(cal.design.y)} periods",
            "scale": _num(cal.estimate[0]),
            "weights": names,
            "covariance": [[_num(v) for v in row] for row in cov],
        }
    return doc


def profile_text(
    cal: Calibration, out: str | Path, provenance: dict[str, Any] | None = None
) -> str:
    """Return the calibrated profile as YAML text, checked to read back as a valid profile.

    ``provenance`` (:func:`routerisk.io.atomic.provenance`) is recorded in a comment line.
    """
    import yaml

    from routerisk.io.atomic import provenance_line, sha256_file
    from routerisk.profile import parse_profile

    doc = calibrated_document(cal, out_path=out, counts_sha256=sha256_file(cal.counts_path))
    made = f"# Made from: {provenance_line(provenance)}\n" if provenance else ""
    text = (
        "# Calibrated by routerisk calibrate on pedestrian counts; see its report.\n"
        + made
        + yaml.safe_dump(
            doc, sort_keys=False, allow_unicode=True, width=100, default_flow_style=None
        )
    )
    parse_profile(yaml.safe_load(text), path=out)  # the written file must read back
    return text


def write_text(out: str | Path, text: str, *, force: bool = False) -> Path:
    """Write text atomically (refusing an existing file unless ``force``)."""
    from routerisk.io.atomic import write_text_atomic

    return write_text_atomic(out, text, force=force)


def write_profile(
    cal: Calibration,
    out: str | Path,
    *,
    force: bool = False,
    provenance: dict[str, Any] | None = None,
) -> Path:
    """Validate the calibrated profile and write it as YAML (atomically)."""
    return write_text(out, profile_text(cal, out, provenance), force=force)
