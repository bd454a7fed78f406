"""The demo: every stage of routerisk on the invented sample town of Corvane."""

from __future__ import annotations

import logging
from collections.abc import Callable
from pathlib import Path
from typing import Any

from routerisk import CAUTION, datasets
from routerisk.io.atomic import atomic_directory, dumps_json, provenance, provenance_line
from routerisk.network.folder import build_network, save_network
from routerisk.render import mapview

log = logging.getLogger(__name__)

TOWN_TIMEZONE = "Etc/GMT+3"


def run_demo(
    out: str | Path, *, force: bool = False, echo: Callable[[str], None] = lambda s: None
) -> dict[str, Any]:
    """Run every stage on the sample town, writing into ``out``; return a summary."""
    summary: dict[str, Any] = {}
    with atomic_directory(out, force=force) as tmp:
        net = build_network(datasets.get_path("town"), timezone=TOWN_TIMEZONE)
        save_network(net, tmp / "network")
        summary["network"] = net.summary()
        echo(
            f"network: {summary['network']['edges']} edges, "
            f"{summary['network']['length_km']:.1f} km; sources {summary['network']['sources']}"
        )
        mapview.save(mapview.network_map(net), tmp / "network_map.html")
        echo("network map: network_map.html")
        for stage in _STAGES:
            part = stage(net, tmp, echo)
            if part:
                summary.update(part)
        summary["made_from"] = provenance(
            profile=net.profile.fingerprint,
            network=net,
            inputs={
                k: datasets.get_path(k) for k in ("routes", "area", "events", "drives", "counts")
            },
        )
        (tmp / "summary.json").write_text(dumps_json(summary) + "\n", encoding="utf-8")
    echo(CAUTION)
    return summary


_STAGES: list[Callable[..., dict[str, Any] | None]] = []


def _stage_score(net: Any, out: Path, echo: Callable[[str], None]) -> dict[str, Any]:
    from routerisk.analysis import scoring
    from routerisk.io import routes
    from routerisk.render import routemap

    planned = routes.read_routes(datasets.get_path("routes"), default_tz=net.timezone)
    scores = scoring.score_routes(net, planned)
    routemap.write_outputs(
        net, scores, out / "scores", inputs={"routes": datasets.get_path("routes")}
    )
    echo(
        "scores: "
        + "; ".join(
            f"{s.name} risk {s.risk:.2f} (index {s.relative_index:.2f}, "
            f"{len(s.rule_breaks)} rule breaks)"
            for s in scores
        )
    )
    return {"scores": [s.to_dict() for s in scores]}


def _stage_suggest(net: Any, out: Path, echo: Callable[[str], None]) -> dict[str, Any]:
    from routerisk.analysis.alternatives import suggest_routes
    from routerisk.io import routes
    from routerisk.render import routemap

    planned = routes.read_routes(datasets.get_path("routes"), default_tz=net.timezone)
    result = suggest_routes(net, planned)
    mapview.save(
        routemap.suggestion_map(net, result, inputs={"routes": datasets.get_path("routes")}),
        out / "alternatives_map.html",
    )
    for s in result:
        best = min((a.risk_change_pct for a in s.alternatives), default=0.0)
        echo(f"alternatives for {s.name}: {len(s.alternatives)}, best risk change {best:+.0f} %")
    return {"alternatives": [s.to_dict() for s in result]}


_STAGES.extend([_stage_score, _stage_suggest])


def _stage_review(net: Any, out: Path, echo: Callable[[str], None]) -> dict[str, Any]:
    from routerisk.analysis import review
    from routerisk.render.review_files import write_review

    areas = review.read_areas(datasets.get_path("area"), crs=net.crs)
    what_if = (
        review.parse_what_if([f"rule:{net.profile.rules[0].name}=off"], net.profile)
        if net.profile.rules
        else None
    )
    result = review.review_areas(net, areas, what_ifs=[what_if] if what_if else [])
    write_review(result, out=out / "review")
    data = result.to_json()
    for a in data["areas"]:
        echo(
            f"area {a['name']}: {a['network_km']:.1f} km, peak closed "
            f"{max(a['closed_km_by_hour']):.1f} km, {len(a['allowed_parts'])} allowed part(s)"
        )
    return {"review": data}


_STAGES.append(_stage_review)


def _stage_evidence(net: Any, out: Path, echo: Callable[[str], None]) -> dict[str, Any]:
    from routerisk.analysis import evidence

    # Illustrative benchmark only: 11 events per 1e9 miles (the demo's drives are invented).
    inputs = evidence.EvidenceInputs(benchmark=11.0, per=1e9)
    plan = evidence.plan_evidence(inputs)
    frame = evidence.segments_from_drives(net, datasets.get_path("drives"))
    plan = plan.with_exposure(
        evidence.distance_by_exposure(frame, needed=plan.miles_no_failure, units=inputs.units)
    )
    made_from = provenance(
        profile=net.profile.fingerprint, network=net, inputs={"drives": datasets.get_path("drives")}
    )
    lines = evidence.describe(plan)
    lines.insert(-1, f"Made from: {provenance_line(made_from)}.")
    (out / "evidence.txt").write_text("\n".join(lines) + "\n", encoding="utf-8")
    evidence.plot_upper_limit(plan, out / "evidence_chart.png", made_from=made_from)
    echo(
        f"evidence: {plan.miles_no_failure / 1e6:.0f} million mi with no event to show the "
        f"target; the sample drives cover {frame['length_m'].sum() / 1609.344:.1f} mi"
    )
    return {"evidence": plan.to_json()}


