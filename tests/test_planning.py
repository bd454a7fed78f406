"""Tests of routerisk.analysis.planning: the RUNS reader, the day-plan solver and the naive plan.

The optimum of the solver is checked against a day worked out by hand and against brute-force
enumeration of small random days (own code below, independent of the solver's). No value in
this file comes from an outside source.
"""

from __future__ import annotations

import itertools
import json
import random
from datetime import datetime, timedelta, timezone
from pathlib import Path

import pytest

from routerisk.analysis.planning import (
    Candidate,
    Job,
    RunSpec,
    Schedule,
    format_clock,
    jobs_for_runs,
    naive_schedule,
    overlaps,
    parse_clock,
    read_runs,
    solve_schedule,
)
from routerisk.errors import InputFileError, OptionError
from routerisk.io.atomic import dumps_json

# --------------------------------------------------------------------------------------------
# Independent checks used by several tests
# --------------------------------------------------------------------------------------------


def _allowed_vehicles(job: Job, cand: Candidate, fleet: list[str]) -> list[str]:
    return [
        v
        for v in fleet
        if (job.vehicle is None or v == job.vehicle)
        and (cand.vehicles is None or v in cand.vehicles)
    ]


def _assert_feasible(schedule: Schedule, jobs: list[Job], fleet: list[str], turnaround: float):
    """No overlap on a vehicle (turnaround included), no rule break, allowed vehicles only."""
    seen = set()
    for a in schedule.assignments:
        assert a.job not in seen
        seen.add(a.job)
        cand = jobs[a.job].candidates[a.candidate]
        assert cand.rule_breaks == 0 and a.rule_breaks == 0
        assert a.vehicle in _allowed_vehicles(jobs[a.job], cand, fleet)
        assert a.start == cand.start and a.risk == cand.risk
    for a, b in itertools.combinations(schedule.assignments, 2):
        if a.vehicle != b.vehicle:
            continue
        a_end = a.start + jobs[a.job].candidates[a.candidate].duration + turnaround
        b_end = b.start + jobs[b.job].candidates[b.candidate].duration + turnaround
        assert a_end <= b.start + 1e-9 or b_end <= a.start + 1e-9, (a, b)
    placed = {a.job for a in schedule.assignments}
    assert {u.job for u in schedule.unplaced} == set(range(len(jobs))) - placed
    assert all(u.reason for u in schedule.unplaced)
    assert schedule.total_risk == pytest.approx(sum(a.risk for a in schedule.assignments))


def _brute_force(jobs: list[Job], fleet: list[str], turnaround: float) -> tuple[int, float]:
    """Return (most jobs placed, least risk at that count) by enumerating every choice."""
    choices = []
    for job in jobs:
        opts = [None]
        for cand in job.candidates:
            if cand.rule_breaks:
                continue
            if job.earliest is not None and cand.start < job.earliest:
                continue
            if job.latest is not None and cand.start + cand.duration > job.latest:
                continue
            for v in _allowed_vehicles(job, cand, fleet):
                opts.append((cand.start, cand.start + cand.duration + turnaround, cand.risk, v))
        choices.append(opts)
    best = (0, 0.0)

    def walk(i: int, busy: list[tuple[float, float, str]], count: int, risk: float) -> None:
        nonlocal best
        if i == len(jobs):
            if count > best[0] or (count == best[0] and risk < best[1]):
                best = (count, risk)
            return
        for opt in choices[i]:
            if opt is None:
                walk(i + 1, busy, count, risk)
                continue
            s, e, r, v = opt
            if any(w == v and s < e2 - 1e-9 and s2 < e - 1e-9 for s2, e2, w in busy):
                continue
            walk(i + 1, [*busy, (s, e, v)], count + 1, risk + r)

    walk(0, [], 0, 0.0)
    return best


