"""The two pyplot calls the route maps use, on matplotlib's Agg canvas without pyplot.

Importing pyplot would load a GUI backend machinery and, with ``matplotlib.use``, change the
backend of a program that imports routerisk; a Figure on its own Agg canvas does neither and
draws the same pixels.
"""

from __future__ import annotations

from typing import Any


def subplots(**figure_kw: Any) -> tuple[Any, Any]:
    """Return ``(figure, axes)`` as ``matplotlib.pyplot.subplots(**figure_kw)`` does."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(**figure_kw)
    FigureCanvasAgg(fig)
    return fig, fig.subplots()


def close(fig: Any) -> None:
    """Release a figure (pyplot keeps no reference to these; this only clears it)."""
    fig.clear()
