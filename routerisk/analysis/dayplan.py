"""A day's plan: every run scored at every candidate start, then scheduled at least risk.

For each run and each candidate start (a step, default 15 min, within the run's window) the
run's planned route is scored at that time; where the plan breaks a hard rule at that time,
the best rule-abiding alternative that keeps the run's required points is searched (once per
run and hour, re-scored exactly at each start) and offered as a second candidate. The choice
of start times and vehicles is :func:`routerisk.analysis.planning.solve_schedule`.
"""

from __future__ import annotations

import datetime as dt
import logging
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from routerisk import matching
from routerisk.analysis import planning
from routerisk.analysis.alternatives import Suggester, via_nodes
from routerisk.analysis.scoring import RouteScore, Scorer
from routerisk.errors import OptionError, RouteInputError
from routerisk.io import routes

log = logging.getLogger(__name__)


@dataclass
class Option:
    """What a candidate drives: the route label, its edges, its start; scored when chosen."""

    label: str
    edges: list[tuple[int, int, int]]
    depart: dt.datetime
    scorer: Scorer
    run: str = ""
    fractions: np.ndarray | None = None  # share of each edge driven (partial ends)
    _score: RouteScore | None = None

    @property
    def score(self) -> RouteScore:
        """Return the exact, detailed score (computed once, on first use).

        As ``score`` computes it: partial first and last edges included.
        """
        if self._score is None:
            self._score = self.scorer.score(
                f"{self.run} ({self.label})", self.edges, self.depart, fractions=self.fractions
            )
        return self._score


@dataclass
class DayPlan:
    """The schedule, the naive comparison and what each chosen candidate drives."""

    date: dt.date
    schedule: planning.Schedule
    naive: planning.Schedule
    options: dict[str, list[Option]]
    runs: list[planning.RunSpec]

    def chosen(self) -> list[tuple[planning.Assignment, Option]]:
        """Return each assignment with the option it drives."""
        return [(a, self.options[a.run][a.candidate]) for a in self.schedule.assignments]

    def to_dict(self) -> dict[str, Any]:
        """Return the JSON form of ``routerisk plan``."""
        runs = []
        for a, opt in self.chosen():
            runs.append(
                {
                    "name": a.run,
                    "repetition": a.repetition,
                    "vehicle": a.vehicle,
                    "start": opt.score.depart.isoformat(timespec="minutes"),
                    "end": (
                        opt.score.depart + dt.timedelta(minutes=opt.score.duration_min)
                    ).isoformat(timespec="minutes"),
                    "risk": round(a.risk, 6),
                    "route": opt.label,
                    "rule_breaks": len(opt.score.rule_breaks),
                }
            )
        return {
            "date": self.date.isoformat(),
            "runs": runs,
            "total_risk": round(self.schedule.total_risk, 6),
            "naive_total_risk": round(self.naive.total_risk, 6),
            "status": self.schedule.status,
            "gap": self.schedule.gap,
            "method": self.schedule.method,
            "unplaced": [
                {"name": u.run, "repetition": u.repetition, "reason": u.reason}
                for u in self.schedule.unplaced
            ],
            "notes": list(self.schedule.notes),
            "naive_notes": list(self.naive.notes),
        }


def _route_of(run: planning.RunSpec, tz: Any) -> routes.PlannedRoute:
    if run.route is not None:
        found = routes.read_routes(run.route, default_tz=tz)
        if run.route_name is None:
            if len(found) != 1:
                raise RouteInputError(
                    f"holds {len(found)} routes; name one with route_name",
                    path=run.source,
                    field=f"{run.where}.route_name",
                )
            return found[0]
        for r in found:
            if r.name == run.route_name:
                return r
        raise RouteInputError(
            f"no route named {run.route_name!r} in {run.route}",
            path=run.source,
            field=f"{run.where}.route_name",
        )
    pts = [run.start, *run.via, run.end]
    lonlat = np.array([[p[1], p[0]] for p in pts], dtype=float)
    req = np.ones(len(pts), dtype=bool)
    return routes.PlannedRoute(run.name, lonlat, required=req, source=str(run.source or ""))


def vehicle_ids(n: int) -> list[str]:
    """Return the fleet's vehicle ids: av-1, av-2, ..."""
    return [f"av-{i}" for i in range(1, n + 1)]