def _random_day(seed: int) -> tuple[list[Job], list[str], float]:
    """A small random day: 3-5 jobs, 1-2 vehicles, 2-4 candidates, some rules and requirements."""
    rng = random.Random(seed)
    fleet = ["A", "B"][: rng.randint(1, 2)]
    turnaround = rng.choice([0.0, 10.0, 15.0])
    jobs = []
    for j in range(rng.randint(3, 5)):
        vehicle = rng.choice(fleet) if rng.random() < 0.25 else None
        cands = []
        for _ in range(rng.randint(2, 4)):
            start = 480 + 15 * rng.randint(0, 12)
            duration = round(rng.uniform(20, 70), 1)  # not on the 15-minute grid
            only = frozenset(rng.sample(fleet, 1)) if rng.random() < 0.2 else None
            cands.append(
                Candidate(
                    start,
                    duration,
                    round(rng.uniform(0, 10), 3),
                    rule_breaks=int(rng.random() < 0.15),
                    vehicles=only,
                )
            )
        jobs.append(Job(f"run{j}", tuple(cands), 1, vehicle))
    return jobs, fleet, turnaround


# --------------------------------------------------------------------------------------------
# Hand-made day
# --------------------------------------------------------------------------------------------


def _hand_day() -> list[Job]:
    """Three runs, two vehicles; 'harbour' must use vehicle A. Times in minutes after midnight."""
    return [
        Job("north", (Candidate(480, 60, 5.0), Candidate(540, 60, 2.0), Candidate(600, 60, 8.0))),
        Job("south", (Candidate(480, 60, 3.0), Candidate(540, 60, 1.0), Candidate(600, 60, 6.0))),
        Job(
            "harbour",
            (Candidate(480, 90, 7.0), Candidate(540, 90, 1.0), Candidate(630, 90, 4.0)),
            vehicle="A",
        ),
    ]


def test_hand_made_day_turnaround_15():
    # Worked by hand (no outside source). Every run is cheapest at 09:00 (2 + 1 + 1 = 4), but
    # three runs cannot start together on two vehicles. Occupancy = duration + 15 min.
    # - harbour 09:00 on A holds A over [09:00, 10:45): north and south both go on B, where
    #   only 08:00 + 10:00 fit (08:00 ends 09:15 > 09:00): 5 + 6 or 3 + 8 = 11, total 12;
    # - harbour 08:00 on A frees A at 09:45: best is 09:00 on B plus 10:00 on A: 2 + 6 = 8,
    #   total 15;
    # - harbour 10:30 on A (risk 4): north and south both at 09:00, one on A (ends 10:00,
    #   free at 10:15 <= 10:30) and one on B: 2 + 1 + 4 = 7.  Optimum 7.
    jobs = _hand_day()
    plan = solve_schedule(jobs, vehicles=["A", "B"], turnaround_min=15)
    assert plan.status == "optimal"
    assert plan.method == "milp-per-vehicle"
    assert plan.total_risk == pytest.approx(7.0)
    assert plan.gap == pytest.approx(0.0, abs=1e-9)
    starts = {a.run: (a.start, a.vehicle) for a in plan.assignments}
    assert starts["harbour"] == (630, "A")
    assert starts["north"][0] == starts["south"][0] == 540
    assert {starts["north"][1], starts["south"][1]} == {"A", "B"}
    assert plan.unplaced == ()
    _assert_feasible(plan, jobs, ["A", "B"], 15)


def test_hand_made_day_turnaround_45():
    # Same day, occupancy = duration + 45 min (worked by hand). Harbour 10:30 on A now leaves
    # A free only for a run ending by 09:45 (08:00 start). Best: south 08:00 on A (3), north
    # 09:00 on B (2), harbour 4: total 9. Harbour 09:00 on A forces north and south onto B at
    # 08:00 + 10:00 (11): total 12; harbour 08:00 on A: total 18.
    plan = solve_schedule(_hand_day(), vehicles=["A", "B"], turnaround_min=45)
    assert plan.total_risk == pytest.approx(9.0)
    got = {(a.run, a.start, a.vehicle) for a in plan.assignments}
    assert got == {("south", 480, "A"), ("north", 540, "B"), ("harbour", 630, "A")}
    assert _brute_force(_hand_day(), ["A", "B"], 45) == (3, pytest.approx(9.0))


