"""``routerisk plan`` on the sample town: rules kept at the time driven, no vehicle overlap."""

from __future__ import annotations

import datetime as dt
import json

import pytest

from routerisk import datasets, dayplan, planning
from routerisk.cli import main
from routerisk.scoring import Scorer

DATE = dt.date(2027, 3, 9)  # a Tuesday: school windows apply


@pytest.fixture(scope="module")
def plan(town_net):
    return dayplan.plan_day(town_net, planning.read_runs(datasets.get_path("runs")), DATE,
                            vehicles=2, turnaround_min=15)


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
            (float(a.start), float(a.start) + opt.score.duration_min))
    for spans in by_vehicle.values():
        spans.sort()
        for (s0, e0), (s1, _) in zip(spans[:-1], spans[1:], strict=True):
            assert s1 >= e0 + 15 - 1e-9


def test_required_vehicle_is_used(plan):
    quiet = [a for a in plan.schedule.assignments if a.run == "quiet-loop"]
    assert quiet and all(a.vehicle == "av-2" for a in quiet)


def test_window_too_short_is_reported(town_net, tmp_path):
    runs = tmp_path / "runs.yaml"
    runs.write_text(
        "runs:\n  - name: tight\n    route: " + str(datasets.get_path("routes")) +
        "\n    route_name: school-run\n    earliest: \"10:00\"\n    latest: \"10:01\"\n")
    p = dayplan.plan_day(town_net, planning.read_runs(runs), DATE, vehicles=1)
    assert [u.run for u in p.schedule.unplaced] == ["tight"]
    assert p.schedule.unplaced[0].reason


def test_cli_json(town_dir, capsys):
    code = main(["plan", str(datasets.get_path("runs")), "--network", str(town_dir),
                 "--date", DATE.isoformat(), "--json"])
    data = json.loads(capsys.readouterr().out)
    assert code == 0
    assert set(data) >= {"date", "runs", "total_risk", "naive_total_risk", "status"}
    assert set(data["runs"][0]) >= {"name", "vehicle", "start", "end", "risk", "route"}


def test_cli_bad_date(town_dir, capsys):
    code = main(["plan", str(datasets.get_path("runs")), "--network", str(town_dir),
                 "--date", "09/03/2027"])
    assert code == 2 and "--date" in capsys.readouterr().err