def plan_day(
    net: Any,
    runs: list[planning.RunSpec],
    date: dt.date,
    *,
    vehicles: int = 2,
    step_min: int = 15,
    turnaround_min: float = 15.0,
    max_extra_time: float = 0.25,
) -> DayPlan:
    """Score every run at every start and solve the day's schedule."""
    if vehicles < 1:
        raise OptionError("must be at least 1", field="--vehicles")
    if not 1 <= step_min <= 240:
        raise OptionError("must be between 1 and 240 minutes", field="--step")
    if turnaround_min < 0:
        raise OptionError("must not be negative", field="--turnaround")
    tz = net.timezone
    idx = matching.RoadIndex.of_network(net)
    scorer = Scorer(net)
    sug = Suggester(scorer)
    midnight = dt.datetime.combine(date, dt.time(0, 0), tzinfo=tz)
    candidates: dict[str, list[planning.Candidate]] = {}
    options: dict[str, list[Option]] = {}
    for run in runs:
        r = _route_of(run, tz)
        m = matching.to_edges(idx, r)
        edges = list(m.edges)
        via = via_nodes(m, r)
        pos = scorer.positions(edges)
        frac = np.asarray(m.fractions, dtype=float)  # partial ends, as score drives them
        _, dur, _ = scorer.quick(pos, midnight + dt.timedelta(minutes=run.earliest), fractions=frac)
        cands, opts = [], []
        alt_cache: dict[int, tuple[np.ndarray, np.ndarray] | None] = {}
        alt_edges: dict[int, list[tuple[int, int, int]]] = {}
        t = run.earliest
        while t + dur <= run.latest + 1e-9:
            depart = midnight + dt.timedelta(minutes=t)
            risk, minutes, breaks = scorer.quick(pos, depart, fractions=frac)
            cands.append(
                planning.Candidate(
                    start=t, duration=minutes, risk=risk, rule_breaks=breaks, planned=True
                )
            )
            opts.append(Option("planned", edges, depart, scorer, run.name, frac))
            if breaks:
                hour = t // 60
                if hour not in alt_cache:
                    res = sug.suggest(
                        run.name,
                        edges,
                        depart,
                        fractions=frac,
                        via=via,
                        count=1,
                        max_extra_time=max_extra_time,
                        min_difference=0.0,
                    )
                    ok = [a for a in res.alternatives if not a.score.rule_breaks]
                    alt_cache[hour] = (
                        (
                            scorer.positions(ok[0].edges),
                            np.ones(len(ok[0].edges))
                            if ok[0].fractions is None
                            else np.asarray(ok[0].fractions, dtype=float),
                        )
                        if ok
                        else None
                    )
                    if ok:
                        alt_edges[hour] = ok[0].edges
                alt = alt_cache[hour]
                if alt is not None:
                    apos, afrac = alt
                    arisk, amin, abreaks = scorer.quick(apos, depart, fractions=afrac)
                    if t + amin <= run.latest + 1e-9:
                        cands.append(
                            planning.Candidate(
                                start=t,
                                duration=amin,
                                risk=arisk,
                                rule_breaks=abreaks,
                                planned=False,
                            )
                        )
                        opts.append(
                            Option("alternative", alt_edges[hour], depart, scorer, run.name, afrac)
                        )
            t += step_min
        candidates[run.name] = cands
        options[run.name] = opts
    jobs = planning.jobs_for_runs(runs, candidates)
    fleet = vehicle_ids(vehicles)
    sched = planning.solve_schedule(jobs, vehicles=fleet, turnaround_min=turnaround_min)
    naive = planning.naive_schedule(jobs, vehicles=fleet, turnaround_min=turnaround_min)
    return DayPlan(date, sched, naive, options, runs)


