"""Draw the evidence chart: the zero-event upper limit of the rate against distance.

:func:`plot_upper_limit` uses matplotlib's Agg canvas directly (no pyplot, no global backend
change) and writes the PNG atomically, with the caution and the provenance line.
"""

from __future__ import annotations

import io
import logging
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
from scipy import stats

from routerisk import CAUTION
from routerisk.io.atomic import provenance_line, write_bytes_atomic
from routerisk.render.evidence_text import _human

if TYPE_CHECKING:
    from routerisk.analysis.evidence.plan import EvidencePlan

# The package's logger, so that log lines name ``routerisk.analysis.evidence`` as before the split.
logger = logging.getLogger(__package__)


def _write_bytes_atomic(path: str | Path, data: bytes, *, force: bool = True) -> Path:
    return write_bytes_atomic(path, data, force=force)


def _upper_curve(plan: EvidencePlan, distances: np.ndarray) -> np.ndarray:
    count0 = float(stats.chi2.ppf(plan.inputs.confidence, 2)) / 2.0
    return np.asarray(count0 / distances * plan.inputs.per)


def plot_upper_limit(
    plan: EvidencePlan,
    path: str | Path,
    *,
    force: bool = True,
    made_from: dict[str, Any] | None = None,
) -> Path:
    """Draw the zero-event upper limit of the rate against distance, with the target line.

    Uses matplotlib's Agg canvas directly (no pyplot, no global backend change) and writes
    the PNG atomically.

    Parameters
    ----------
    plan
        The evidence plan.
    path
        Output PNG file (replaced if present with ``force``, else refused).
    force
        Replace an existing file.
    made_from
        Provenance (:func:`routerisk.io.atomic.provenance`) to record in the PNG's
        ``Description`` text chunk.

    Returns
    -------
    Path
        The written file.
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    inp = plan.inputs
    unit = inp.units
    n0 = plan.miles_no_failure
    lo, hi = n0 / 30.0, n0 * 30.0
    if inp.observed:
        lo, hi = min(lo, inp.observed / 3.0), max(hi, inp.observed * 3.0)
    xs = np.geomspace(lo, hi, 200)

    fig = Figure(figsize=(8.0, 5.2), dpi=100)
    FigureCanvasAgg(fig)
    ax = fig.add_subplot(1, 1, 1)
    ax.loglog(
        xs,
        _upper_curve(plan, xs),
        color="#1f5f8b",
        lw=2,
        label=f"upper limit of the rate with no event ({inp.confidence:.0%} confidence)",
    )
    ax.axhline(
        plan.target_rate,
        color="#b5462c",
        lw=1.5,
        ls="--",
        label=f"target: {plan.target_rate:.3g} per {_human(inp.per)} {unit}",
    )
    ax.axvline(n0, color="#777777", lw=1, ls=":")
    ax.plot([n0], [plan.target_rate], "o", color="#b5462c")
    ax.annotate(
        f"{_human(n0)} {unit}",
        (n0, plan.target_rate),
        textcoords="offset points",
        xytext=(8, 8),
        fontsize=9,
    )
    if inp.observed and plan.upper_rate is not None:
        ax.plot(
            [inp.observed],
            [plan.upper_rate],
            "s",
            color="#2b7a3d",
            label=f"driven so far: {_human(inp.observed)} {unit}, {inp.events} events",
        )
    ax.set_xlabel(f"distance driven ({unit})")
    ax.set_ylabel(f"events per {_human(inp.per)} {unit}")
    ax.set_title("How far to drive with no event to show a rate below the target")
    ax.grid(True, which="both", alpha=0.25)
    ax.legend(loc="upper right", fontsize=8)
    fig.text(0.01, 0.01, CAUTION, fontsize=6, wrap=True, va="bottom", color="#444444")
    fig.subplots_adjust(bottom=0.2)
    buf = io.BytesIO()
    meta: dict[str, str | None] = {"Software": None}
    if made_from is not None:
        meta["Description"] = provenance_line(made_from)
    fig.savefig(buf, format="png", metadata=meta)
    out = _write_bytes_atomic(path, buf.getvalue(), force=force)
    logger.info("plot_upper_limit wrote %s", out)
    return out