def test_hand_made_day_naive_plan():
    # Everyone at 08:00 (worked by hand): north takes A (first free), south B, harbour must use
    # A, which is busy until 09:15 (08:00 + 60 + 15): one overlap of 75 min. Risk 5 + 3 + 7.
    jobs = _hand_day()
    naive = naive_schedule(jobs, vehicles=["A", "B"], turnaround_min=15)
    assert naive.status == "naive" and naive.gap is None
    assert naive.total_risk == pytest.approx(15.0)
    assert [n for n in naive.notes if "overlaps" in n] == [
        "harbour #1: overlaps the previous run on vehicle A by 75.0 min (turnaround included)"
    ]
    found = overlaps(naive.assignments, turnaround_min=15)
    assert [(a.run, b.run, short) for a, b, short in found] == [("north", "harbour", 75.0)]
    optimal = solve_schedule(jobs, vehicles=["A", "B"], turnaround_min=15)
    assert overlaps(optimal.assignments, turnaround_min=15) == []
    assert optimal.total_risk < naive.total_risk


def test_hand_made_day_with_datetimes():
    # The same day with aware datetimes gives the same plan, reported as datetimes.
    zone = timezone(timedelta(hours=-3))
    day = datetime(2026, 5, 4, tzinfo=zone)

    def at(minutes: float) -> datetime:
        return day + timedelta(minutes=minutes)

    jobs = [
        Job(
            j.run,
            tuple(Candidate(at(c.start), c.duration, c.risk) for c in j.candidates),
            vehicle=j.vehicle,
        )
        for j in _hand_day()
    ]
    plan = solve_schedule(jobs, vehicles=["A", "B"], turnaround_min=15)
    assert plan.total_risk == pytest.approx(7.0)
    harbour = next(a for a in plan.assignments if a.run == "harbour")
    assert harbour.start == at(630) and harbour.end == at(720)
    assert json.loads(dumps_json(plan.to_dict()))["assignments"][0]["start"].endswith("-03:00")


def test_identical_vehicles_use_aggregated_model():
    # No vehicle requirement: the aggregated model. Four one-hour runs, each with risk 5 / 1 /
    # 2 / 4 at 08:00 / 09:00 / 10:00 / 11:00, two vehicles, no turnaround (worked by hand):
    # only two runs can take 09:00 (risk 1), the other two take 10:00 back to back (risk 2):
    # total 6, each vehicle 09:00 then 10:00, the second starting exactly when the first ends.
    starts = ((480, 5.0), (540, 1.0), (600, 2.0), (660, 4.0))
    jobs = [Job(f"r{i}", tuple(Candidate(s, 60, r) for s, r in starts)) for i in range(4)]
    plan = solve_schedule(jobs, vehicles=2, turnaround_min=0)
    assert plan.method == "milp-aggregated"
    assert plan.total_risk == pytest.approx(6.0)
    assert sorted((a.vehicle, a.start) for a in plan.assignments) == [
        ("v1", 540),
        ("v1", 600),
        ("v2", 540),
        ("v2", 600),
    ]
    _assert_feasible(plan, jobs, ["v1", "v2"], 0)


# --------------------------------------------------------------------------------------------
# Random days against brute force
# --------------------------------------------------------------------------------------------


def test_random_days_match_brute_force():
    methods = set()
    for seed in range(30):
        jobs, fleet, turnaround = _random_day(seed)
        plan = solve_schedule(jobs, vehicles=fleet, turnaround_min=turnaround)
        count, risk = _brute_force(jobs, fleet, turnaround)
        assert plan.status == "optimal", seed
        assert plan.placed == count, seed
        assert plan.total_risk == pytest.approx(risk, rel=1e-6, abs=1e-9), seed
        _assert_feasible(plan, jobs, fleet, turnaround)
        methods.add(plan.method)
    assert methods == {"milp-aggregated", "milp-per-vehicle"}


def _pairwise_milp(jobs: list[Job], fleet: list[str], turnaround: float) -> tuple[int, float]:
    """Solve a day with a plain conflict-pair programme (own formulation, no fixing, no flow)."""
    import numpy as np
    from scipy.optimize import LinearConstraint, milp

    var = [
        (j, cand, v)
        for j, job in enumerate(jobs)
        for cand in job.candidates
        if not cand.rule_breaks
        for v in _allowed_vehicles(job, cand, fleet)
    ]
    rows = [[i for i, (j, _, _) in enumerate(var) if j == k] for k in range(len(jobs))]
    for a, b in itertools.combinations(range(len(var)), 2):
        (ja, ca, va), (jb, cb, vb) = var[a], var[b]
        if (
            va == vb
            and ja != jb
            and ca.start < cb.start + cb.duration + turnaround
            and cb.start < ca.start + ca.duration + turnaround
        ):
            rows.append([a, b])
    matrix = np.zeros((len(rows), len(var)))
    for r, cols in enumerate(rows):
        matrix[r, cols] = 1
    ones = np.ones(len(var))
    conflicts = LinearConstraint(matrix, -np.inf, 1)
    most = round(-milp(-ones, integrality=ones, bounds=(0, 1), constraints=[conflicts]).fun)
    risk = np.array([c.risk for _, c, _ in var])
    res = milp(
        risk,
        integrality=ones,
        bounds=(0, 1),
        options={"mip_rel_gap": 0},
        constraints=[conflicts, LinearConstraint(ones[None, :], most, np.inf)],
    )
    return most, float(res.fun)


