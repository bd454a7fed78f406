"""The demo run (routerisk/cli/demo_run.py): what it says agrees with the commands and files.

The demo calls the library stage by stage; here its summary and its printed lines are checked
against the commands run on the network folder it wrote, so the demo cannot tell a new user
figures the commands would not give.
"""

from __future__ import annotations

import json
import re
from pathlib import Path
from types import SimpleNamespace

import pytest

from routerisk import CAUTION, datasets
from routerisk.cli import main
from routerisk.cli.demo_run import _ranking, run_demo


def test_ranking_by_falling_risk_ties_by_name():
    s = [SimpleNamespace(name=n, risk=r) for n, r in (("b", 1.0), ("a", 1.0), ("c", 3.0))]
    assert _ranking(s) == ["c", "a", "b"]


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> tuple[Path, dict, list[str]]:
    out = tmp_path_factory.mktemp("demo") / "out"
    lines: list[str] = []
    summary = run_demo(out, echo=lines.append)
    return out, summary, lines


def _json(capsys, argv: list[str]) -> dict:
    capsys.readouterr()
    assert main(argv) == 0
    return json.loads(capsys.readouterr().out)


def test_scores_equal_the_score_command(demo, capsys):
    out, summary, _ = demo
    got = _json(
        capsys,
        ["score", str(datasets.get_path("routes")), "--network", str(out / "network"), "--json"],
    )
    assert [r["name"] for r in got["routes"]] == [r["name"] for r in summary["scores"]]
    for a, b in zip(got["routes"], summary["scores"], strict=True):
        assert a["risk"] == pytest.approx(b["risk"], abs=1e-6)
        assert a["relative_index"] == pytest.approx(b["relative_index"], abs=1e-5)
        assert a["depart"] == b["depart"]


def test_printed_scores_match_the_summary(demo):
    _, summary, lines = demo
    line = next(x for x in lines if x.startswith("scores: "))
    for r in summary["scores"]:
        assert f"{r['name']} risk {r['risk']:.2f}" in line


def test_day_plan_line_matches_the_plan_file(demo):
    out, _, lines = demo
    plan = json.loads((out / "day_plan" / "plan.json").read_text(encoding="utf-8"))
    line = next(x for x in lines if x.startswith("day plan "))
    assert f"total risk {plan['total_risk']:.2f}" in line
    assert f"{len(plan['runs'])} runs placed" in line


def test_calibrated_ranking_line_matches_a_rescore(demo, capsys):
    out, _, lines = demo
    got = _json(
        capsys,
        [
            "score",
            str(datasets.get_path("routes")),
            "--network",
            str(out / "network"),
            "--profile",
            str(out / "calibration" / "profile.yaml"),
            "--json",
        ],
    )
    ranking = [r["name"] for r in sorted(got["routes"], key=lambda r: (-r["risk"], r["name"]))]
    line = next(x for x in lines if x.startswith("ranking by risk under the calibrated"))
    assert " > ".join(ranking) in line
    held = float(re.search(r"at least ([\d.]+) %", line).group(1))
    assert 0.0 <= held <= 100.0


def test_every_page_and_text_carries_the_caution(demo):
    out, _, _ = demo
    first = CAUTION.split(";")[0]
    pages = [p for p in out.rglob("*") if p.suffix in (".html", ".txt")]
    assert len(pages) >= 6
    missing = [p.name for p in pages if first not in p.read_text(encoding="utf-8")]
    assert not missing, missing
