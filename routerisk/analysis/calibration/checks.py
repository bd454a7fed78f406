"""Goodness of fit: deviance, Pearson dispersion, the dispersion test, leave-one-site-out."""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from routerisk.analysis.calibration.design import Design
from routerisk.analysis.calibration.fit import Fit, fit_fixed
from routerisk.profile import Profile

#: The negative binomial model is chosen when the test of alpha = 0 gives p below this.
DISPERSION_P = 0.05


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


def judged_columns(design: Design, profile: Profile) -> np.ndarray:
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
    judged = judged_columns(design, profile)
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