def test_medium_days_match_an_independent_programme():
    # Days too big for brute force, where the heuristic incumbent is often not optimal, so
    # the reduced-cost fixing and both stages are exercised.
    for seed in range(6):
        rng = random.Random(100 + seed)
        fleet = ["A", "B"]
        jobs = [
            Job(
                f"r{j}",
                tuple(
                    Candidate(
                        450 + 15 * rng.randint(0, 24),
                        float(rng.randint(25, 70)),
                        round(rng.uniform(0, 10), 2),
                        rule_breaks=int(rng.random() < 0.1),
                    )
                    for _ in range(8)
                ),
                vehicle=rng.choice(["A", None, None, None]) if seed % 2 else None,
            )
            for j in range(14)
        ]
        plan = solve_schedule(jobs, vehicles=fleet, turnaround_min=10)
        most, risk = _pairwise_milp(jobs, fleet, 10)
        assert plan.status == "optimal"
        assert plan.placed == most, seed
        assert plan.total_risk == pytest.approx(risk, rel=1e-6), seed
        _assert_feasible(plan, jobs, fleet, 10)


def test_heuristic_fallback_is_feasible_with_valid_gap():
    for seed in range(30):
        jobs, fleet, turnaround = _random_day(seed)
        plan = solve_schedule(jobs, vehicles=fleet, turnaround_min=turnaround, max_exact_vars=0)
        count, risk = _brute_force(jobs, fleet, turnaround)
        assert plan.status == "heuristic" and plan.method == "heuristic"
        _assert_feasible(plan, jobs, fleet, turnaround)
        assert plan.gap is not None and plan.gap >= 0
        # The bound holds for every schedule placing at least as many jobs, the optimum too.
        assert plan.lower_bound <= risk + 1e-9
        assert plan.placed <= count
        if plan.placed == count:
            assert plan.total_risk >= risk - 1e-9


def test_heuristic_on_a_larger_day_brackets_the_optimum():
    rng = random.Random(7)
    jobs = []
    for j in range(25):
        duration = rng.choice([30.0, 45.0, 60.0])
        cands = tuple(
            Candidate(
                420 + 15 * k, duration, rng.uniform(1, 10), rule_breaks=int(rng.random() < 0.1)
            )
            for k in range(20)
        )
        jobs.append(Job(f"r{j}", cands, vehicle=rng.choice(["A", "B", "C", None, None])))
    fleet = ["A", "B", "C"]
    exact = solve_schedule(jobs, vehicles=fleet, turnaround_min=15)
    heur = solve_schedule(jobs, vehicles=fleet, turnaround_min=15, max_exact_vars=100)
    assert exact.status == "optimal" and heur.status == "heuristic"
    _assert_feasible(exact, jobs, fleet, 15)
    _assert_feasible(heur, jobs, fleet, 15)
    assert heur.placed <= exact.placed
    if heur.placed == exact.placed:
        assert heur.lower_bound - 1e-9 <= exact.total_risk <= heur.total_risk + 1e-9
        assert heur.gap == pytest.approx(
            (heur.total_risk - heur.lower_bound) / heur.total_risk, abs=1e-12
        )
    assert any("max_exact_vars" in n for n in heur.notes)


# --------------------------------------------------------------------------------------------
# Unplaced jobs and reasons
# --------------------------------------------------------------------------------------------


