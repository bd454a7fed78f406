"""Maximum-likelihood fits of ``E[y] = Z @ theta``, ``theta >= 0``: Poisson and NB2."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


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
