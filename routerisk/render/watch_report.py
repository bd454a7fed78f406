"""The files of ``routerisk watch``: overlay, CSV tables, map and HTML report."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from routerisk.analysis import early_warning
from routerisk.analysis.watch.result import (
    LIMITS,
    MONTH_DAYS,
    WatchResult,
    _fmt,
)
from routerisk.render.watch_map import flag_map


def cusum_chart(result: WatchResult, groups: list[str]) -> bytes:
    """Return a PNG of each group's CUSUM statistic over its decision interval, by day."""
    from routerisk.render import report

    fig = report.new_figure(8.0, 3.2)
    ax = fig.subplots()
    design = {r.group: r for r in result.designs.itertuples(index=False)}
    for g in groups:
        if g not in design:
            continue
        r = design[g]
        d = early_warning.CusumDesign(r.mu0, 0.0, r.k, r.h, r.arl0_target, r.arl0, r.arl1, 1)
        part = result.periods[result.periods["group"] == g].sort_values("period")
        s = early_warning.cusum_path(
            part["events"].to_numpy(), part["expected"].to_numpy(), design=d
        )
        ax.step(range(len(s)), s / r.h if r.h > 0 else s, where="post", label=g)
    ax.axhline(1.0, color="#8e2a58", ls="--", lw=1, label="decision interval h (alarm above)")
    ax.set_xlabel("day (in order of driving)")
    ax.set_ylabel("CUSUM statistic / h")
    ax.legend(fontsize=7)
    ax.grid(alpha=0.3)
    return report.png_bytes(fig)


def _comment(lines: list[str]) -> str:
    return "".join(f"# {x}\n" for x in lines)


def write_outputs(
    net: Any,
    result: WatchResult,
    out: str | Path,
    *,
    force: bool = False,
    close: bool = False,
    inputs: dict[str, Any] | None = None,
) -> Path:
    """Write overlay.yaml, segments.csv, charts.csv, map.html and report.html into ``out``.

    Each records the tool version, the profile fingerprint and the checksums of the
    network source and of ``inputs`` (role -> file or folder: events, drives), and says
    which unit, expectation, test and baseline were used.
    """
    from routerisk import CAUTION
    from routerisk.io.atomic import atomic_directory, provenance, provenance_line
    from routerisk.network import overlay
    from routerisk.render import mapview, report

    prov = provenance(profile=net.profile.fingerprint, network=net, inputs=inputs)
    seg = result.segments
    flagged = seg[seg["flagged"]]
    how = result.method_lines()
    mem = result.members
    fl_mem = mem[mem["unit"].isin(set(flagged["unit"]))].merge(
        flagged[["unit", "eb_ratio"]], on="unit"
    )
    with atomic_directory(out, force=force) as tmp:
        overlay.write_overlay(
            tmp / "overlay.yaml",
            overlay.flagged_rows(fl_mem, close=close),
            profile=net.profile.fingerprint,
            source=f"routerisk watch ({result.unit} units, "
            f"{result.test_used} test, {result.expected} expected)",
            made_from=prov,
        )
        cols = [
            "unit",
            "street",
            "band",
            "u",
            "v",
            "key",
            "events",
            "events_forward",
            "events_backward",
            "km",
            "km_forward",
            "km_backward",
            "expected",
            "eb_rate",
            "eb_ratio",
            "p_value",
            "q_value",
            "flagged",
            "expected_modelled",
            "expected_distance",
            "flagged_modelled",
            "flagged_distance",
            "disagree",
        ]
        head = _comment([CAUTION, LIMITS, *how, provenance_line(prov)])
        table = seg[cols].round(6)
        for col in ("p_value", "q_value"):  # small p-values keep their digits
            table[col] = [f"{x:.6g}" for x in seg[col]]
        (tmp / "segments.csv").write_text(
            head + table.to_csv(index=False, lineterminator="\n"), encoding="utf-8"
        )
        (tmp / "charts.csv").write_text(
            head + result.designs.round(6).to_csv(index=False, lineterminator="\n"),
            encoding="utf-8",
        )
        m = flag_map(net, result, prov)
        (tmp / "map.html").write_text(mapview.render(m), encoding="utf-8")
        groups = list(result.alerts["group"].astype(str)[:5]) or list(
            result.periods.groupby("group")["events"]
            .sum()
            .sort_values(ascending=False)
            .index.astype(str)[:3]
        )
        show = [
            "unit",
            "street",
            "events",
            "events_forward",
            "events_backward",
            "km",
            "expected",
            "eb_rate",
            "p_value",
            "q_value",
        ]
        dis = seg[seg["disagree"]]
        body = [
            report.section(
                "How these numbers were made",
                "".join(report.paragraph(x) for x in how),
                report.paragraph(LIMITS),
            ),
            report.section(
                f"Flagged {result.unit}s",
                report.frame_html(flagged[show].round(4), index=False)
                if len(flagged)
                else report.paragraph(
                    f"No {result.unit} has more events than its "
                    f"{result.expected} expectation explains at a false "
                    f"discovery rate of {result.q:g}."
                ),
            ),
            report.section(
                "Where modelled and distance-only expectations disagree",
                report.paragraph(
                    "Modelled expectations tolerate more events where the model expects more "
                    "pedestrians; distance-only expectations use the km driven alone. Each "
                    "row is flagged under one and not the other."
                ),
                report.frame_html(
                    dis[
                        [
                            "unit",
                            "street",
                            "events",
                            "km",
                            "expected_modelled",
                            "flagged_modelled",
                            "expected_distance",
                            "flagged_distance",
                        ]
                    ].round(4),
                    index=False,
                )
                if len(dis)
                else report.paragraph("None: both flag the same units."),
            ),
            report.section(
                "CUSUM charts (one per group)",
                report.frame_html(result.designs.round(4), index=False)
                if len(result.designs)
                else report.paragraph("No group has a positive in-control expectation."),
            ),
            report.section(
                "CUSUM alerts",
                report.frame_html(result.alerts, index=False)
                if len(result.alerts)
                else report.paragraph("No alert."),
                report.image_html(cusum_chart(result, groups), alt="CUSUM statistics over time"),
            ),
            report.section(
                "Events left out",
                report.frame_html(result.rejected, index=False)
                if len(result.rejected)
                else report.paragraph("None."),
            ),
        ]
        fam = result.family
        facts = [
            ("profile", f"{net.profile.name} ({net.profile.fingerprint})"),
            ("events matched", len(result.matched)),
            ("false discovery rate", result.q),
            ("test", f"{result.test_used} (asked: {result.test})"),
            ("unit", result.unit),
            ("expected", result.expected),
            (
                "CUSUM",
                f"{fam.get('design')}; family run length "
                f"{_fmt(fam.get('family_arl0'))} days, "
                f"{_fmt(fam.get('false_alarms_per_30_days'))} false alarms "
                f"per {MONTH_DAYS:g} days",
            ),
        ]
        (tmp / "report.html").write_text(
            report.page("Early warnings", body, facts=facts, provenance=prov), encoding="utf-8"
        )
    return Path(out)