def test_unplaced_reasons():
    jobs = [
        Job("empty", ()),
        Job("forbidden", (Candidate(480, 30, 1.0, rule_breaks=1), Candidate(540, 30, 1.0, 2))),
        Job("elsewhere", (Candidate(480, 30, 1.0),), vehicle="Z"),
        Job("late", (Candidate(600, 60, 1.0),), earliest=480, latest=630),
        Job("first", (Candidate(700, 60, 1.0),)),
        Job("second", (Candidate(720, 60, 2.0),)),
        Job("fine", (Candidate(900, 60, 4.0, rule_breaks=1), Candidate(960, 60, 3.0))),
    ]
    plan = solve_schedule(jobs, vehicles=["A"], turnaround_min=10)
    reasons = {u.run: u.reason for u in plan.unplaced}
    assert reasons["empty"].startswith("window too short")
    assert reasons["forbidden"] == "every start breaks a hard rule"
    assert "'Z' is not in the fleet" in reasons["elsewhere"]
    assert reasons["late"].startswith("window too short")
    assert reasons["second"].startswith("fleet busy")
    assert set(reasons) == {"empty", "forbidden", "elsewhere", "late", "second"}
    placed = {a.run: a.start for a in plan.assignments}
    assert placed == {"first": 700, "fine": 960}  # the rule-breaking 15:00 start is avoided
    assert plan.total_risk == pytest.approx(4.0)
    _assert_feasible(plan, jobs, ["A"], 10)


def test_nothing_placeable_is_infeasible():
    jobs = [Job("a", (Candidate(480, 30, 1.0, rule_breaks=1),)), Job("b", ())]
    plan = solve_schedule(jobs, vehicles=2, turnaround_min=0)
    assert plan.status == "infeasible"
    assert plan.assignments == () and len(plan.unplaced) == 2


def test_more_placed_beats_less_risk():
    # One vehicle: "big" alone at 08:00 (risk 1) blocks both "x" and "y" (risk 50 each); the
    # plan places x and y (two jobs) rather than big (one job), whatever the risk.
    jobs = [
        Job("big", (Candidate(480, 120, 1.0),)),
        Job("x", (Candidate(480, 50, 50.0),)),
        Job("y", (Candidate(540, 50, 50.0),)),
    ]
    plan = solve_schedule(jobs, vehicles=1, turnaround_min=5)
    assert {a.run for a in plan.assignments} == {"x", "y"}
    assert plan.total_risk == pytest.approx(100.0)


def test_bad_options_raise():
    with pytest.raises(OptionError) as err:
        solve_schedule([], vehicles=0, turnaround_min=0)
    assert err.value.field == "vehicles"
    with pytest.raises(OptionError) as err:
        solve_schedule([], vehicles=["A", "A"], turnaround_min=0)
    assert err.value.field == "vehicles"
    with pytest.raises(OptionError) as err:
        solve_schedule([], vehicles=1, turnaround_min=-5)
    assert err.value.field == "turnaround_min"
    with pytest.raises(ValueError, match="duration"):
        solve_schedule([[Candidate(480, 0, 1.0)]], vehicles=1, turnaround_min=0)


def test_jobs_for_runs_expands_repeats_and_windows():
    runs = [
        RunSpec(
            "loop",
            earliest=480,
            latest=720,
            start=(38.5, -38.0),
            end=(38.51, -38.0),
            repeat=2,
            vehicle="B",
        ),
        RunSpec("spur", earliest=600, latest=660, start=(38.5, -38.0), end=(38.5, -38.01)),
    ]
    cands = {"loop": [Candidate(480, 60, 1.0), Candidate(700, 60, 0.5)]}
    jobs = jobs_for_runs(runs, cands)
    assert [(j.run, j.repetition, j.vehicle, j.earliest, j.latest) for j in jobs] == [
        ("loop", 1, "B", 480, 720),
        ("loop", 2, "B", 480, 720),
        ("spur", 1, None, 600, 660),
    ]
    plan = solve_schedule(jobs, vehicles=["A", "B"], turnaround_min=0)
    # 11:40 + 60 min ends after 12:00, so only the 08:00 start is usable, and on vehicle B
    # only one repetition fits there; "spur" has no candidate at all.
    assert [(a.run, a.start, a.vehicle) for a in plan.assignments] == [("loop", 480, "B")]
    assert {u.run for u in plan.unplaced} == {"loop", "spur"}
    day = datetime(2026, 5, 4, 6, 0)
    dated = jobs_for_runs(runs, {"loop": [Candidate(day, 60, 1.0)]})
    assert dated[0].earliest == datetime(2026, 5, 4, 8, 0)
    assert dated[0].latest == datetime(2026, 5, 4, 12, 0)


