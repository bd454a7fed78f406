"""Over-dispersion: whether unit counts vary more than Poisson noise (Pearson, LR tests)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats

from routerisk.analysis.early_warning.rates import (
    GammaPrior,
    _counts,
    _nb_loglik,
    _positive,
    fit_gamma_prior,
)
from routerisk.errors import OptionError


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