_STAGES.append(_stage_evidence)


def _stage_watch(net: Any, out: Path, echo: Callable[[str], None]) -> dict[str, Any]:
    from routerisk.analysis import watch
    from routerisk.render.watch_report import write_outputs

    result = watch.watch(net, datasets.get_path("events"), datasets.get_path("drives"))
    write_outputs(
        net,
        result,
        out / "warnings",
        inputs={"events": datasets.get_path("events"), "drives": datasets.get_path("drives")},
    )
    flagged = result.segments[result.segments["flagged"]]
    streets = sorted(set(flagged["street"]))
    echo(
        f"early warnings: {len(result.matched)} events matched, {len(flagged)} "
        f"{result.unit}(s) flagged ({', '.join(streets) or 'none'}; {result.test_used} test), "
        f"{len(result.alerts)} CUSUM alert(s)"
    )
    return {"warnings": result.to_dict()}


_STAGES.append(_stage_watch)


def _stage_plan(net: Any, out: Path, echo: Callable[[str], None]) -> dict[str, Any]:
    import datetime as dt

    from routerisk.analysis import dayplan, planning

    runs = planning.read_runs(datasets.get_path("runs"))
    plan = dayplan.plan_day(net, runs, dt.date(2027, 3, 9), vehicles=2)
    dayplan.write_outputs(net, plan, out / "day_plan", inputs={"runs": datasets.get_path("runs")})
    d = plan.to_dict()
    echo(
        f"day plan {d['date']}: {len(d['runs'])} runs placed ({d['status']}), total risk "
        f"{d['total_risk']:.2f} against {d['naive_total_risk']:.2f} for the naive plan"
    )
    return {"day_plan": d}


_STAGES.append(_stage_plan)


def _ranking(scores: list[Any]) -> list[str]:
    return [s.name for s in sorted(scores, key=lambda s: (-s.risk, s.name))]


def _stage_calibrate(net: Any, out: Path, echo: Callable[[str], None]) -> dict[str, Any]:
    from routerisk.analysis import calibration, scoring, uncertainty
    from routerisk.io import routes
    from routerisk.profile import load_profile
    from routerisk.render import calibration_report
    from routerisk.render.report import write_report

    counts = datasets.get_path("counts")
    cal = calibration.calibrate(net, counts)
    folder = out / "calibration"
    folder.mkdir()
    made_from = provenance(profile=net.profile.fingerprint, network=net, inputs={"counts": counts})
    calibration.write_profile(cal, folder / "profile.yaml", provenance=made_from)
    write_report(folder / "report.html", calibration_report.render(cal, net, made_from))
    fitted = net.retag(load_profile(folder / "profile.yaml"))
    planned = routes.read_routes(datasets.get_path("routes"), default_tz=net.timezone)
    before = scoring.score_routes(net, planned)
    after = scoring.score_routes(fitted, planned)
    unc = uncertainty.summarise(
        fitted, after, 4000, uncertainty.DEFAULT_SEED, same_depart_only=False
    )
    record = {
        "made_from": provenance(
            profile=fitted.profile.fingerprint,
            network=fitted,
            inputs={"counts": counts, "routes": datasets.get_path("routes")},
        ),
        "calibrated_from_profile": net.profile.fingerprint,
        **unc,
    }
    (folder / "uncertainty.json").write_text(dumps_json(record) + "\n", encoding="utf-8")
    old, new = _ranking(before), _ranking(after)
    probs = {(p["a"].split(" @ ")[0], p["b"].split(" @ ")[0]): p["p_a_lower"] for p in unc["pairs"]}

    def p_lower(a: str, b: str) -> float:
        return probs[(a, b)] if (a, b) in probs else 1.0 - probs[(b, a)]

    # the ranking is by falling risk: each next route should be the lower one
    sure = min((p_lower(b, a) for a, b in zip(new, new[1:], strict=False)), default=1.0)
    summ = cal.summary()
    moved = ", ".join(
        f"{w['category']} {w['judged']:g} -> {w['weight']:.2f}"
        for w in summ["weights"]
        if w["fitted"] and abs(w["weight"] - w["judged"]) > 0.25 * max(w["judged"], 0.1)
    )
    echo(
        f"calibration on {summ['sites']} count sites ({summ['model']}): {moved or 'no weight'}"
        " moved by more than a quarter"
    )
    change = (
        f"unchanged ({' > '.join(new)})"
        if old == new
        else "changed from " + " > ".join(old) + " to " + " > ".join(new)
    )
    rel = {b.name: a.risk / b.risk - 1 for a, b in zip(after, before, strict=True) if b.risk}
    big = max(sorted(rel), key=lambda k: abs(rel[k])) if rel else None
    echo(
        f"ranking by risk under the calibrated profile {change}"
        + (f"; largest change {big} {100 * rel[big]:+.0f} %" if big else "")
        + f"; each step of the ranking holds in at least {100 * sure:.1f} % of "
        f"{unc['draws']} weight draws"
    )
    return {
        "calibration": {**summ, "ranking_before": old, "ranking_after": new, "uncertainty": unc}
    }


_STAGES.append(_stage_calibrate)
