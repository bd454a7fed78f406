"""``routerisk plan`` on the sample town: rules kept at the time driven, no vehicle overlap."""

from __future__ import annotations

import datetime as dt
import json

import pytest

from routerisk import datasets
from routerisk.analysis import dayplan, planning
from routerisk.analysis.scoring import Scorer
from routerisk.cli import main

DATE = dt.date(2027, 3, 9)  # a Tuesday: school windows apply


@pytest.fixture(scope="module")
def plan(town_net):
    return dayplan.plan_day(
        town_net, planning.read_runs(datasets.get_path("runs")), DATE, vehicles=2, turnaround_min=15
    )


def test_every_run_placed_and_better_than_naive(plan):
    assert plan.schedule.status == "optimal"
    assert plan.schedule.unplaced == ()
    assert plan.schedule.total_risk <= plan.naive.total_risk + 1e-12


def test_no_run_breaks_a_rule_at_its_time(town_net, plan):
    scorer = Scorer(town_net)
    for a, opt in plan.chosen():
        again = scorer.score(a.run, opt.edges, opt.score.depart)  # independent re-score
        assert again.rule_breaks == []


def test_no_vehicle_overlap_with_turnaround(plan):
    by_vehicle: dict[str, list] = {}
    for a, opt in plan.chosen():
        by_vehicle.setdefault(a.vehicle, []).append(
            (float(a.start), float(a.start) + opt.score.duration_min)
        )
    for spans in by_vehicle.values():
        spans.sort()
        for (_s0, e0), (s1, _) in zip(spans[:-1], spans[1:], strict=True):
            assert s1 >= e0 + 15 - 1e-9


def test_required_vehicle_is_used(plan):
    quiet = [a for a in plan.schedule.assignments if a.run == "quiet-loop"]
    assert quiet and all(a.vehicle == "av-2" for a in quiet)


def test_window_too_short_is_reported(town_net, tmp_path):
    runs = tmp_path / "runs.yaml"
    runs.write_text(
        "runs:\n  - name: tight\n    route: "
        + str(datasets.get_path("routes"))
        + '\n    route_name: school-run\n    earliest: "10:00"\n    latest: "10:01"\n'
    )
    p = dayplan.plan_day(town_net, planning.read_runs(runs), DATE, vehicles=1)
    assert [u.run for u in p.schedule.unplaced] == ["tight"]
    assert p.schedule.unplaced[0].reason


def test_cli_json(town_dir, plan, capsys):
    code = main(
        [
            "plan",
            str(datasets.get_path("runs")),
            "--network",
            str(town_dir),
            "--date",
            DATE.isoformat(),
            "--json",
        ]
    )
    data = json.loads(capsys.readouterr().out)
    assert code == 0
    # the command prints the plan the library makes with its defaults (2 vehicles, 15 min)
    assert data == json.loads(json.dumps(plan.to_dict()))
    assert data["date"] == "2027-03-09" and data["status"] == "optimal"
    assert data["unplaced"] == []
    runs = planning.read_runs(datasets.get_path("runs"))
    assert len(data["runs"]) == sum(r.repeat for r in runs)  # every repetition placed
    assert data["total_risk"] == pytest.approx(sum(r["risk"] for r in data["runs"]), abs=1e-5)
    assert data["total_risk"] <= data["naive_total_risk"]
    window = {r.name: (r.earliest, r.latest) for r in runs}
    for r in data["runs"]:
        assert r["vehicle"] in ("av-1", "av-2") and r["rule_breaks"] == 0
        assert r["start"].startswith("2027-03-09T") and r["start"] < r["end"]
        start = int(r["start"][11:13]) * 60 + int(r["start"][14:16])
        end_day = int(r["end"][8:10]) - 9
        end = end_day * 1440 + int(r["end"][11:13]) * 60 + int(r["end"][14:16])
        lo, hi = window[r["name"]]
        assert lo <= start and end <= hi + 1  # inside the run's window (minute rounding)


def test_cli_bad_date(town_dir, capsys):
    code = main(
        ["plan", str(datasets.get_path("runs")), "--network", str(town_dir), "--date", "09/03/2027"]
    )
    assert code == 2 and "--date" in capsys.readouterr().err