# --------------------------------------------------------------------------------------------
# RUNS file reader
# --------------------------------------------------------------------------------------------


def test_clock_helpers():
    assert parse_clock("08:30") == 510
    assert parse_clock("24:00") == 1440
    assert format_clock(510) == "08:30"
    for bad in ("8.30", "25:00", "12:60", "24:01", ""):
        with pytest.raises(ValueError):
            parse_clock(bad)


def test_read_yaml_runs(tmp_path: Path):
    (tmp_path / "routes").mkdir()
    (tmp_path / "routes" / "loops.geojson").write_text('{"type": "FeatureCollection"}')
    path = tmp_path / "day.yaml"
    path.write_text(
        """
runs:
  - name: harbour loop
    route: routes/loops.geojson
    route_name: east
    earliest: "08:30"
    latest: "12:00"
    vehicle: 2
    repeat: 3
  - name: hill climb
    start: [38.50, -38.01]
    end: [38.51, -37.99]
    via: [[38.505, -38.0]]
    earliest: "13:00"
    latest: "24:00"
""",
        encoding="utf-8",
    )
    runs = read_runs(path)
    assert [r.name for r in runs] == ["harbour loop", "hill climb"]
    loop, hill = runs
    assert loop.route == tmp_path / "routes" / "loops.geojson"
    assert (loop.route_name, loop.earliest, loop.latest, loop.vehicle, loop.repeat) == (
        "east",
        510,
        720,
        "2",
        3,
    )
    assert loop.where == "runs[0]" and loop.source == path
    assert hill.route is None and hill.start == (38.50, -38.01) and hill.via == ((38.505, -38.0),)
    assert (hill.earliest, hill.latest, hill.repeat, hill.vehicle) == (780, 1440, 1, None)


def test_read_yaml_bare_list(tmp_path: Path):
    path = tmp_path / "day.yml"
    path.write_text('- {name: a, start: [1, 2], end: [1, 3], earliest: "09:00", latest: "10:00"}\n')
    assert read_runs(path)[0].end == (1.0, 3.0)


def test_read_csv_runs(tmp_path: Path):
    (tmp_path / "r.gpx").write_text("<gpx/>")
    path = tmp_path / "day.csv"
    path.write_text(
        "name,route,start_lat,start_lon,end_lat,end_lon,earliest,latest,vehicle,repeat\n"
        "a,r.gpx,,,,,08:00,09:30,,\n"
        "b,,38.5,-38.0,38.52,-38.01,10:00,11:00,V7,2\n"
        ",,,,,,,,,\n",
        encoding="utf-8",
    )
    a, b = read_runs(path)
    assert a.route == tmp_path / "r.gpx" and a.repeat == 1 and a.vehicle is None
    assert b.start == (38.5, -38.0) and b.end == (38.52, -38.01)
    assert (b.earliest, b.latest, b.vehicle, b.repeat, b.where) == (600, 660, "V7", 2, "line 3")


_GOOD = {
    "name": "a",
    "start": "[1, 2]",
    "end": "[1, 3]",
    "earliest": '"09:00"',
    "latest": '"10:00"',
}


def _yaml_run(**changes: str | None) -> str:
    fields = {**_GOOD, **changes}
    return "runs:\n  - " + "\n    ".join(f"{k}: {v}" for k, v in fields.items() if v is not None)


