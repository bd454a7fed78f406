"""Early warnings from logged safety events: reading, rates, flags and CUSUM.

Pure statistics on pandas and numpy. Matching events to drives and segments, and the
command line, live elsewhere; this package takes per-unit (or per-period) tables and
returns tables. Submodules: ``rates`` (empirical Bayes), ``fdr`` (Benjamini-Hochberg),
``dispersion`` (over-dispersion tests), ``cusum`` (Poisson CUSUM and chart families); the
event-log reader lives in :mod:`routerisk.io.events` and is re-exported here.

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

from routerisk.analysis.early_warning.cusum import (
    CusumDesign,
    cusum_alerts,
    cusum_arl,
    cusum_path,
    design_cusum,
    false_alarms_per,
    family_arl,
)
from routerisk.analysis.early_warning.dispersion import Dispersion, dispersion_test
from routerisk.analysis.early_warning.fdr import benjamini_hochberg, bh_adjusted
from routerisk.analysis.early_warning.rates import (
    GammaPrior,
    fit_gamma_prior,
    loo_prior_pvalues,
    poisson_pvalues,
    unit_rates,
)
from routerisk.io.events import EVENT_COLUMNS, OPTIONAL_EVENT_COLUMNS, read_events

__all__ = [
    "EVENT_COLUMNS",
    "OPTIONAL_EVENT_COLUMNS",
    "CusumDesign",
    "Dispersion",
    "GammaPrior",
    "benjamini_hochberg",
    "bh_adjusted",
    "cusum_alerts",
    "cusum_arl",
    "cusum_path",
    "design_cusum",
    "dispersion_test",
    "false_alarms_per",
    "family_arl",
    "fit_gamma_prior",
    "loo_prior_pvalues",
    "poisson_pvalues",
    "read_events",
    "unit_rates",
]
