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

from routerisk.analysis.calibration.checks import (
    DISPERSION_P,
    cross_validate,
    deviance,
    dispersion_test,
    pearson_dispersion,
)
from routerisk.analysis.calibration.design import (
    SNAP_LIMIT_M,
    Design,
    Placement,
    baseline_multipliers,
    build_design,
    check_design,
    period_multipliers,
    place_sites,
)
from routerisk.analysis.calibration.fit import Fit, fit_fixed, fit_nb, loglik, weights_from
from routerisk.analysis.calibration.profile_out import (
    calibrated_document,
    profile_text,
    write_profile,
    write_text,
)
from routerisk.analysis.calibration.run import Calibration, calibrate
from routerisk.io.counts import COLUMNS, MAX_PERIOD, CountsError, read_counts

__all__ = [
    "COLUMNS",
    "DISPERSION_P",
    "MAX_PERIOD",
    "SNAP_LIMIT_M",
    "Calibration",
    "CountsError",
    "Design",
    "Fit",
    "Placement",
    "baseline_multipliers",
    "build_design",
    "calibrate",
    "calibrated_document",
    "check_design",
    "cross_validate",
    "deviance",
    "dispersion_test",
    "fit_fixed",
    "fit_nb",
    "loglik",
    "pearson_dispersion",
    "period_multipliers",
    "place_sites",
    "profile_text",
    "read_counts",
    "weights_from",
    "write_profile",
    "write_text",
]