@pytest.mark.parametrize(
    ("text", "field", "words"),
    [
        (_yaml_run(earliest='"10:00"'), "runs[0].latest", "not after earliest"),
        (_yaml_run(latest='"09:00"', earliest='"11:00"'), "runs[0].latest", "not after"),
        (_yaml_run(earliest='"25:00"'), "runs[0].earliest", "between 00:00 and 24:00"),
        (_yaml_run(earliest="half past eight"), "runs[0].earliest", "not a clock time"),
        (_yaml_run(earliest="10:30"), "runs[0].earliest", "quotes"),
        (_yaml_run(colour="red"), "runs[0].colour", "unknown key"),
        (_yaml_run(repeat="0"), "runs[0].repeat", "1 or more"),
        (_yaml_run(repeat="two"), "runs[0].repeat", "whole number"),
        (_yaml_run(start=None, end=None), "runs[0].route", "missing route"),
        (_yaml_run(end=None), "runs[0].end", "missing end"),
        (_yaml_run(route="nowhere.geojson", start=None, end=None), "runs[0].route", "not found"),
        (_yaml_run(route="r.geojson"), "runs[0].route", "not both"),
        (_yaml_run(route="r.shp", start=None, end=None), "runs[0].route", "must end in"),
        (_yaml_run(route_name="east"), "runs[0].route_name", "needs a route"),
        (_yaml_run(start="[91, 2]"), "runs[0].start", "latitude"),
        (_yaml_run(start="[1]"), "runs[0].start", "[lat, lon]"),
        (_yaml_run(via="[[1, 2], [1, 'x']]"), "runs[0].via[1]", "[lat, lon]"),
        (_yaml_run(name=None), "runs[0].name", "missing run name"),
        (
            _yaml_run() + "\n  - name: a\n    start: [1, 2]\n    end: [1, 3]\n"
            '    earliest: "11:00"\n    latest: "12:00"',
            "runs[1].name",
            "duplicate",
        ),
        ("runs:\n  - just text", "runs[0]", "mapping"),
        ("schedule: []", "schedule", "unknown top-level key"),
        ("runs: 3", "runs", "list of runs"),
    ],
)
def test_yaml_errors_name_file_and_field(tmp_path: Path, text: str, field: str, words: str):
    path = tmp_path / "day.yaml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(InputFileError) as err:
        read_runs(path)
    assert err.value.path == str(path)
    assert err.value.field == field
    assert words in err.value.message


_HEADER = "name,route,start_lat,start_lon,end_lat,end_lon,earliest,latest,vehicle,repeat"


@pytest.mark.parametrize(
    ("body", "field", "words"),
    [
        (f"{_HEADER}\na,,1,2,1,3,9:00,8:00,,", "latest", "line 2"),
        (f"{_HEADER}\na,,1,2,1,3,9:75,10:00,,", "earliest", "line 2"),
        (f"{_HEADER}\na,,1,2,1,3,09:00,10:00,,0", "repeat", "1 or more"),
        (f"{_HEADER}\na,,1,2,1,3,09:00,10:00,,x", "repeat", "whole number"),
        (f"{_HEADER}\na,,1,,1,3,09:00,10:00,,", "start_lon", "go together"),
        (f"{_HEADER}\na,,north,2,1,3,09:00,10:00,,", "start_lat", "not a number"),
        (f"{_HEADER}\na,,91,2,1,3,09:00,10:00,,", "start_lat", "latitude"),
        (f"{_HEADER}\na,,,,,,09:00,10:00,,", "route", "missing route"),
        (f"{_HEADER}\na,,1,2,1,3,09:00,10:00,,\na,,1,2,1,3,11:00,12:00,,", "name", "line 3"),
        (f"{_HEADER},colour\na,,1,2,1,3,09:00,10:00,,,red", "colour", "unknown column"),
        ("name,earliest\na,09:00", "latest", "required column"),
        ("name,name,earliest,latest\na,a,09:00,10:00", "name", "twice"),
    ],
)
def test_csv_errors_name_file_and_column(tmp_path: Path, body: str, field: str, words: str):
    path = tmp_path / "day.csv"
    path.write_text(body + "\n", encoding="utf-8")
    with pytest.raises(InputFileError) as err:
        read_runs(path)
    assert err.value.path == str(path)
    assert err.value.field == field
    assert words in err.value.message


def test_unreadable_runs_files(tmp_path: Path):
    with pytest.raises(InputFileError, match="file not found"):
        read_runs(tmp_path / "missing.yaml")
    other = tmp_path / "day.txt"
    other.write_text("x")
    with pytest.raises(InputFileError, match=r"\.yaml, \.yml or \.csv"):
        read_runs(other)
    broken = tmp_path / "day.yaml"
    broken.write_text("runs: [\n")
    with pytest.raises(InputFileError, match="not valid YAML") as err:
        read_runs(broken)
    assert err.value.path == str(broken)
    empty = tmp_path / "empty.yaml"
    empty.write_text("runs: []\n")
    with pytest.raises(InputFileError, match="no runs"):
        read_runs(empty)
