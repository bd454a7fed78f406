"""Benjamini-Hochberg step-up false discovery rate flags and adjusted p-values.

(Benjamini and Hochberg 1995, JRSS B 57(1):289-300) [memory].
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from routerisk.errors import OptionError


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
