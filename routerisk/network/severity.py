"""Impact speed to the probability that a struck pedestrian dies or is severely injured.

The curve interpolates the published points of Tefft, B.C. (2013), "Impact speed and a
pedestrian's risk of severe injury or death", Accident Analysis & Prevention 50:871-878,
monotonically in logit space (PCHIP), and extends it linearly in logit space beyond the
first and last points. No third-party fit is used.
"""

from __future__ import annotations

import numpy as np

MPH_TO_KPH = 1.609344

#: Tefft (2013): risk levels and the impact speeds (mph) at which they are reached.
TEFFT_2013 = {
    "death": ((0.10, 0.25, 0.50, 0.75, 0.90), (24.1, 32.5, 40.6, 48.0, 54.6)),
    "severe_injury": ((0.10, 0.25, 0.50, 0.75, 0.90), (17.1, 24.9, 33.0, 40.8, 48.1)),
}


def _logit(p: np.ndarray) -> np.ndarray:
    return np.log(p / (1.0 - p))


def probability(speed_mph: np.ndarray | float, *, outcome: str = "death") -> np.ndarray:
    """Return the probability of the outcome at the given impact speeds (mph).

    Parameters
    ----------
    speed_mph
        Impact speeds in miles per hour (scalar or array; negative values are clipped to 0).
    outcome
        ``"death"`` or ``"severe_injury"`` (AIS 4+).
    """
    if outcome not in TEFFT_2013:
        raise ValueError(f"unknown outcome {outcome!r}; use one of {sorted(TEFFT_2013)}")
    from scipy.interpolate import PchipInterpolator  # slow to import; only builds use it

    probs, speeds = (np.asarray(a, dtype=float) for a in TEFFT_2013[outcome])
    y = _logit(probs)
    curve = PchipInterpolator(speeds, y, extrapolate=False)
    v = np.clip(np.asarray(speed_mph, dtype=float), 0.0, None)
    out = curve(v)
    lo_slope = (y[1] - y[0]) / (speeds[1] - speeds[0])
    hi_slope = (y[-1] - y[-2]) / (speeds[-1] - speeds[-2])
    out = np.where(v < speeds[0], y[0] + lo_slope * (v - speeds[0]), out)
    out = np.where(v > speeds[-1], y[-1] + hi_slope * (v - speeds[-1]), out)
    return 1.0 / (1.0 + np.exp(-out))


def severity_factor(
    speed_kph: np.ndarray | float, *, outcome: str = "death", reference_mph: float = 25.0
) -> np.ndarray:
    """Return the severity factor: probability at the speed over probability at a reference.

    A street driven at the reference speed has factor 1; faster streets weigh more.
    """
    v_mph = np.asarray(speed_kph, dtype=float) / MPH_TO_KPH
    return probability(v_mph, outcome=outcome) / probability(reference_mph, outcome=outcome)
