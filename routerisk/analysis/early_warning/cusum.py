"""Poisson CUSUM: design, run length, path, alerts, and a family of charts.

Page 1954, Biometrika 41:100-115; Lucas 1985, Technometrics 27(2):129-144 [memory]; the
decision interval is set for an in-control average run length by the Markov chain of Brook
and Evans (1972, Biometrika 59(3):539-549) [memory].
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike, NDArray
from scipy import sparse, stats
from scipy.sparse import linalg as sparse_linalg

from routerisk.analysis.early_warning.rates import _counts
from routerisk.errors import InputFileError, OptionError

# The package's logger, so that log lines name ``routerisk.analysis.early_warning`` as before.
log = logging.getLogger(__package__)


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
