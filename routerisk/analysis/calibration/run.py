"""Calibrate a profile on counts: read, place, fit, test and cross-validate; the outcome."""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from routerisk.analysis.calibration.checks import (
    cross_validate,
    deviance,
    dispersion_test,
    judged_columns,
    pearson_dispersion,
)
from routerisk.analysis.calibration.design import (
    SNAP_LIMIT_M,
    Design,
    Placement,
    build_design,
    check_design,
    place_sites,
)
from routerisk.analysis.calibration.fit import Fit, fit_fixed, fit_nb, weights_from
from routerisk.errors import OptionError
from routerisk.io.counts import CountsError, read_counts
from routerisk.profile import Profile

# the package's name, as the log lines always said
log = logging.getLogger(__package__)


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
    judged = judged_columns(design, net.profile)
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
