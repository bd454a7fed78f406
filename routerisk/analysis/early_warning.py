"""Early warnings from logged safety events: reading, rates, flags and CUSUM.

Pure statistics on pandas and numpy. Matching events to drives and segments, and the
command line, live elsewhere; this module takes per-unit (or per-period) tables and
returns tables.

Stages
------
- :func:`read_events` reads an event log (CSV or GeoJSON points) and returns the good rows
  and the rejected rows, each rejected row with its reason; nothing is dropped silently.
- :func:`fit_gamma_prior` and :func:`unit_rates` compute empirical Bayes rates per unit
  (Hauer 1997; the Highway Safety Manual's EB step) [memory], exact Poisson p-values and
  Benjamini-Hochberg flags.
- :func:`benjamini_hochberg` and :func:`bh_adjusted` are the step-up false discovery rate
  procedure (Benjamini and Hochberg 1995, JRSS B 57(1):289-300) [memory].
- :func:`design_cusum`, :func:`cusum_arl`, :func:`cusum_path` and :func:`cusum_alerts` are a
  Poisson CUSUM (Page 1954, Biometrika 41:100-115; Lucas 1985, Technometrics 27(2):129-144)
  [memory] with the decision interval set for an in-control average run length by the
  Markov chain of Brook and Evans (1972, Biometrika 59(3):539-549) [memory].

Model and notation
------------------
Unit ``i`` (a road segment, say) has ``k_i`` events over ``e_i`` km driven and a relative
exposure weight ``w_i`` (its modelled pedestrian exposure, 1 when not used). Its weighted
exposure is ``E_i = e_i * w_i`` and, given the unit's rate ``theta_i`` per weighted km,
``k_i ~ Poisson(E_i * theta_i)``. Across units ``theta_i ~ Gamma(shape a, rate b)`` with mean
``m = a / b`` and variance ``v = a / b**2``. The unit's expected count under the common rate
is ``E_i * m``; its EB rate per km is ``w_i * (a + k_i) / (b + E_i)``.
"""

from __future__ import annotations

import json
import logging
import math
import re
from dataclasses import dataclass
from datetime import UTC, datetime, tzinfo
from pathlib import Path
from typing import Any, Literal
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray
from scipy import optimize, sparse, stats
from scipy.sparse import linalg as sparse_linalg
from scipy.special import gammaln

from routerisk.errors import InputFileError, OptionError

log = logging.getLogger(__name__)

__all__ = [
    "EVENT_COLUMNS",
    "OPTIONAL_EVENT_COLUMNS",
    "CusumDesign",
    "GammaPrior",
    "benjamini_hochberg",
    "bh_adjusted",
    "cusum_alerts",
    "cusum_arl",
    "cusum_path",
    "design_cusum",
    "fit_gamma_prior",
    "loo_prior_pvalues",
    "poisson_pvalues",
    "read_events",
    "unit_rates",
]

EVENT_COLUMNS: tuple[str, ...] = ("time", "lat", "lon", "type")
"""Columns (CSV) or properties and geometry (GeoJSON) every event log must have."""

OPTIONAL_EVENT_COLUMNS: tuple[str, ...] = ("vehicle", "severity")
"""Columns kept when present; any other column is kept as text as well."""

_CLOCK = re.compile(r"\d[Tt ]\d")
_PHI_MAX = 1e4  # upper bound of 1/shape in the marginal-likelihood fit
_PHI_ZERO = 1e-10  # 1/shape at or below this counts as "no extra variation"


# ---------------------------------------------------------------------------------------------
# Reading event logs
# ---------------------------------------------------------------------------------------------


