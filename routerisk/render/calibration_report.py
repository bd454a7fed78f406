"""The HTML report of ``routerisk calibrate``: weights, fit, residuals and the count sites."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from routerisk.analysis.calibration import Calibration, deviance, pearson_dispersion
from routerisk.render import report

CANNOT_TELL = (
    "Counts measure how many people walk past a point, not how often they meet a vehicle: "
    "the fitted weights say where and when pedestrians are present, not where conflicts or "
    "crashes happen, and no crash data is used. A weight is only as good as the sites near "
    "its category: categories with no site inside their influence keep their judged weight "
    "and are marked not fitted, and a handful of sites gives wide intervals. Radii, decays, "
    "time profiles and the street baseline are not fitted; a poor fit by hour or by road "
    "class (below) points at them."
)


def _residuals(cal: Calibration) -> np.ndarray:
    y, mu, a = cal.design.y, cal.fit.mu, cal.fit.alpha
    return (y - mu) / np.sqrt(mu * (1 + a * mu))


def _scatter(cal: Calibration) -> Any:
    import matplotlib as mpl

    y, mu = cal.design.y, cal.fit.mu
    with mpl.rc_context(report._RC):
        fig = report.new_figure(5.0, 4.2)
        ax = fig.add_subplot(1, 1, 1)
        ax.scatter(mu, y, s=14, color=report.SERIES_COLOURS[0], alpha=0.8)
        top = float(max(y.max(), mu.max(), 1.0)) * 1.05
        ax.plot([0, top], [0, top], color=report.SERIES_COLOURS[1], lw=1.0, ls="--")
        ax.set_xlim(0, top)
        ax.set_ylim(0, top)
        ax.set_xlabel("predicted count (calibrated profile)")
        ax.set_ylabel("observed count")
        ax.set_title("Observed against predicted, one point per counting period")
        ax.grid(True, alpha=0.25)
        fig.subplots_adjust(left=0.13, right=0.97, top=0.9, bottom=0.12)
    return fig


def _group_rows(keys: pd.Series, cal: Calibration) -> list[dict[str, Any]]:
    df = pd.DataFrame(
        {
            "key": keys.to_numpy(),
            "observed": cal.design.y,
            "predicted": cal.fit.mu,
            "residual": _residuals(cal),
        }
    )
    g = df.groupby("key", sort=True).agg(
        periods=("observed", "size"),
        observed=("observed", "sum"),
        predicted=("predicted", "sum"),
        residual=("residual", "mean"),
    )
    return [
        {"group": str(k), **{c: (int(v) if c == "periods" else float(v)) for c, v in row.items()}}
        for k, row in g.iterrows()
    ]


def _sites_map(cal: Calibration, net: Any) -> str:
    import folium

    from routerisk.render import mapview

    s = cal.placement.sites
    w, e_ = float(s["lon"].min()), float(s["lon"].max())
    so, n = float(s["lat"].min()), float(s["lat"].max())
    m = mapview.new_map((w - 0.002, so - 0.002, e_ + 0.002, n + 0.002))
    obs = (
        cal.design.periods.assign(mu=cal.fit.mu)
        .groupby("site")
        .agg(observed=("count", "sum"), predicted=("mu", "sum"))
    )
    for row in s.itertuples(index=False):
        placed = bool(row.placed)
        if placed:
            o = obs.loc[row.site]
            tip = (
                f"site {row.site}: observed {int(o['observed'])}, predicted "
                f"{float(o['predicted']):.0f} ({row.distance_m:.0f} m from the street)"
            )
        else:
            tip = f"site {row.site}: left out, {row.distance_m:.0f} m from the nearest street"
        folium.CircleMarker(
            [float(row.lat), float(row.lon)],
            radius=6,
            color="#1d3557" if placed else "#8a8a8a",
            fill=True,
            fill_opacity=0.8,
            tooltip=mapview.escape(tip),
        ).add_to(m)
    mapview.add_panel(
        m,
        mapview.legend_html(
            "Count sites", [("#1d3557", "placed on a street"), ("#8a8a8a", "left out (too far)")]
        ),
    )
    return report.map_html(m, title="Count sites")


def render(cal: Calibration, net: Any, provenance: dict[str, Any]) -> str:
    """Return the self-contained HTML page of a calibration."""
    summ = cal.summary()
    weights = cal.weights()
    wrows = []
    for w in weights:
        status = (
            "not fitted: no site near"
            if not w["fitted"]
            else "held at zero (bound)"
            if w["at_zero"]
            else "fitted"
        )
        wrows.append(
            {
                "category": w["label"],
                "judged": w["judged"],
                "fitted": w["weight"],
                "se": w["se"],
                "low": w["low"],
                "high": w["high"],
                "sites": w["sites_near"],
                "status": status,
            }
        )
    wtable = report.table_html(
        wrows,
        [
            ("category", "category"),
            ("judged", "judged weight"),
            ("fitted", "calibrated weight"),
            ("se", "standard error"),
            ("low", "95 % low"),
            ("high", "95 % high"),
            ("sites", "sites near"),
            ("status", "status"),
        ],
        caption="Weights before and after (intervals from the observed information)",
    )
    base_rows = [
        {
            "road_class": b["road_class"],
            "judged": b["judged"],
            "fitted": b.get("baseline"),
            "low": b.get("low"),
            "high": b.get("high"),
            "status": "fitted" if b["fitted"] else "held (sets the units)",
        }
        for b in cal.baselines()
    ]
    base_table = (
        report.table_html(
            base_rows,
            [
                ("road_class", "road class"),
                ("judged", "judged baseline"),
                ("fitted", "calibrated baseline"),
                ("low", "95 % low"),
                ("high", "95 % high"),
                ("status", "status"),
            ],
            caption="Street baselines (--fit-baseline)",
        )
        if base_rows
        else ""
    )
    fig = report.grouped_bar_chart(
        [w["category"] for w in weights],
        {"judged": [w["judged"] for w in weights], "calibrated": [w["weight"] for w in weights]},
        title="Weights, judged and calibrated",
        ylabel="weight",
    )
    test = cal.test
    y = cal.design.y
    facts_fit = [
        ("model chosen", summ["model"]),
        (
            "dispersion test",
            f"{test['test']}: statistic {test['statistic']:.3f}, "
            f"p = {test['p_value']:.3g} (negative binomial when p < "
            f"{test['threshold']})",
        ),
        ("alpha (NB2 dispersion)", cal.fit.alpha),
        (
            "Pearson dispersion, Poisson fit",
            pearson_dispersion(y, cal.poisson.mu, len(cal.poisson.theta)),
        ),
        (
            "Pearson dispersion, chosen fit",
            pearson_dispersion(y, cal.fit.mu, len(cal.fit.theta), cal.fit.alpha),
        ),
        ("deviance, chosen fit", deviance(y, cal.fit.mu, cal.fit.alpha)),
        (
            "scale (pedestrians per hour per unit of presence)",
            f"{summ['scale']['estimate']:.4g} +/- {summ['scale']['se']:.3g}",
        ),
        ("leave-one-site-out RMSE, calibrated", cal.cv["rmse_fitted"]),
        ("leave-one-site-out RMSE, judged weights", cal.cv["rmse_judged"]),
        ("leave-one-site-out mean deviance, calibrated", cal.cv["deviance_fitted"]),
        ("leave-one-site-out mean deviance, judged weights", cal.cv["deviance_judged"]),
        ("uncertainty", summ["uncertainty_method"]),
    ]
    per = cal.design.periods
    edges = net.edges
    rows = per["edge"].to_numpy()
    road = pd.Series(edges["highway"].astype(str).to_numpy()[rows])
    local = [t.astimezone(net.timezone) for t in per["start"]]
    hour = pd.Series([f"{t.hour:02d}:00" for t in local])
    day = pd.Series(["weekend" if t.weekday() >= 5 else "weekday" for t in local])
    cat_rows = []
    res = _residuals(cal)
    for c in cal.profile.categories:
        near = edges[f"exp_{c.name}"].to_numpy()[rows] > 0
        if near.any():
            cat_rows.append(
                {
                    "group": c.label,
                    "periods": int(near.sum()),
                    "observed": float(y[near].sum()),
                    "predicted": float(cal.fit.mu[near].sum()),
                    "residual": float(res[near].mean()),
                }
            )
    cols = [
        ("group", "group"),
        ("periods", "periods"),
        ("observed", "observed"),
        ("predicted", "predicted"),
        ("residual", "mean Pearson residual"),
    ]
    dig = {"observed": 0, "predicted": 1, "residual": 3}
    by_hour = _group_rows(day + " " + hour, cal)
    res_fig = report.bar_chart(
        [r["group"] for r in by_hour],
        [r["residual"] for r in by_hour],
        title="Mean Pearson residual by start hour",
        xlabel="mean Pearson residual (observed above predicted > 0)",
    )
    left = "".join(
        f"<li>{report.escape(s)}: {d:.1f} m from the nearest street</li>"
        for s, d in cal.placement.left_out
    )
    body = [
        report.section(
            "What the counts can and cannot tell",
            report.paragraph(CANNOT_TELL),
            *(report.note_html(n) for n in cal.notes),
        ),
        report.section(
            "Weights",
            wtable,
            base_table,
            report.figure_html(fig, alt="Judged and calibrated weights by category"),
        ),
        report.section(
            "Fit",
            report.pairs_html(facts_fit, caption="Goodness of fit"),
            report.figure_html(_scatter(cal), alt="Observed against predicted"),
        ),
        report.section(
            "Residuals",
            report.table_html(cat_rows, cols, digits=dig, caption="By category (periods near it)"),
            report.table_html(_group_rows(road, cal), cols, digits=dig, caption="By road class"),
            report.table_html(by_hour, cols, digits=dig, caption="By day type and start hour"),
            report.figure_html(res_fig, alt="Residuals by start hour"),
        ),
        report.section(
            "Sites",
            _sites_map(cal, net),
            report.table_html(
                _group_rows(per["site"], cal),
                cols,
                digits=dig,
                caption="Observed and predicted by site",
            ),
            (f"<p>Left out (farther than the placing limit):</p><ul>{left}</ul>" if left else ""),
        ),
    ]
    facts = [
        ("profile calibrated", f"{cal.profile.name} ({cal.profile.fingerprint})"),
        ("counts", f"{summ['sites']} sites, {summ['periods']} periods"),
    ]
    return report.page(
        "Calibration on pedestrian counts",
        body,
        facts=facts,
        provenance=provenance,
        toc=[
            (report.anchor(t), t)
            for t in ("What the counts can and cannot tell", "Weights", "Fit", "Residuals", "Sites")
        ],
    )
