"""The uncertainty parts of the score outputs: interval text and the interval chart."""

from __future__ import annotations

from typing import Any


def intervals(unc: dict[str, Any] | None) -> dict[tuple[str, str], str]:
    """Return 'low - high' text of each route's interval under weight draws, by (name, depart)."""
    if unc is None:
        return {}
    return {(r["name"], r["depart"]): f"{r['low']:.3f} - {r['high']:.3f}" for r in unc["routes"]}


def interval_chart(unc: dict[str, Any]) -> str:
    """Return a PNG data URI: each route's median risk and interval under the weight draws."""
    rts = sorted(unc["routes"], key=lambda r: (r["median"], r["name"]))
    from routerisk.render import aggplot as plt
    from routerisk.render.routemap import png_data_uri

    fig, ax = plt.subplots(figsize=(4.6, 0.6 + 0.35 * max(1, len(rts))))
    for i, r in enumerate(rts):
        ax.plot([r["low"], r["high"]], [i, i], color="#3b3b3b", lw=2.5, solid_capstyle="butt")
        ax.plot([r["median"]], [i], "o", color="#ffffff", mec="#3b3b3b", ms=5)
        ax.plot([r["risk"]], [i], "|", color="#b0301c", ms=10, mew=2)
    ax.set_yticks(range(len(rts)), [f"{r['name']} {r['depart'][5:16]}" for r in rts])
    ax.tick_params(axis="y", labelsize=7)
    ax.set_xlabel(
        f"risk: {round(100 * unc['level'])} % interval (bar), median (dot), profile weights (tick)",
        fontsize=7,
    )
    ax.set_title(f"Risk under {unc['draws']} weight draws (seed {unc['seed']})", fontsize=9)
    ax.grid(axis="x", alpha=0.3)
    fig.tight_layout()
    return png_data_uri(fig)