def timeline_png(plan: DayPlan) -> bytes:
    """Return a PNG timeline: one row per vehicle, one bar per run, coloured by risk."""
    from routerisk.render import report

    fig = report.new_figure(
        9.0, 1.2 + 0.6 * max(1, len({a.vehicle for a in plan.schedule.assignments}))
    )
    ax = fig.subplots()
    vehicles = sorted({a.vehicle for a in plan.schedule.assignments})
    risks = [a.risk for a in plan.schedule.assignments] or [1.0]
    hi = max(risks) or 1.0
    from matplotlib.colors import LinearSegmentedColormap

    from routerisk.render.mapview import BAND_RAMP

    # the maps' own light-to-dark ramp, so a darker bar means more risk on every output
    cmap = LinearSegmentedColormap.from_list("routerisk", BAND_RAMP)
    for a, opt in plan.chosen():
        y = vehicles.index(a.vehicle)
        start = float(a.start)
        ax.barh(
            y,
            opt.score.duration_min,
            left=start,
            color=cmap(0.2 + 0.8 * a.risk / hi),
            edgecolor="#333333",
            height=0.6,
        )
        ax.text(start + opt.score.duration_min / 2, y, a.run, ha="center", va="center", fontsize=6)
    ax.set_yticks(range(len(vehicles)), vehicles)
    ticks = np.arange(0, 1441, 120)
    ax.set_xticks(ticks, [f"{int(t) // 60:02d}:00" for t in ticks])
    if plan.schedule.assignments:
        lo = min(float(a.start) for a in plan.schedule.assignments) - 30
        hi_t = max(float(a.end) for a in plan.schedule.assignments) + 30
        ax.set_xlim(max(0, lo), min(1440, hi_t))
    ax.set_xlabel("local time")
    ax.set_title(f"Test runs on {plan.date.isoformat()} (darker = more risk)", fontsize=9)
    ax.grid(axis="x", alpha=0.3)
    return report.png_bytes(fig)


def write_outputs(
    net: Any,
    plan: DayPlan,
    out: str | Path,
    *,
    force: bool = False,
    inputs: dict[str, Any] | None = None,
) -> Path:
    """Write schedule.csv, plan.json, map.html and report.html into ``out`` atomically.

    Each records the tool version, the profile fingerprint and the input checksums
    (``inputs``: role -> file, e.g. ``{"runs": path}``; the network source always).
    """
    import pandas as pd

    from routerisk import CAUTION
    from routerisk.io.atomic import atomic_directory, dumps_json, provenance_line
    from routerisk.render import mapview, report, routemap

    data = plan.to_dict()
    routes_used = sorted({str(r.route) for r in plan.runs if r.route is not None})
    ins = dict(inputs or {})
    for i, path in enumerate(routes_used):
        ins.setdefault("routes" if i == 0 else f"routes_{i + 1}", path)
    meta = routemap.output_meta(net, ins)
    prov = {k: meta[k] for k in ("routerisk_version", "profile", "inputs")}
    with atomic_directory(out, force=force) as tmp:
        table = pd.DataFrame(
            data["runs"],
            columns=[
                "vehicle",
                "name",
                "repetition",
                "start",
                "end",
                "route",
                "risk",
                "rule_breaks",
            ],
        )
        (tmp / "schedule.csv").write_text(
            f"# {CAUTION}\n# {provenance_line(meta)}\n"
            + table.to_csv(index=False, lineterminator="\n"),
            encoding="utf-8",
        )
        (tmp / "plan.json").write_text(
            dumps_json({**data, "routerisk": meta}) + "\n", encoding="utf-8"
        )
        scores = [opt.score for _, opt in plan.chosen()]
        m = routemap.route_map(net, scores, title=f"Test runs on {plan.date.isoformat()}")
        mapview.add_provenance(m, prov)
        (tmp / "map.html").write_text(mapview.render(m), encoding="utf-8")
        unplaced = pd.DataFrame(data["unplaced"], columns=["name", "repetition", "reason"])
        body = [
            report.section(
                "Schedule",
                report.frame_html(table, index=False),
                report.image_html(timeline_png(plan), alt="timeline per vehicle"),
            ),
            report.section(
                "Against the naive plan",
                report.pairs_html(
                    [
                        ("total risk of this plan", f"{plan.schedule.total_risk:.4f}"),
                        (
                            "total risk, every run at its earliest start on its planned route",
                            f"{plan.naive.total_risk:.4f}",
                        ),
                        ("solver status", f"{plan.schedule.status} ({plan.schedule.method})"),
                        ("notes on the naive plan", "; ".join(plan.naive.notes) or "none"),
                    ]
                ),
            ),
            report.section(
                "Runs not placed",
                report.frame_html(unplaced, index=False)
                if len(unplaced)
                else report.paragraph("Every run is placed."),
            ),
        ]
        facts = [
            ("date", plan.date.isoformat()),
            ("profile", f"{net.profile.name} ({net.profile.fingerprint})"),
        ]
        (tmp / "report.html").write_text(
            report.page("Daily test plan", body, facts=facts, provenance=prov), encoding="utf-8"
        )
    return Path(out)
