"""Empirical Bayes rates per unit: gamma prior, Poisson and prior-predictive p-values.

Hauer 1997; the Highway Safety Manual's EB step [memory]. See the package docstring for
the model and notation.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass
from typing import Any, Literal

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray
from scipy import optimize, stats
from scipy.special import gammaln

from routerisk.analysis.early_warning.fdr import _check_q, bh_adjusted
from routerisk.errors import InputFileError, OptionError

# The package's logger, so that log lines name ``routerisk.analysis.early_warning`` as before.
log = logging.getLogger(__package__)

_PHI_MAX = 1e4  # upper bound of 1/shape in the marginal-likelihood fit
_PHI_ZERO = 1e-10  # 1/shape at or below this counts as "no extra variation"


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