def read_events(
    path: str | Path, *, tz: str | tzinfo | None = None
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Read an event log and split it into good and rejected rows.

    Parameters
    ----------
    path
        A CSV file with columns ``time, lat, lon, type`` and optionally ``vehicle`` and
        ``severity`` (header names are matched after stripping and lower-casing), or a GeoJSON
        FeatureCollection of Point features (``[lon, lat]``) whose properties hold ``time``,
        ``type`` and the optional fields. A ``.geojson`` / ``.json`` suffix, or a file whose
        first non-blank character is ``{``, is read as GeoJSON.
    tz
        Time zone (an IANA name such as ``"Etc/GMT+3"`` or a tzinfo) for times written without
        a UTC offset. Without it such rows are rejected. Local times that a daylight-saving
        change makes ambiguous or nonexistent are rejected, never guessed.

    Returns
    -------
    good
        One row per accepted event, in file order: ``time`` (UTC, ``datetime64[us, UTC]``),
        ``lat``, ``lon`` (float degrees), ``type`` (stripped text), ``vehicle`` and ``severity``
        when present (severity as float when every non-empty value is a number, else text), any
        other columns as text, and ``row`` (1-based record number in the file: data line after
        the header, or feature index + 1).
    rejected
        The rejected records as read (text), with ``row`` and ``reason`` (every problem of the
        record, joined by ``"; "``).

    Raises
    ------
    InputFileError
        If the file is missing, unreadable, not valid CSV / GeoJSON, or lacks a required column
        (``field`` names the column).

    Notes
    -----
    Coordinates are checked for being numbers in range (lat in [-90, 90], lon in [-180, 180]);
    swapped lat and lon cannot be told apart from valid coordinates here. Times are ISO 8601
    with a time of day (``2024-05-01T08:15:00+00:00``, ``...Z`` or naive with ``tz``).
    """
    p = Path(path)
    zone = _zone(tz)
    if not p.is_file():
        raise InputFileError("event log not found", path=p)
    raw = _raw_geojson(p) if _is_geojson(p) else _raw_csv(p)
    good, rejected = _validate_events(raw, zone=zone)
    log.info("read_events read %d events from %s, rejected %d", len(good), p, len(rejected))
    return good, rejected


def _zone(tz: str | tzinfo | None) -> tzinfo | None:
    if tz is None or isinstance(tz, tzinfo):
        return tz
    try:
        return ZoneInfo(str(tz))
    except (ZoneInfoNotFoundError, ValueError) as exc:
        raise OptionError(f"unknown time zone {tz!r}", field="tz") from exc


def _is_geojson(path: Path) -> bool:
    if path.suffix.lower() in {".geojson", ".json"}:
        return True
    try:
        with open(path, encoding="utf-8-sig", errors="replace") as fh:
            head = fh.read(4096).lstrip()
    except OSError as exc:
        raise InputFileError(f"cannot read: {exc.strerror}", path=path) from exc
    return head.startswith("{")


def _raw_csv(path: Path) -> pd.DataFrame:
    try:
        raw = pd.read_csv(
            path, dtype=str, keep_default_na=False, encoding="utf-8-sig", skip_blank_lines=True
        )
    except pd.errors.EmptyDataError as exc:
        raise InputFileError("file is empty (no header)", path=path) from exc
    except (pd.errors.ParserError, UnicodeDecodeError, ValueError) as exc:
        raise InputFileError(f"not a readable CSV file: {exc}", path=path) from exc
    except OSError as exc:
        raise InputFileError(f"cannot read: {exc.strerror}", path=path) from exc
    names = [str(c).strip().lower() for c in raw.columns]
    dupes = sorted({n for n in names if names.count(n) > 1})
    if dupes:
        raise InputFileError("column appears more than once", path=path, field=dupes[0])
    raw.columns = pd.Index(names)
    for col in EVENT_COLUMNS:
        if col not in raw.columns:
            raise InputFileError("required column is missing", path=path, field=col)
    raw = raw.astype(object).where(raw.notna(), "")
    raw.insert(0, "row", np.arange(1, len(raw) + 1, dtype=np.int64))
    raw["_geometry_problem"] = ""
    return raw.reset_index(drop=True)


def _raw_geojson(path: Path) -> pd.DataFrame:
    try:
        with open(path, encoding="utf-8-sig") as fh:
            doc = json.load(fh)
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise InputFileError(f"not valid GeoJSON: {exc}", path=path) from exc
    except OSError as exc:
        raise InputFileError(f"cannot read: {exc.strerror}", path=path) from exc
    if not isinstance(doc, dict) or doc.get("type") != "FeatureCollection":
        raise InputFileError("GeoJSON is not a FeatureCollection", path=path, field="type")
    features = doc.get("features")
    if not isinstance(features, list):
        raise InputFileError("FeatureCollection has no features list", path=path, field="features")
    records: list[dict[str, Any]] = []
    seen: set[str] = set()
    for n, feat in enumerate(features, start=1):
        props = feat.get("properties") if isinstance(feat, dict) else None
        props = props if isinstance(props, dict) else {}
        rec: dict[str, Any] = {"row": n}
        for key, value in props.items():
            name = str(key).strip().lower()
            if name in {"lat", "lon", "row", "reason", "_geometry_problem"}:
                name = f"property_{name}"  # coordinates come from the geometry only
            rec[name] = "" if value is None else str(value)
            seen.add(name)
        geom = feat.get("geometry") if isinstance(feat, dict) else None
        rec["lat"], rec["lon"], rec["_geometry_problem"] = _point_of(geom)
        records.append(rec)
    for col in ("time", "type"):
        if records and col not in seen:
            raise InputFileError("no feature has this property", path=path, field=col)
    cols = ["row", *EVENT_COLUMNS, "_geometry_problem"]
    raw = pd.DataFrame.from_records(records) if records else pd.DataFrame(columns=cols)
    for col in cols:
        if col not in raw.columns:
            raw[col] = ""
    raw = raw.astype(object).where(raw.notna(), "")
    raw["row"] = raw["row"].astype(np.int64)
    return raw.reset_index(drop=True)


def _point_of(geom: Any) -> tuple[str, str, str]:
    if not isinstance(geom, dict):
        return "", "", "no geometry"
    if geom.get("type") != "Point":
        return "", "", f"geometry is {geom.get('type')!s}, not Point"
    coords = geom.get("coordinates")
    if not isinstance(coords, list) or len(coords) < 2:
        return "", "", "point has no [lon, lat] coordinates"
    return str(coords[1]), str(coords[0]), ""


def _coordinate(text: pd.Series, name: str, limit: float) -> tuple[NDArray[np.float64], list[str]]:
    stripped = text.astype(str).str.strip()
    values = pd.to_numeric(stripped, errors="coerce").to_numpy(dtype=float)
    reasons = []
    for s, v in zip(stripped, values, strict=True):
        if s == "":
            reasons.append(f"{name} missing")
        elif math.isnan(v):
            reasons.append(f"{name} not a number: {s!r}")
        elif not -limit <= v <= limit:
            reasons.append(f"{name} out of range [-{limit:g}, {limit:g}]: {s}")
        else:
            reasons.append("")
    return values, reasons


def _parse_time(text: str, zone: tzinfo | None) -> tuple[datetime | None, str]:
    s = text.strip()
    if not s:
        return None, "time missing"
    try:
        t = datetime.fromisoformat(s)
    except ValueError:
        return None, f"time not ISO 8601: {s!r}"
    if not _CLOCK.search(s):
        return None, f"time has no time of day: {s!r}"
    if t.tzinfo is not None and t.utcoffset() is not None:
        return t.astimezone(UTC), ""
    if zone is None:
        return None, f"time has no UTC offset and no tz was given: {s!r}"
    wall = t.replace(tzinfo=None)
    candidates = []
    for fold in (0, 1):
        local = wall.replace(tzinfo=zone, fold=fold)
        if local.astimezone(UTC).astimezone(zone).replace(tzinfo=None) == wall:
            candidates.append(local.astimezone(UTC))
    if not candidates:
        return None, f"local time does not exist in {zone} (clock change): {s!r}"
    if len(set(candidates)) > 1:
        return None, f"local time is ambiguous in {zone} (clock change): {s!r}"
    return candidates[0], ""


def _validate_events(
    raw: pd.DataFrame, *, zone: tzinfo | None
) -> tuple[pd.DataFrame, pd.DataFrame]:
    lat, lat_why = _coordinate(raw["lat"], "lat", 90.0)
    lon, lon_why = _coordinate(raw["lon"], "lon", 180.0)
    parsed = [_parse_time(str(t), zone) for t in raw["time"]]
    types = raw["type"].astype(str).str.strip()
    reasons = []
    for i in range(len(raw)):
        parts = [
            raw["_geometry_problem"].iat[i],
            lat_why[i] if not raw["_geometry_problem"].iat[i] else "",
            lon_why[i] if not raw["_geometry_problem"].iat[i] else "",
            parsed[i][1],
            "type missing" if types.iat[i] == "" else "",
        ]
        reasons.append("; ".join(p for p in parts if p))
    bad = np.array([r != "" for r in reasons], dtype=bool)

    rejected = raw.loc[bad].drop(columns="_geometry_problem").copy()
    rejected["reason"] = [r for r, b in zip(reasons, bad, strict=True) if b]
    rejected = rejected.reset_index(drop=True)

    keep = ~bad
    good = raw.loc[keep].drop(columns="_geometry_problem").copy()
    times = [t for (t, _), k in zip(parsed, keep, strict=True) if k]
    good["time"] = pd.Series(pd.to_datetime(times, utc=True), index=good.index).astype(
        "datetime64[us, UTC]"
    )
    good["lat"] = lat[keep]
    good["lon"] = lon[keep]
    good["type"] = types[keep]
    for col in good.columns:
        if col in {"row", "time", "lat", "lon", "type"}:
            continue
        text = good[col].astype(str).str.strip()
        if col == "severity":
            nonblank = text[text != ""]
            numbers = pd.to_numeric(nonblank, errors="coerce")
            if len(nonblank) and not numbers.isna().any():
                good[col] = pd.to_numeric(text.where(text != ""), errors="coerce")
                continue
        good[col] = text
    front = ["time", "lat", "lon", "type"]
    front += [c for c in OPTIONAL_EVENT_COLUMNS if c in good.columns]
    rest = [c for c in good.columns if c not in front and c != "row"]
    good = good[[*front, *rest, "row"]].reset_index(drop=True)
    return good, rejected


# ---------------------------------------------------------------------------------------------
# Empirical Bayes rates
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class GammaPrior:
    """Gamma prior of the unit rate per weighted km, fitted across units.

    Attributes
    ----------
    shape
        ``a``; ``inf`` when the prior collapsed to the pooled rate.
    rate
        ``b`` in weighted km; ``inf`` when collapsed.
    mean
        ``m = a / b``, events per weighted km (the pooled rate ``sum k / sum E`` for the
        moment fit).
    variance
        ``v = a / b**2`` (0 when collapsed).
    moment_variance
        The moment estimate of ``v`` before truncation (may be <= 0); computed for both methods.
    method
        ``"moments"`` or ``"likelihood"``.
    collapsed
        True when no extra-Poisson variation was found and every unit gets the pooled rate.
    n_units
        Units with positive exposure used in the fit.
    """

    shape: float
    rate: float
    mean: float
    variance: float
    moment_variance: float
    method: str
    collapsed: bool
    n_units: int

    def posterior_mean(self, events: ArrayLike, exposure: ArrayLike) -> NDArray[np.float64]:
        """Return ``(a + k) / (b + E)`` per unit (the pooled mean when collapsed)."""
        k = np.asarray(events, dtype=float)
        e = np.asarray(exposure, dtype=float)
        if self.collapsed:
            return np.broadcast_to(np.full(1, self.mean), np.broadcast(k, e).shape).copy()
        return (self.shape + k) / (self.rate + e)

    def log_likelihood(self, events: ArrayLike, exposure: ArrayLike) -> float:
        """Return the negative-binomial marginal log-likelihood of the counts."""
        phi = 0.0 if self.collapsed else 1.0 / self.shape
        k = np.asarray(events, dtype=float)
        e = np.asarray(exposure, dtype=float)
        return float(_nb_loglik(k[e > 0], e[e > 0], self.mean, phi))

    def as_dict(self) -> dict[str, Any]:
        """Return the prior as JSON-safe values (``None`` for an infinite shape or rate)."""

        def fin(x: float) -> float | None:
            return None if not math.isfinite(x) else float(x)

        return {
            "shape": fin(self.shape),
            "rate": fin(self.rate),
            "mean": float(self.mean),
            "variance": float(self.variance),
            "moment_variance": fin(self.moment_variance),
            "method": self.method,
            "collapsed": self.collapsed,
            "n_units": self.n_units,
        }


def _counts(values: ArrayLike, field: str) -> NDArray[np.float64]:
    arr = np.asarray(values, dtype=float)
    if arr.ndim != 1:
        raise InputFileError("expected one value per unit", field=field)
    if not np.all(np.isfinite(arr)) or np.any(arr < 0) or np.any(arr != np.round(arr)):
        raise InputFileError("event counts must be non-negative whole numbers", field=field)
    return arr


def _positive(values: ArrayLike, field: str, *, allow_zero: bool) -> NDArray[np.float64]:
    arr = np.asarray(values, dtype=float)
    if arr.ndim != 1:
        raise InputFileError("expected one value per unit", field=field)
    low_ok = arr >= 0 if allow_zero else arr > 0
    if not np.all(np.isfinite(arr)) or not np.all(low_ok):
        need = "non-negative" if allow_zero else "positive"
        raise InputFileError(f"values must be finite and {need}", field=field)
    return arr


def _moment_fit(k: NDArray[np.float64], e: NDArray[np.float64]) -> tuple[float, float]:
    """Return the pooled mean and the unbiased moment variance (see fit_gamma_prior)."""
    w = e.sum()
    m = k.sum() / w
    n = k.size
    if n < 2:
        return float(m), -math.inf
    s = np.sum((k - e * m) ** 2 / e)
    denom = w - np.sum(e**2) / w
    if denom <= 0:
        return float(m), -math.inf
    return float(m), float((s - (n - 1) * m) / denom)


def _nb_loglik(k: NDArray[np.float64], e: NDArray[np.float64], m: float, phi: float) -> float:
    """Return the NB marginal log-likelihood with mean ``E m`` and ``Var = E m (1 + phi E m)``.

    ``sum_{j<k} log1p(j phi) + k log(E m) - (1/phi + k) log1p(phi E m) - log k!``; at
    ``phi = 0`` this is the Poisson log-likelihood (the limit of the same expression).
    """
    if m <= 0:
        return 0.0 if np.all(k == 0) else -math.inf
    x = e * m
    kmax = int(k.max()) if k.size else 0
    cum = np.concatenate([[0.0], np.cumsum(np.log1p(phi * np.arange(kmax)))])
    ki = k.astype(np.int64)
    if phi > 0:
        tail = -(1.0 / phi + k) * np.log1p(phi * x)
    else:
        tail = -x
    ll = cum[ki] + k * np.log(x) + tail - _lgamma1(k)
    return float(np.sum(ll))


def _nb_score(
    k: NDArray[np.float64], e: NDArray[np.float64], m: float, phi: float
) -> NDArray[np.float64]:
    """Return the gradient of :func:`_nb_loglik` in ``(log m, phi)``.

    ``d/dlog m = sum (k - x) / (1 + phi x)`` and ``d/dphi = sum [sum_{j<k} j / (1 + j phi)
    + log1p(phi x) / phi**2 - (1/phi + k) x / (1 + phi x)]`` with ``x = E m``; below
    ``phi = 1e-8`` the last two terms take their limit ``x**2 / 2 - k x``.
    """
    x = e * m
    kmax = int(k.max()) if k.size else 0
    j = np.arange(kmax)
    cum = np.concatenate([[0.0], np.cumsum(j / (1.0 + j * phi))])
    ki = k.astype(np.int64)
    d_logm = np.sum((k - x) / (1.0 + phi * x))
    if phi < 1e-8:
        rest = x * x / 2.0 - k * x
    else:
        rest = np.log1p(phi * x) / phi**2 - (1.0 / phi + k) * x / (1.0 + phi * x)
    return np.array([float(d_logm), float(np.sum(cum[ki] + rest))])


def _lgamma1(k: NDArray[np.float64]) -> NDArray[np.float64]:
    return np.asarray(gammaln(k + 1.0), dtype=float)


def fit_gamma_prior(
    events: ArrayLike,
    exposure: ArrayLike,
    *,
    method: Literal["moments", "likelihood"] = "moments",
    start: tuple[float, float] | None = None,
) -> GammaPrior:
    r"""Fit the gamma prior of the unit rate across units.

    Parameters
    ----------
    events
        Event count ``k_i`` per unit (non-negative whole numbers).
    exposure
        Weighted exposure ``E_i = e_i * w_i`` per unit (km, or km x relative weight); units with
        ``E_i = 0`` must have ``k_i = 0`` and take no part in the fit.
    method
        ``"moments"`` (default) or ``"likelihood"`` (maximum negative-binomial marginal
        likelihood by ``scipy.optimize``).

    Returns
    -------
    GammaPrior

    Raises
    ------
    InputFileError
        On negative, fractional or non-finite counts or exposures, or events on a unit with
        no exposure.

    Notes
    -----
    **Moment estimator (derived here** [memory] **for the model in the module docstring).**
    With ``W = sum E_i`` and raw rates ``r_i = k_i / E_i``::

        m = sum k_i / W
        S = sum E_i (r_i - m)**2 = sum (k_i - E_i m)**2 / E_i
        v = (S - (n - 1) m) / (W - sum E_i**2 / W)
        a = m**2 / v,   b = m / v

    ``Var(r_i) = v + m / E_i`` and ``sum E_i (r_i - m)`` equals ``W (m_hat - m)``, so
    ``E[S] = v (W - sum E_i**2 / W) + (n - 1) m``: the estimator of ``v`` is exactly unbiased
    under the model. Marshall's (1991, Applied Statistics 40(2):283-294) [memory] global
    estimator ``S / W - m / mean(E) = (S - n m) / W`` is its large-sample form (equal when no
    unit holds a large share of the exposure).

    **No extra variation.** When the moment estimate is ``<= 0`` (the counts vary no more than
    Poisson noise around ``E_i m``), or fewer than two units have exposure, the prior collapses
    to a point mass at the pooled rate ``m``: ``shape = rate = inf``, ``variance = 0`` and every
    posterior mean equals ``m`` (the limit of ``(a + k) / (b + E)`` as ``a, b -> inf`` with
    ``a / b = m``). The likelihood fit collapses likewise when ``1 / a`` reaches 0.

    **Likelihood fit.** Maximises the negative-binomial marginal likelihood in ``(log m,
    phi = 1 / a)`` with L-BFGS-B and the analytic score, ``0 <= phi <= 1e4``, started at the
    moment estimate or at ``start = (m, phi)`` when given (e.g. a fit to nearly the same data).
    """
    if method not in ("moments", "likelihood"):
        raise OptionError(f"unknown method {method!r} (moments, likelihood)", field="method")
    k = _counts(events, "events")
    e = _positive(exposure, "km", allow_zero=True)
    if k.shape != e.shape:
        raise InputFileError("events and exposure differ in length", field="km")
    if np.any((e == 0) & (k > 0)):
        raise InputFileError("events on a unit with zero exposure", field="km")
    use = e > 0
    k, e = k[use], e[use]
    n = int(k.size)
    if n == 0 or e.sum() == 0:
        raise InputFileError("no unit has positive exposure", field="km")
    m, v_mom = _moment_fit(k, e)
    if m == 0:  # no events at all: the rate is estimated as zero everywhere
        return GammaPrior(math.inf, math.inf, 0.0, 0.0, v_mom, method, True, n)
    if method == "moments":
        if v_mom <= 0:
            log.info("fit_gamma_prior: moment variance %.3g <= 0, prior collapsed", v_mom)
            return GammaPrior(math.inf, math.inf, m, 0.0, v_mom, method, True, n)
        return GammaPrior(m * m / v_mom, m / v_mom, m, v_mom, v_mom, method, False, n)

    phi0 = v_mom / (m * m) if v_mom > 0 else 0.1
    x0 = np.array([math.log(m), min(max(phi0, 1e-3), 10.0)])

    if start is not None and start[0] > 0:
        x0 = np.array([math.log(start[0]), min(max(start[1], 1e-6), _PHI_MAX)])

    def neg(theta: NDArray[np.float64]) -> float:
        return -_nb_loglik(k, e, math.exp(float(theta[0])), float(theta[1]))

    res = optimize.minimize(
        neg,
        x0,
        jac=lambda th: -_nb_score(k, e, math.exp(float(th[0])), float(th[1])),
        method="L-BFGS-B",
        bounds=[(None, None), (0.0, _PHI_MAX)],
        options={"ftol": 1e-14, "gtol": 1e-10, "maxiter": 2000},
    )
    m_ml, phi = math.exp(float(res.x[0])), float(res.x[1])
    # compare with the Poisson end (phi = 0, where the MLE of m is the pooled rate)
    if phi <= _PHI_ZERO or neg(np.array([math.log(m), 0.0])) <= float(res.fun):
        log.info("fit_gamma_prior: likelihood fit found no extra variation, prior collapsed")
        return GammaPrior(math.inf, math.inf, m, 0.0, v_mom, method, True, n)
    if phi >= _PHI_MAX * (1 - 1e-9):
        log.warning("fit_gamma_prior: likelihood fit reached the bound 1/shape = %g", _PHI_MAX)
    a = 1.0 / phi
    return GammaPrior(a, a / m_ml, m_ml, m_ml * m_ml * phi, v_mom, method, False, n)


def poisson_pvalues(events: ArrayLike, expected: ArrayLike) -> NDArray[np.float64]:
    """Return the exact upper-tail Poisson p-values ``P(X >= k | mean = expected)``.

    Computed as ``scipy.stats.poisson.sf(k - 1, expected)``; ``k = 0`` gives 1. Works
    element-wise on arrays of any shape.
    """
    k = np.asarray(events, dtype=float)
    mu = np.asarray(expected, dtype=float)
    return np.asarray(stats.poisson.sf(k - 1, mu), dtype=float)


def _prior_pvalues(
    k: NDArray[np.float64], e: NDArray[np.float64], prior: GammaPrior
) -> NDArray[np.float64]:
    """Return ``P(X >= k)`` under the prior predictive negative binomial."""
    if prior.collapsed:
        return poisson_pvalues(k, e * prior.mean)
    p = prior.rate / (prior.rate + e)
    return np.asarray(stats.nbinom.sf(k - 1, prior.shape, p), dtype=float)


def _refit(
    k: NDArray[np.float64], e: NDArray[np.float64], start: tuple[float, float]
) -> GammaPrior:
    """Refit the likelihood prior from a nearby optimum by Newton steps on the score.

    Used when one unit is left out: the optimum moves little, so a few Newton steps (Hessian
    by central differences of the analytic score) converge; anything else (an optimum at or
    near 1/shape = 0, a Hessian that is not negative definite, no convergence) falls back to
    :func:`fit_gamma_prior`, which the result equals to optimiser precision.
    """
    m0, phi0 = start
    use = e > 0
    kk, ee = k[use], e[use]
    if m0 > 0 and phi0 > 1e-6 and kk.sum() > 0:
        th = np.array([math.log(m0), phi0])
        for _ in range(30):
            g = _nb_score(kk, ee, math.exp(th[0]), th[1])
            hs = np.empty((2, 2))
            for j in range(2):
                d = 1e-6 * max(1.0, abs(th[j]))
                up, dn = th.copy(), th.copy()
                up[j] += d
                dn[j] -= d
                hs[:, j] = (
                    _nb_score(kk, ee, math.exp(up[0]), up[1])
                    - _nb_score(kk, ee, math.exp(dn[0]), dn[1])
                ) / (2 * d)
            hs = (hs + hs.T) / 2
            if not (hs[0, 0] < 0 and np.linalg.det(hs) > 0):
                break
            step = np.linalg.solve(hs, g)
            th = th - step
            if th[1] <= 1e-6:
                break
            if np.all(np.abs(step) < 1e-10 * np.maximum(1.0, np.abs(th))):
                m, phi = math.exp(th[0]), float(th[1])
                m_pool, _ = _moment_fit(kk, ee)
                if _nb_loglik(kk, ee, m, phi) > _nb_loglik(kk, ee, m_pool, 0.0):
                    _, v_mom = _moment_fit(kk, ee)
                    a = 1.0 / phi
                    return GammaPrior(
                        a, a / m, m, m * m * phi, v_mom, "likelihood", False, int(kk.size)
                    )
                break
    return fit_gamma_prior(k, e, method="likelihood", start=start)


def loo_prior_pvalues(events: ArrayLike, exposure: ArrayLike) -> NDArray[np.float64]:
    """Return each unit's negative binomial tail ``P(X >= k_i)`` under a prior fitted without it.

    The gamma prior is refitted by maximum likelihood (:func:`fit_gamma_prior`) on all other
    units with exposure; a unit without events gets 1, as its tail always is.
    """
    k = _counts(events, "events")
    e = _positive(exposure, "km", allow_zero=True)
    p = np.ones(k.size)
    keep = np.ones(k.size, dtype=bool)
    if not np.any((k > 0) & (e > 0)):
        return p
    full = fit_gamma_prior(k, e, method="likelihood")
    start = (full.mean, 0.0 if full.collapsed else 1.0 / full.shape)
    for i in np.flatnonzero((k > 0) & (e > 0)).tolist():
        keep[i] = False
        prior = _refit(k[keep], e[keep], start)
        keep[i] = True
        p[i] = float(_prior_pvalues(k[i : i + 1], e[i : i + 1], prior)[0])
    return p


def unit_rates(
    table: pd.DataFrame,
    *,
    unit: str = "unit",
    events: str = "events",
    km: str = "km",
    weight: str | None = None,
    method: Literal["moments", "likelihood"] = "moments",
    pvalue: Literal["poisson", "prior", "prior_loo"] = "poisson",
    q: float = 0.1,
) -> tuple[pd.DataFrame, GammaPrior]:
    """Compute empirical Bayes rates, p-values and FDR flags per unit.

    Parameters
    ----------
    table
        One row per unit (unit ids must be unique).
    unit, events, km
        Column names of the unit id, event count and km driven.
    weight
        Column of the relative exposure weight ``w_i > 0`` (the unit's modelled pedestrian
        exposure); ``None`` means 1 for every unit.
    method
        Prior fit, see :func:`fit_gamma_prior`.
    pvalue
        ``"poisson"`` (default): ``P(X >= k | mean = E_i m)``, i.e. a test against the common
        rate that treats all extra variation as signal. ``"prior"``: the same tail under the
        fitted gamma-Poisson (negative binomial) prior predictive, i.e. a unit is flagged only
        if it stands out from the spread of rates the other units show as well.
        ``"prior_loo"``: the same negative binomial tail with the prior refitted by maximum
        likelihood without the unit tested (a cross-validated predictive check; Marshall and
        Spiegelhalter 2003, Statistics in Medicine 22:1649-1660 [memory]), so that a real hot
        spot does not widen the very spread it is judged against.
    q
        False discovery rate of the Benjamini-Hochberg flags (0 < q < 1). The default 0.1 is
        a judgement [practice], not data.

    Returns
    -------
    units
        In input order: ``unit``, ``events``, ``km``, ``weight``, ``raw_rate`` (k / km; NaN at
        0 km), ``expected`` (``km * weight * m``), ``eb_rate`` (per km,
        ``weight * (a + k) / (b + km * weight)``), ``eb_ratio`` (``eb_rate / (weight * m)``),
        ``p_value``, ``q_value`` (BH-adjusted p-value) and ``flagged`` (``q_value <= q``).
    prior
        The fitted :class:`GammaPrior`.

    Raises
    ------
    InputFileError
        On a missing column or bad values (``field`` names the column).
    OptionError
        On a bad ``q``, ``method`` or ``pvalue``.
    """
    _check_q(q)
    if pvalue not in ("poisson", "prior", "prior_loo"):
        raise OptionError(
            f"unknown p-value kind {pvalue!r} (poisson, prior, prior_loo)", field="pvalue"
        )
    cols = [unit, events, km] + ([weight] if weight is not None else [])
    for col in cols:
        if col not in table.columns:
            raise InputFileError("column is missing from the unit table", field=col)
    if table[unit].duplicated().any():
        dup = table.loc[table[unit].duplicated(), unit].iloc[0]
        raise InputFileError(f"unit id {dup!r} appears more than once", field=unit)
    k = _counts(table[events].to_numpy(), events)
    e = _positive(table[km].to_numpy(), km, allow_zero=True)
    w = (
        np.ones_like(e)
        if weight is None
        else _positive(table[weight].to_numpy(), weight, allow_zero=False)
    )
    if np.any((e == 0) & (k > 0)):
        bad = table.loc[(e == 0) & (k > 0), unit].iloc[0]
        raise InputFileError(f"unit {bad!r} has events but zero km", field=km)
    ew = e * w
    prior = fit_gamma_prior(k, ew, method=method)
    expected = ew * prior.mean
    theta = prior.posterior_mean(k, ew)
    if pvalue == "poisson":
        p = poisson_pvalues(k, expected)
    elif pvalue == "prior":
        p = _prior_pvalues(k, ew, prior)
    else:
        p = loo_prior_pvalues(k, ew)
    with np.errstate(invalid="ignore", divide="ignore"):
        raw = np.where(e > 0, k / np.where(e > 0, e, 1.0), np.nan)
        ratio = theta / prior.mean if prior.mean > 0 else np.full_like(theta, np.nan)
    qv = bh_adjusted(p)
    out = pd.DataFrame(
        {
            unit: table[unit].to_numpy(),
            "events": k.astype(np.int64),
            "km": e,
            "weight": w,
            "raw_rate": raw,
            "expected": expected,
            "eb_rate": w * theta,
            "eb_ratio": ratio,
            "p_value": p,
            "q_value": qv,
            "flagged": qv <= q,
        },
        index=table.index,
    )
    log.info(
        "unit_rates: %d units, %d events, prior %s (collapsed=%s), %d flagged at q=%g",
        len(out),
        int(k.sum()),
        method,
        prior.collapsed,
        int(out["flagged"].sum()),
        q,
    )
    return out, prior


# ---------------------------------------------------------------------------------------------
# Benjamini-Hochberg
# ---------------------------------------------------------------------------------------------


def _check_q(q: float) -> None:
    if not (isinstance(q, int | float) and 0 < float(q) < 1):
        raise OptionError(f"false discovery rate must be between 0 and 1, got {q!r}", field="q")


def _check_p(p: NDArray[np.float64]) -> None:
    if p.size and (not np.all(np.isfinite(p)) or p.min() < 0 or p.max() > 1):
        raise ValueError("p-values must be finite and within [0, 1]")


def benjamini_hochberg(p_values: ArrayLike, *, q: float = 0.1) -> NDArray[np.bool_]:
    """Return the Benjamini-Hochberg step-up flags at false discovery rate ``q``.

    With the ``m`` p-values sorted, ``p(1) <= ... <= p(m)``, flag every ``p(i)`` with
    ``i <= max{i : p(i) <= i q / m}`` (none if the set is empty). Works along the last axis,
    so a 2-D array is a batch of independent families.

    Parameters
    ----------
    p_values
        P-values in [0, 1].
    q
        False discovery rate (0 < q < 1).

    Returns
    -------
    numpy.ndarray
        Boolean flags in the input order and shape.
    """
    _check_q(q)
    p = np.asarray(p_values, dtype=float)
    _check_p(p)
    if p.size == 0:
        return np.zeros(p.shape, dtype=bool)
    m = p.shape[-1]
    order = np.argsort(p, axis=-1, kind="stable")
    ps = np.take_along_axis(p, order, axis=-1)
    ranks = np.arange(1, m + 1)
    below = ps <= ranks * q / m
    last = np.where(below.any(axis=-1), m - np.argmax(below[..., ::-1], axis=-1), 0)
    sorted_flags = ranks <= last[..., None]
    flags = np.empty_like(sorted_flags)
    np.put_along_axis(flags, order, sorted_flags, axis=-1)
    return flags


def bh_adjusted(p_values: ArrayLike) -> NDArray[np.float64]:
    """Return Benjamini-Hochberg adjusted p-values along the last axis.

    ``q_value(i) = min_{j >= i} min(1, m p(j) / j)`` in sorted order, so that
    ``q_value <= q`` gives exactly the flags of :func:`benjamini_hochberg` at level ``q``.
    """
    p = np.asarray(p_values, dtype=float)
    _check_p(p)
    if p.size == 0:
        return p.copy()
    m = p.shape[-1]
    order = np.argsort(p, axis=-1, kind="stable")
    ps = np.take_along_axis(p, order, axis=-1)
    scaled = ps * m / np.arange(1, m + 1)
    adj = np.minimum.accumulate(scaled[..., ::-1], axis=-1)[..., ::-1]
    adj = np.minimum(adj, 1.0)
    out = np.empty_like(adj)
    np.put_along_axis(out, order, adj, axis=-1)
    return out


# ---------------------------------------------------------------------------------------------
# Poisson CUSUM
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class CusumDesign:
    """A Poisson CUSUM designed for a nominal in-control mean per period.

    Attributes
    ----------
    mu0
        Nominal in-control expected count per period the design is computed for.
    ratio
        Rate ratio ``r > 1`` the chart is tuned to detect (``mu1 = r mu0``).
    k
        Reference value at ``mu0``: ``(mu1 - mu0) / ln(mu1 / mu0) = mu0 (r - 1) / ln r``,
        rounded to the nearest multiple of ``1 / grid``.
    h
        Decision interval (a multiple of ``1 / grid``); alarm when ``S_t > h``.
    arl0_target
        Requested in-control average run length (periods).
    arl0
        Markov-chain in-control ARL of this chart at ``mu0`` (>= ``arl0_target``).
    arl1
        Markov-chain ARL at the shifted mean ``r mu0``.
    grid
        Number of lattice steps per event used by the Markov chain.
    """

    mu0: float
    ratio: float
    k: float
    h: float
    arl0_target: float
    arl0: float
    arl1: float
    grid: int

    @property
    def k_per_expected(self) -> float:
        """Return the reference value per expected event, ``k / mu0``, used when mu0 varies."""
        return self.k / self.mu0

    def alarm(self, statistic: ArrayLike) -> NDArray[np.bool_]:
        """Return ``S > h`` element-wise, with ``S`` within rounding noise of ``h`` not alarmed.

        On the lattice ``S`` often lands exactly on ``h`` (an in-control state of the Markov
        chain); floating-point sums of ``x - k`` may miss it by ~1e-15, so the comparison
        allows ``1e-9 * max(1, h)``.
        """
        s = np.asarray(statistic, dtype=float)
        return np.asarray(s > self.h + 1e-9 * max(1.0, self.h))

    def as_dict(self) -> dict[str, Any]:
        """Return the design as JSON-safe values."""
        return {
            "mu0": self.mu0,
            "ratio": self.ratio,
            "k": self.k,
            "h": self.h,
            "arl0_target": self.arl0_target,
            "arl0": self.arl0,
            "arl1": self.arl1,
            "grid": self.grid,
        }


def _lattice(value: float, grid: int) -> int:
    return int(round(value * grid))


def _transient(mean: float, kk: int, hh: int, grid: int) -> sparse.csc_matrix:
    """Return the transient transition matrix of the lattice chart (states 0..hh)."""
    n = hh + 1
    i = np.arange(n)
    # to state 0: i + grid x - kk <= 0  <=>  x <= (kk - i) / grid
    reach0 = kk - i
    rows = [i]
    cols = [np.zeros(n, dtype=np.int64)]
    vals = [np.where(reach0 >= 0, stats.poisson.cdf(np.floor(reach0 / grid), mean), 0.0)]
    xmax = (n - 1 + kk) // grid
    pmf = stats.poisson.pmf(np.arange(xmax + 1), mean)
    for x in range(xmax + 1):
        j = i + grid * x - kk
        ok = (j >= 1) & (j <= n - 1)
        rows.append(i[ok])
        cols.append(j[ok])
        vals.append(np.full(int(ok.sum()), pmf[x]))
    return sparse.csc_matrix(
        (np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))), shape=(n, n)
    )


def _arl_lattice(mean: float, kk: int, hh: int, grid: int) -> float:
    """Return the zero-start ARL of the lattice chart (states 0..hh in units of 1/grid)."""
    q = _transient(mean, kk, hh, grid)
    n = hh + 1
    a = (sparse.identity(n, format="csc") - q).tocsc()
    arl = np.atleast_1d(sparse_linalg.spsolve(a, np.ones(n)))
    return float(arl[0])


def cusum_arl(mean: float, *, k: float, h: float, grid: int = 100) -> float:
    """Return the average run length of a Poisson CUSUM started at 0.

    Brook and Evans (1972) [memory]: with ``k`` and ``h`` on the lattice of step ``1 / grid``
    and integer counts, ``S_t = max(0, S_{t-1} + x_t - k)`` stays on the lattice, so the chart
    is a finite Markov chain with transient states ``0, 1/grid, ..., h`` (alarm at ``S > h``).
    With ``Q`` its transient transition matrix the ARL vector solves ``(I - Q) L = 1``; the
    result is exact for the lattice chart, not an approximation.

    Parameters
    ----------
    mean
        Poisson mean of the count per period (``mu0`` for the in-control ARL, ``r mu0`` for
        the out-of-control one).
    k, h
        Reference value and decision interval, rounded to multiples of ``1 / grid``.
    grid
        Lattice steps per event; the chain has ``h * grid + 1`` states (sparse solve).

    Returns
    -------
    float
        Expected number of periods to the first alarm.
    """
    if not (mean > 0 and math.isfinite(mean)):
        raise OptionError("mean count per period must be positive", field="mu0")
    if not (isinstance(grid, int) and grid >= 1):
        raise OptionError("grid must be a positive whole number", field="grid")
    if k < 0 or h < 0:
        raise OptionError("k and h must be non-negative", field="h")
    return _arl_lattice(float(mean), _lattice(k, grid), _lattice(h, grid), grid)


def design_cusum(
    mu0: float, *, ratio: float = 2.0, arl0: float = 500.0, grid: int | None = None
) -> CusumDesign:
    """Design a Poisson CUSUM: reference value and decision interval for an ARL0.

    Parameters
    ----------
    mu0
        Nominal in-control expected count per period (e.g. expected events per week at the
        usual mileage).
    ratio
        Rate ratio to detect, ``r > 1``; 2 means a doubling.
    arl0
        In-control average run length wanted, in periods (false alarm every ``arl0`` periods
        on average). The default 500 is a judgement [practice].
    grid
        Lattice steps per event for the Markov chain (``k`` is rounded to ``1 / grid``).
        ``None`` picks ``max(100, ceil(100 / k))``, so that rounding moves ``k`` by at most
        0.5 % (and at most 0.005 events).

    Returns
    -------
    CusumDesign
        ``h`` is the smallest lattice value whose Markov-chain ARL at ``mu0`` is at least
        ``arl0`` (the ARL grows with ``h``; found by doubling then bisection).

    Notes
    -----
    The chart is the log-likelihood-ratio CUSUM of Poisson(``mu0``) against
    Poisson(``r mu0``): ``L_t = max(0, L_{t-1} + x_t ln r - mu0_t (r - 1))``. Dividing by
    ``ln r`` gives ``S_t = max(0, S_{t-1} + x_t - k_t)`` with ``k_t = mu0_t (r - 1) / ln r``,
    Lucas's reference value ``(mu1 - mu0) / ln(mu1 / mu0)``; both forms alarm together, and
    with exposure varying by period ``k_t`` scales with ``mu0_t`` exactly as the LLR demands.
    This module reports ``S`` (in events). The ARL is exact at ``mu0``; for periods whose
    expected count differs from ``mu0`` it is an approximation (the run length in periods
    changes with the exposure per period). The ARL is a step function of ``h``: when one
    count value is likely and lands just above a lattice state, the achieved ``arl0`` can
    exceed the target by tens of percent (e.g. 717 for a target of 500 at ``mu0 = 10``,
    ``r = 2``); the design reports the achieved value, which is the one to quote.
    """
    for name, val in (("mu0", mu0), ("ratio", ratio), ("arl0", arl0)):
        if not (isinstance(val, int | float) and math.isfinite(val)):
            raise OptionError(f"{name} must be a finite number", field=name)
    if mu0 <= 0:
        raise OptionError("in-control mean per period must be positive", field="mu0")
    if ratio <= 1:
        raise OptionError("rate ratio to detect must be above 1", field="ratio")
    if arl0 <= 1:
        raise OptionError("in-control run length must be above 1 period", field="arl0")
    k_exact = mu0 * (ratio - 1) / math.log(ratio)
    if grid is None:
        grid = max(100, math.ceil(100 / k_exact))
    if not (isinstance(grid, int) and grid >= 1):
        raise OptionError("grid must be a positive whole number", field="grid")
    kk = _lattice(k_exact, grid)
    if kk == 0:
        raise OptionError("grid too coarse: the reference value rounds to 0", field="grid")

    def arl(hh: int) -> float:
        return _arl_lattice(float(mu0), kk, hh, grid)

    lo, hi = -1, max(grid, 1)  # arl(lo) < target by convention
    while arl(hi) < arl0:
        lo, hi = hi, hi * 2
        if hi > 1_000_000:
            raise OptionError(
                "no decision interval reaches this ARL0 within the lattice; lower arl0 or use "
                "longer periods",
                field="arl0",
            )
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if arl(mid) >= arl0:
            hi = mid
        else:
            lo = mid
    design = CusumDesign(
        mu0=float(mu0),
        ratio=float(ratio),
        k=kk / grid,
        h=hi / grid,
        arl0_target=float(arl0),
        arl0=arl(hi),
        arl1=_arl_lattice(float(mu0) * ratio, kk, hi, grid),
        grid=grid,
    )
    log.info(
        "design_cusum: mu0=%g ratio=%g k=%g h=%g ARL0=%.1f ARL1=%.2f",
        mu0,
        ratio,
        design.k,
        design.h,
        design.arl0,
        design.arl1,
    )
    return design


def cusum_path(
    counts: ArrayLike, expected: ArrayLike, *, design: CusumDesign, start: ArrayLike = 0.0
) -> NDArray[np.float64]:
    """Return the CUSUM statistic ``S_t`` along the last axis.

    ``S_t = max(0, S_{t-1} + x_t - k_t)`` with ``k_t = design.k_per_expected * expected_t``
    (equal to ``design.k`` when ``expected_t = design.mu0``) and ``S_0 = start``. Leading axes
    are independent series (e.g. simulated runs).
    """
    x = np.asarray(counts, dtype=float)
    mu = np.broadcast_to(np.asarray(expected, dtype=float), x.shape)
    if np.any(~np.isfinite(mu)) or np.any(mu < 0):
        raise InputFileError("expected counts must be finite and non-negative", field="expected")
    kt = design.k_per_expected * mu
    s = np.broadcast_to(np.asarray(start, dtype=float), x.shape[:-1]).copy()
    out = np.empty(x.shape, dtype=float)
    for t in range(x.shape[-1]):
        s = np.maximum(0.0, s + x[..., t] - kt[..., t])
        out[..., t] = s
    return out


def cusum_alerts(
    table: pd.DataFrame,
    *,
    design: CusumDesign,
    group: str = "group",
    period: str = "period",
    events: str = "events",
    expected: str = "expected",
) -> pd.DataFrame:
    """Run one CUSUM per group and return the first alarm of each alarmed group.

    Parameters
    ----------
    table
        One row per group and period: count of events and in-control expected count (e.g.
        km driven in the period x the unit's in-control rate). Periods are sorted within each
        group; a missing period is simply absent (no count, no expectation).
    design
        From :func:`design_cusum`.
    group, period, events, expected
        Column names.

    Returns
    -------
    pandas.DataFrame
        Columns ``group``, ``period`` (first period with ``S_t > h``), ``statistic`` (``S_t``
        then, in events), ``h``; one row per alarmed group, sorted by period then group. The
        chart is not restarted after an alarm.
    """
    for col in (group, period, events, expected):
        if col not in table.columns:
            raise InputFileError("column is missing from the period table", field=col)
    if table.duplicated([group, period]).any():
        raise InputFileError("a group has the same period twice", field=period)
    k = _counts(table[events].to_numpy(), events)
    mu = table[expected].to_numpy(dtype=float)
    if np.any(~np.isfinite(mu)) or np.any(mu < 0):
        raise InputFileError("expected counts must be finite and non-negative", field=expected)
    work = pd.DataFrame(
        {"g": table[group].to_numpy(), "t": table[period].to_numpy(), "x": k, "mu": mu}
    ).sort_values(["g", "t"], kind="stable")
    rows = []
    for g, part in work.groupby("g", sort=True):
        s = cusum_path(part["x"].to_numpy(), part["mu"].to_numpy(), design=design)
        hit = np.flatnonzero(design.alarm(s))
        if hit.size:
            i = int(hit[0])
            rows.append(
                {group: g, period: part["t"].iat[i], "statistic": float(s[i]), "h": design.h}
            )
    out = pd.DataFrame(rows, columns=[group, period, "statistic", "h"])
    if len(out):
        out = out.sort_values([period, group], kind="stable").reset_index(drop=True)
    log.info("cusum_alerts: %d groups, %d alarmed", work["g"].nunique(), len(out))
    return out


# ---------------------------------------------------------------------------------------------
# Over-dispersion
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Dispersion:
    """Whether unit counts vary more than Poisson noise around ``E_i m``.

    Attributes
    ----------
    pearson_chi2, df, pearson_ratio, pearson_p
        Pearson's ``X2 = sum (k_i - E_i m)**2 / (E_i m)`` with the pooled rate ``m``, its
        degrees of freedom ``n - 1``, ``X2 / df`` and the upper tail ``chi2.sf(X2, df)``
        (scipy). With many small expected counts the chi-square reference is rough; the
        likelihood-ratio test below is the one that decides.
    prior
        The negative binomial (gamma-Poisson) fit by maximum likelihood (NB2 with the
        exposure as offset, the model statsmodels' ``NegativeBinomial(loglike_method="nb2")``
        fits with an intercept only).
    lr_stat, lr_p
        ``2 (loglik_NB - loglik_Poisson)`` and its p-value against the boundary mixture
        ``0.5 chi2(0) + 0.5 chi2(1)`` (1/shape = 0 lies on the edge of the parameter space;
        Self and Liang 1987, JASA 82:605-610 [memory]).
    alpha
        Level of the test.
    """

    pearson_chi2: float
    df: int
    pearson_ratio: float
    pearson_p: float
    prior: GammaPrior
    lr_stat: float
    lr_p: float
    alpha: float

    @property
    def significant(self) -> bool:
        """Return True when the likelihood-ratio test rejects Poisson at ``alpha``."""
        return bool(self.lr_p < self.alpha)

    @property
    def inv_shape(self) -> float:
        """Return ``1 / shape`` of the fitted negative binomial (0 when collapsed)."""
        return 0.0 if self.prior.collapsed else 1.0 / self.prior.shape

    def as_dict(self) -> dict[str, Any]:
        """Return the test as JSON-safe, rounded values."""
        return {
            "pearson_chi2": round(self.pearson_chi2, 6),
            "df": self.df,
            "pearson_ratio": round(self.pearson_ratio, 6),
            "pearson_p": float(f"{self.pearson_p:.6g}"),
            "negbin_inv_shape": round(self.inv_shape, 6),
            "lr_stat": round(self.lr_stat, 6),
            "lr_p": float(f"{self.lr_p:.6g}"),
            "alpha": self.alpha,
            "significant": self.significant,
        }


def dispersion_test(events: ArrayLike, exposure: ArrayLike, *, alpha: float = 0.05) -> Dispersion:
    """Test the unit counts for extra-Poisson variation (see :class:`Dispersion`).

    Parameters
    ----------
    events, exposure
        Counts ``k_i`` and weighted exposures ``E_i`` per unit, as for :func:`fit_gamma_prior`.
    alpha
        Level of the likelihood-ratio test; 0.05 is a convention [practice].
    """
    if not 0 < alpha < 1:
        raise OptionError(f"must be between 0 and 1, got {alpha}", field="alpha")
    k = _counts(events, "events")
    e = _positive(exposure, "km", allow_zero=True)
    prior = fit_gamma_prior(k, e, method="likelihood")
    use = e > 0
    k, e = k[use], e[use]
    m = k.sum() / e.sum()
    df = max(int(k.size) - 1, 1)
    x2 = float(np.sum((k - e * m) ** 2 / (e * m))) if m > 0 else 0.0
    ll0 = _nb_loglik(k, e, float(m), 0.0)
    ll1 = ll0 if prior.collapsed else _nb_loglik(k, e, prior.mean, 1.0 / prior.shape)
    lr = max(0.0, 2.0 * (ll1 - ll0))
    lr_p = 1.0 if lr <= 0 else 0.5 * float(stats.chi2.sf(lr, 1))
    return Dispersion(x2, df, x2 / df, float(stats.chi2.sf(x2, df)), prior, lr, lr_p, alpha)


# ---------------------------------------------------------------------------------------------
# A family of CUSUM charts
# ---------------------------------------------------------------------------------------------


def family_arl(designs: list[CusumDesign], *, tol: float = 1e-12, max_steps: int = 20000) -> float:
    """Return the in-control run length of a family of independent charts run together.

    The family alarms at the first alarm of any chart, so its run length is the minimum of
    the charts' run lengths and ``P(RL_F > t) = prod_i P(RL_i > t)`` for independent
    charts. Each chart's survival ``P(RL_i > t)`` is the zero-start entry of ``Q_i^t 1``
    for its lattice Markov chain (Brook and Evans 1972) [memory], so the sum
    ``ARL_F = sum_t P(RL_F > t)`` is exact for the lattice charts, each chart seeing one
    period at its own ``mu0`` per step. Once the survival ratio from step to step settles
    (the chain's leading eigenvalue) the tail is summed as a geometric series.
    """
    if not designs:
        raise OptionError("no charts in the family", field="charts")
    qs = [_transient(d.mu0, _lattice(d.k, d.grid), _lattice(d.h, d.grid), d.grid) for d in designs]
    q = sparse.block_diag(qs, format="csr")
    starts = np.concatenate([[0], np.cumsum([m.shape[0] for m in qs])[:-1]])
    v = np.ones(q.shape[0])
    total, surv, prev_ratio = 0.0, 1.0, -1.0
    for _ in range(max_steps):
        total += surv
        v = q @ v
        new = float(np.prod(v[starts]))
        if new <= 0:
            return total
        ratio = new / surv
        surv = new
        if surv < 1e-15 or abs(ratio - prev_ratio) < tol:
            return total + surv / (1.0 - ratio) if ratio < 1 else math.inf
        prev_ratio = ratio
    return total + surv / (1.0 - prev_ratio) if prev_ratio < 1 else math.inf


def false_alarms_per(
    days: float, designs: list[CusumDesign], shares: ArrayLike | None = None
) -> float:
    """Return the expected false alarms of a family over ``days`` periods of driving.

    Chart ``i`` runs on a share ``s_i`` of the periods (1 by default) and alarms falsely
    about once per ``arl0_i`` of its own periods, so the family gives
    ``days * sum_i s_i / arl0_i`` (the renewal rate; each chart restarted after an alarm).
    """
    s = np.ones(len(designs)) if shares is None else np.asarray(shares, dtype=float)
    return float(days * np.sum(s / np.array([d.arl0 for d in designs])))
